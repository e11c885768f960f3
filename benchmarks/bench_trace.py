"""Benchmark: write a large synthetic trace, stream it back, compare with a baseline.

Writes a synthetic trace (gzip text and Parquet) of ``--requests`` requests
(default 50 million), reads each back with :func:`memsim.workload.trace.read_trace`
and prints the read rate (requests/s), the peak resident memory while reading,
and the ratio against a baseline measured in the same process on the same file:

* gzip text: ``pandas.read_csv`` in chunks (C parser, no validation, no
  expansion of ``size_lines``);
* Parquet: ``pyarrow.parquet.ParquetFile(pre_buffer=False).iter_batches``
  (no validation).

Prints figures only; it asserts nothing.  Example::

    python benchmarks/bench_trace.py --requests 5000000
"""
from __future__ import annotations

import argparse
import os
import resource
import shutil
import tempfile
import threading
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Self

import numpy as np
import pandas as pd
import pyarrow.parquet as pq

from memsim.workload.chunk import Chunk
from memsim.workload.trace import read_trace, write_trace

_PAGE = os.sysconf("SC_PAGE_SIZE") if hasattr(os, "sysconf") else 4096


def synthetic(n: int, rng: np.random.Generator, chunk: int = 1 << 20) -> Iterator[Chunk]:
    """Demo workload: Poisson arrivals every 10 ns on average, 60/35/5 %
    reads/writes/hints, 80 % of accesses to a hot set of 64 Ki lines and the
    rest spread over 1 Gi lines; one request in eight is the second line of
    a two-line access (so text rows merge runs)."""
    t0 = 0.0
    done = 0
    while done < n:
        m = min(chunk, n - done)
        t = t0 + np.cumsum(rng.exponential(10.0, m))
        op = rng.choice(3, m, p=[0.60, 0.35, 0.05]).astype(np.int8)
        line = np.where(rng.random(m) < 0.8, rng.integers(0, 1 << 16, m),
                        rng.integers(0, 1 << 30, m))
        pair = np.flatnonzero(rng.random(m) < 0.125)
        pair = pair[pair > 0]
        t[pair], op[pair], line[pair] = t[pair - 1], op[pair - 1], line[pair - 1] + 1
        t = np.maximum.accumulate(t)
        t0 = float(t[-1])
        yield Chunk(t, op, line)
        done += m


class PeakRSS:
    """Samples this process's resident memory in a thread; keeps the peak."""

    def __init__(self, every_s: float = 0.005) -> None:
        self.every_s = every_s
        self.start = self.peak = self._rss()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    @staticmethod
    def _rss() -> int:
        try:
            with open("/proc/self/statm") as fh:
                return int(fh.read().split()[1]) * _PAGE
        except OSError:          # not Linux: fall back to the lifetime peak
            return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024

    def _run(self) -> None:
        while not self._stop.is_set():
            self.peak = max(self.peak, self._rss())
            time.sleep(self.every_s)

    def __enter__(self) -> Self:
        self.start = self.peak = self._rss()
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join()
        self.peak = max(self.peak, self._rss())


def measure(fn: Callable[[], int]) -> tuple[int, float, PeakRSS]:
    with PeakRSS() as mem:
        t = time.perf_counter()
        count = fn()
        dt = time.perf_counter() - t
    return count, dt, mem


def ours(path: Path) -> int:
    n = 0
    for ch in read_trace(path):
        n += len(ch)
    return n


def pandas_baseline(path: Path) -> int:
    n = 0
    for df in pd.read_csv(path, chunksize=1 << 20, comment="#"):
        n += int(df["size_lines"].sum())       # requests, as ours counts them
    return n


def parquet_baseline(path: Path) -> int:
    n = 0
    for batch in pq.ParquetFile(path, pre_buffer=False).iter_batches(batch_size=1 << 20):
        n += batch.num_rows
    return n


def report(label: str, count: int, dt: float, mem: PeakRSS) -> float:
    rate = count / dt
    print(f"  {label:<34} {count:>12,d} req  {dt:8.2f} s  {rate / 1e6:8.2f} M req/s  "
          f"peak RSS {mem.peak / 2**20:8.1f} MiB (+{(mem.peak - mem.start) / 2**20:.1f})")
    return rate


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--requests", type=int, default=50_000_000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--dir", type=Path, default=None, help="where to write (default: a temp dir)")
    ap.add_argument("--gzip-level", type=int, default=1)
    ap.add_argument("--keep", action="store_true", help="keep the trace files")
    args = ap.parse_args()
    work = Path(tempfile.mkdtemp(prefix="bench_trace_", dir=args.dir))
    n = args.requests
    print(f"synthetic trace of {n:,d} requests in {work}")
    try:
        paths = {"gzip text": work / "bench.csv.gz", "parquet": work / "bench.parquet"}
        for label, path in paths.items():
            t = time.perf_counter()
            level = {"compress_level": args.gzip_level} if path.suffix == ".gz" else {}
            write_trace(path, synthetic(n, np.random.default_rng(args.seed)), **level)
            dt = time.perf_counter() - t
            print(f"  write {label:<28} {dt:8.2f} s  {n / dt / 1e6:8.2f} M req/s  "
                  f"{path.stat().st_size / 2**20:9.1f} MiB")
        print("read back (streaming):")
        for label, path, base_label, base in (
                ("gzip text", paths["gzip text"], "pandas.read_csv chunked", pandas_baseline),
                ("parquet", paths["parquet"], "pyarrow iter_batches", parquet_baseline)):
            r_ours = report(f"read_trace {label}", *measure(lambda p=path: ours(p)))
            r_base = report(f"baseline {base_label}", *measure(lambda p=path, f=base: f(p)))
            print(f"  ratio read_trace / baseline ({label}): {r_ours / r_base:.2f}")
        print(f"process peak RSS (ru_maxrss): "
              f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.1f} MiB")
    finally:
        if args.keep:
            print(f"kept {work}")
        else:
            shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
