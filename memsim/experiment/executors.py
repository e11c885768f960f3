"""Where the runs of a sweep execute: in process, a local process pool, or Dask.

Every executor takes the same tasks and calls the same function,
:func:`run_task`, which returns the run's cache entry as JSON text.  The
result therefore does not depend on the executor: the same config and seed
give the same numbers in process, in a pool or on a cluster.

An executor yields ``(index, text)`` pairs in completion order; the caller
stores each as soon as it arrives.
"""
from __future__ import annotations

import json
import os
import traceback
from collections.abc import Iterator, Sequence
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from typing import Any

from memsim.errors import UserError


@dataclass(frozen=True)
class Task:
    """One run: a resolved config (plain dict), its cache key and the tables to keep."""

    key: str
    config: dict[str, Any]
    tables: tuple[str, ...] = ()


def run_task(task: Task) -> str:
    """Run one task; return its cache entry as JSON text, or an error document.

    Never raises for a failing run: the error travels back as
    ``{"key", "error", "traceback"}`` so the other runs of the sweep finish.
    """
    try:
        from memsim.experiment.cache import entry_text
        from memsim.experiment.run import simulate

        result = simulate(task.config)
        missing = [t for t in task.tables if t not in result.tables]
        if missing:
            raise UserError("sweep tables", ", ".join(missing),
                            "tables a run makes: " + ", ".join(result.tables))
        tables = {name: result.tables[name] for name in task.tables}
        return entry_text(task.key, result.config, result.summary, tables, result.wall_s)
    except Exception as exc:  # noqa: BLE001 - a failing run is data for the table, not a crash
        return json.dumps({"key": task.key, "error": error_line(exc),
                           "traceback": "" if isinstance(exc, UserError) else traceback.format_exc()})


def error_line(exc: BaseException) -> str:
    """One line describing ``exc`` (user errors without their class name)."""
    if isinstance(exc, UserError):
        return exc.one_line()
    return " ".join(f"{type(exc).__name__}: {exc}".split())


class InProcess:
    """Runs the tasks one after the other in this process (``workers=1``)."""

    name = "in process"

    def run(self, tasks: Sequence[Task]) -> Iterator[tuple[int, str]]:
        for i, task in enumerate(tasks):
            yield i, run_task(task)

    def close(self) -> None:
        pass


PARENT_POLL_S = 0.25


def watch_parent(parent_pid: int, poll_s: float = PARENT_POLL_S) -> None:
    """Pool-worker initializer: end this worker soon after its parent process dies.

    A parent killed without a chance to shut its pool down (``kill -9``, the
    out-of-memory killer) would otherwise leave its workers blocked on their
    task pipe for ever.  A daemon thread compares ``os.getppid()`` with the
    parent's pid (an orphan is adopted by another process) and exits the
    worker at once; this works on every POSIX system, whatever the worker is
    doing in its main thread.
    """
    import threading
    import time

    def watch() -> None:
        while os.getppid() == parent_pid:
            time.sleep(poll_s)
        os._exit(70)  # no cleanup wanted: the parent that would collect results is gone

    if os.getppid() != parent_pid:
        os._exit(70)
    threading.Thread(target=watch, name="memsim-parent-watch", daemon=True).start()


class LocalPool:
    """A pool of ``workers`` local processes (concurrent.futures).

    At most ``2 * workers`` tasks are queued at a time so that an interrupted
    sweep stops soon and cancels nothing that has started.  Workers exit on
    their own if this process dies (:func:`watch_parent`).
    """

    def __init__(self, workers: int) -> None:
        self.workers = workers
        self.name = f"{workers} local processes"
        self._pool = ProcessPoolExecutor(max_workers=workers, initializer=watch_parent,
                                         initargs=(os.getpid(),))

    def run(self, tasks: Sequence[Task]) -> Iterator[tuple[int, str]]:
        pending: dict[Future, int] = {}
        todo = iter(enumerate(tasks))

        def fill() -> None:
            for i, task in todo:
                pending[self._pool.submit(run_task, task)] = i
                if len(pending) >= 2 * self.workers:
                    break

        fill()
        while pending:
            done, _ = wait(pending, return_when=FIRST_COMPLETED)
            for fut in done:
                i = pending.pop(fut)
                try:
                    text = fut.result()
                except BrokenProcessPool as exc:
                    # A worker died (e.g. killed for memory); the run is not lost
                    # silently: it gets an error row and will be redone next time.
                    text = json.dumps({"key": tasks[i].key, "error": error_line(exc), "traceback": ""})
                yield i, text
            fill()

    def close(self) -> None:
        self._pool.shutdown(wait=True, cancel_futures=True)


class DaskCluster:
    """Runs the tasks on a Dask distributed cluster at ``address``.

    The workers must be able to import memsim (install it on each worker).
    """

    def __init__(self, address: str, connect_timeout_s: float = 20.0) -> None:
        try:
            from distributed import Client
        except ImportError:
            raise UserError("--scheduler", address,
                            "only with dask.distributed installed (pip install 'memsim[cluster]')") from None
        try:
            self._client = Client(address, timeout=f"{connect_timeout_s}s")
        except (OSError, TimeoutError, ValueError) as exc:
            raise UserError("--scheduler", address,
                            f"the address of a reachable Dask scheduler ({error_line(exc)})") from None
        self.name = f"Dask scheduler {address}"
        self._futures: list = []

    def run(self, tasks: Sequence[Task]) -> Iterator[tuple[int, str]]:
        from distributed import as_completed

        # pure=False: each task is a distinct run even if two configs were equal.
        self._futures = [self._client.submit(run_task, t, pure=False, key=f"memsim-{t.key}-{i}")
                         for i, t in enumerate(tasks)]
        index = {f.key: i for i, f in enumerate(self._futures)}
        for fut in as_completed(self._futures):
            try:
                text = fut.result()
            except Exception as exc:  # noqa: BLE001 - a lost worker is an error row, not a crash
                text = json.dumps({"key": tasks[index[fut.key]].key, "error": error_line(exc),
                                   "traceback": ""})
            yield index[fut.key], text
            fut.release()

    def close(self) -> None:
        if self._futures:
            self._client.cancel(self._futures)
        self._client.close()


def check_workers(workers: int | None) -> None:
    """Raise UserError naming ``--workers`` unless it is None or a whole number >= 1."""
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
        raise UserError("--workers", repr(workers), "a whole number >= 1")


def make_executor(workers: int | None = None, scheduler: str | None = None
                  ) -> InProcess | LocalPool | DaskCluster:
    """The executor for ``workers`` local processes or a Dask ``scheduler`` address.

    ``workers=None`` uses every core; ``workers=1`` runs in this process.
    """
    if scheduler:
        return DaskCluster(scheduler)
    check_workers(workers)
    if workers is None:
        workers = os.cpu_count() or 1
    return InProcess() if workers == 1 else LocalPool(workers)
