"""Sweep wall time with one and with two local worker processes.

The same grid (3 write schemes x 4 read fractions x 2 seeds = 24 runs on
workloads/demo.toml with small request counts) runs first in this process
(``workers=1``), then on a pool of two processes.  Nothing is cached (no
results folder), so both do all the work.  Prints both wall times and the
speed-up (target: >= 1.7x on 2 cores) and checks that the two tables are
equal.  Prints; does not assert.

    python benchmarks/bench_sweep.py [--requests N] [--seeds N]
"""
from __future__ import annotations

import argparse
import os
import time
from pathlib import Path

from memsim.experiment.sweep import sweep

DEMO = Path(__file__).resolve().parents[1] / "workloads" / "demo.toml"
GRID = {"write.scheme": ["full_line", "data_comparison", "flip_n_write"],
        "workload.read_fraction": [0.5, 0.6, 0.7, 0.8]}


def cpu_s() -> float:
    # This process and its finished children (the pool's workers once it shut down).
    t = os.times()
    return t.user + t.system + t.children_user + t.children_system


def timed(workers: int, requests: int, seeds: int):
    t0, c0 = time.perf_counter(), cpu_s()
    df = sweep(DEMO, GRID, seeds=seeds, workers=workers, fixed={"workload.requests": requests},
               metrics=["throughput_gbps", "read_latency_p99_ns", "energy_per_bit_pj"], progress=False)
    return time.perf_counter() - t0, cpu_s() - c0, df


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--requests", type=int, default=10000, help="requests per run")
    ap.add_argument("--seeds", type=int, default=2, help="replications per point")
    args = ap.parse_args()
    runs = 12 * args.seeds
    print(f"sweep of {runs} runs ({args.requests} requests each), {os.cpu_count()} cores")
    # Other work on the machine steals cores from the pool; the load shows it.
    print(f"  load average before: {os.getloadavg()[0]:.2f}")
    t1, c1, d1 = timed(1, args.requests, args.seeds)
    print(f"  1 worker  (in process):   {t1:6.2f} s wall, {c1:6.2f} s CPU  ({runs / t1:.2f} runs/s)")
    t2, c2, d2 = timed(2, args.requests, args.seeds)
    print(f"  2 workers (process pool): {t2:6.2f} s wall, {c2:6.2f} s CPU  ({runs / t2:.2f} runs/s)")
    print(f"  speed-up: {t1 / t2:.2f}x (target >= 1.7x on 2 cores)")
    print(f"  tables equal: {d1.equals(d2)}")


if __name__ == "__main__":
    main()
