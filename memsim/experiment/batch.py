"""The batch loop shared by sweeps and comparisons.

A batch is a list of :class:`~memsim.experiment.executors.Task` (one per run;
two runs with the same resolved config share a cache key).  :func:`execute`
takes what the cache already holds, runs every other distinct config once on
an executor, stores each finished run in the cache as it arrives and shows
one progress bar.  The rules on what a batch may vary (:data:`RESERVED`,
:func:`check_key`), how replication seeds derive (:func:`derive_seeds`) and
which summary keys become columns (:func:`choose_metrics`) live here too, so
``sweep`` and ``compare`` cannot drift apart on them.
"""
from __future__ import annotations

import difflib
import json
import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from memsim.config import RunConfig
from memsim.config.load import check_stream_field, stream_key
from memsim.errors import ConfigError
from memsim.experiment.cache import RunCache
from memsim.experiment.executors import Task, check_workers, make_executor
from memsim.seeds import stream_seed

# Seeds come from the batch's replications and results always go to its own folder.
RESERVED: tuple[str, ...] = ("run.seed", "run.name", "run.out_dir")


def flatten(table: Mapping[str, Any], prefix: str = "") -> dict[str, Any]:
    """Nested TOML tables -> dotted keys (``{"write": {"scheme": x}}`` -> ``{"write.scheme": x}``)."""
    out: dict[str, Any] = {}
    for k, v in table.items():
        key = f"{prefix}{k}".replace("__", ".")
        if isinstance(v, Mapping):
            out.update(flatten(v, key + "."))
        else:
            out[key] = v
    return out


def check_key(key: str, where: str, reserved_why: str = "") -> None:
    """Raise ConfigError unless ``key`` names a run-config field (``section.field``) a batch may vary.

    ``reserved_why`` says, in the caller's words, where the reserved keys
    come from instead.
    """
    if stream_key(key) is not None:
        # One stream's setting; which streams exist is checked against the config it applies to.
        check_stream_field(key, where)
        return
    parts = key.split(".")
    sections = RunConfig.model_fields
    if parts[0] == "streams":
        raise ConfigError(where, f"unknown key '{key}'", "streams[I].FIELD (I from 0) or streams.NAME.FIELD "
                                                         "for one stream's setting")
    if len(parts) != 2 or parts[0] not in sections:
        raise ConfigError(where, f"unknown key '{key}'", "section.key with a section among "
                          + ", ".join(sections))
    fields = sections[parts[0]].annotation.model_fields
    if parts[1] not in fields:
        raise ConfigError(where, f"unknown key '{key}'", f"one of {parts[0]}." + f", {parts[0]}.".join(fields))
    if key in RESERVED:
        raise ConfigError(where, key, "a key other than " + ", ".join(RESERVED)
                          + (f" ({reserved_why})" if reserved_why else ""))


def derive_seeds(base_seed: int, n: int) -> list[int]:
    """Seeds of replications ``0 .. n-1``: sub-stream ``i`` of stream ``replicas`` of ``base_seed``.

    Replication ``i`` gets the same seed whatever ``n`` is, and the seeds are
    well apart even for neighbouring base seeds.
    """
    return [int(stream_seed(base_seed, "replicas", i).generate_state(1)[0]) for i in range(n)]


def metric_hint(missing: Sequence[str], known: Sequence[str]) -> str:
    """A short 'allowed' for unknown metric names: the closest summary keys, not all of them."""
    close = list(dict.fromkeys(c for m in missing for c in difflib.get_close_matches(m, known, n=3, cutoff=0.5)))
    shown = close or list(known[:5])
    return (f"summary keys such as {', '.join(shown)} ({len(known)} in all; "
            "memsim run prints them)")


def _is_number(v: Any) -> bool:
    return (isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool)
            and math.isfinite(float(v)))


def _is_plain(v: Any) -> bool:
    return isinstance(v, (int, float, bool, str)) or v is None


def choose_metrics(summaries: Sequence[Mapping[str, Any] | None], asked: Sequence[str] | None,
                   where: str, *, shown: Sequence[str] | None = None,
                   numbers_only: bool = False) -> list[str]:
    """The summary keys a batch keeps as columns.

    A key is reported when some run gives it a plain value (with
    ``numbers_only``: a finite number).  Asked-for keys must each be
    reported, else a ConfigError at ``where`` names the closest ones (when no
    run reported anything, as when every run failed, the asked keys are
    kept).  Without ``asked``: the keys of ``shown`` that are reported, in
    that order, or every reported key when ``shown`` is None.
    """
    keep = _is_number if numbers_only else _is_plain
    reported = list(dict.fromkeys(k for s in summaries if s for k, v in s.items() if keep(v)))
    if asked is None:
        return reported if shown is None else [m for m in shown if m in reported]
    missing = [m for m in asked if m not in reported]
    if missing and reported:
        raise ConfigError(where, ", ".join(map(repr, missing)), metric_hint(missing, reported))
    return list(asked)


@dataclass
class Execution:
    """Finished runs (cache entries by key), failed runs (error documents by key) and counts.

    ``ran`` and ``reused`` count distinct configs; ``reused_runs`` counts the
    batch's runs (tasks) served by the cache.
    """

    entries: dict[str, dict[str, Any]]
    failures: dict[str, dict[str, Any]]
    ran: int
    reused: int
    reused_runs: int
    executor: str
    cache_error: str = ""
    tracebacks: list[str] = field(default_factory=list)


def execute(tasks: Sequence[Task], *, workers: int | None = None, scheduler: str | None = None,
            cache: RunCache | None = None, tables: tuple[str, ...] = (),
            progress: bool | None = None, desc: str = "batch") -> Execution:
    """Run the tasks not found in ``cache`` (each distinct config once); store what finishes.

    ``workers=None`` starts one local process per core, at most one per
    distinct config to run; ``scheduler`` sends the runs to a Dask cluster.
    A cache entry counts only if it holds every table in ``tables``.  The
    progress bar counts the batch's runs (None: shown only on a terminal).
    """
    from tqdm import tqdm

    check_workers(workers)
    entries: dict[str, dict[str, Any]] = {}
    if cache is not None:
        for t in tasks:
            if t.key not in entries and (e := cache.get(t.key, tables)) is not None:
                entries[t.key] = e
    todo = list({t.key: t for t in tasks if t.key not in entries}.values())
    reused, reused_runs = len(entries), sum(1 for t in tasks if t.key in entries)
    runs_of: dict[str, int] = {}
    for t in tasks:
        runs_of[t.key] = runs_of.get(t.key, 0) + 1
    failures: dict[str, dict[str, Any]] = {}
    n = workers if workers is not None else min(os.cpu_count() or 1, max(1, len(todo)))
    executor = make_executor(n, scheduler) if todo else None
    cache_error = ""
    bar = tqdm(total=len(tasks), initial=reused_runs, desc=desc, unit="run",
               disable=None if progress is None else not progress, dynamic_ncols=True)
    try:
        for _, text in (executor.run(todo) if executor else ()):
            doc = json.loads(text)
            if "error" in doc:
                failures[doc["key"]] = doc
                bar.set_postfix(failed=len(failures))
            else:
                if cache is not None:
                    try:
                        cache.put_text(doc["key"], text)
                    except OSError as exc:
                        # Keep running: the results stay in memory and are saved at the end.
                        cache_error = (f"{cache.folder}: cache entries could not be written "
                                       f"({exc.strerror or exc}); the finished runs were kept in memory")
                        cache = None
                entries[doc["key"]] = doc
            bar.update(runs_of[doc["key"]])
    finally:
        bar.close()
        if executor is not None:
            executor.close()
    return Execution(entries, failures, len(todo) - len(failures), reused, reused_runs,
                     executor.name if executor is not None else "the cache", cache_error,
                     [d["traceback"] for d in failures.values() if d.get("traceback")])


def probe_metrics(metrics: Sequence[str] | None, tasks: Sequence[Task], where: str,
                  probe_points: int = 16) -> None:
    """Raise a ConfigError at ``where`` when a requested metric is no summary key, before any real run.

    The summary keys come from short runs (at most 2,000 requests) of the
    tasks' configs, taken in order until every requested name has turned up;
    a config's kind (write scheme, refresh policy, ...) decides its keys, not
    its length.  After ``probe_points`` distinct configs without a verdict
    the check is left to the end of the batch.
    """
    from memsim.experiment.run import simulate

    if not metrics:
        return
    wanted, known = set(metrics), []
    seen: set[str] = set()
    for t in tasks:
        if t.key in seen:
            continue
        seen.add(t.key)
        if len(seen) > probe_points:
            return
        cfg = json.loads(json.dumps(t.config))
        wl = cfg["workload"]
        wl["requests"] = min(int(wl["requests"]), 2000)
        try:
            summary = simulate(cfg).summary
        except Exception:  # noqa: BLE001 - the real run reports its own failure
            return
        known.extend(k for k in summary if k not in known)
        if wanted <= set(known):
            return
    missing = [m for m in metrics if m not in known]
    raise ConfigError(where, ", ".join(map(repr, missing)), metric_hint(missing, known))
