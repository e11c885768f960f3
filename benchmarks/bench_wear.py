"""Speed of the wear engine beside a plain numpy.bincount of the same stream.

Prints line writes per second for the wear engine with each leveler and for
``np.bincount`` over the same (logical) address chunks, and their ratio.
Goal for Start-Gap on uniform addresses: >= 20 million line writes/s on one
core.  Prints only; asserts nothing.

    python benchmarks/bench_wear.py [--lines N] [--writes W] [--chunk C]
"""
from __future__ import annotations

import argparse
import time

import numpy as np

from memsim.engine.wear import run_wear
from memsim.policy.leveling import make_leveler

SCHEMES = [
    ("start_gap", {"psi": 100}),
    ("none", {}),
    ("randomized_start_gap", {"psi": 100}),
    ("region_start_gap", {"regions": 16, "psi": 100}),
    ("security_refresh", {"interval": 100}),
    ("hot_cold_swap", {"region_lines": 256, "period": 100_000}),
    ("bit_rotation", {"inner": "start_gap", "inner_params": {"psi": 100}}),
]


def best_of(f, repeat: int) -> float:
    best = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        f()
        best = min(best, time.perf_counter() - t)
    return best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--lines", type=int, default=1 << 20)
    ap.add_argument("--writes", type=int, default=1 << 25)
    ap.add_argument("--chunk", type=int, default=1 << 18)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    rng = np.random.default_rng(0)
    chunks = [rng.integers(0, args.lines, min(args.chunk, args.writes - i))
              for i in range(0, args.writes, args.chunk)]
    total = sum(c.size for c in chunks)

    def baseline() -> None:
        acc = np.zeros(args.lines, dtype=np.int64)
        for c in chunks:
            acc += np.bincount(c, minlength=args.lines)

    t_base = best_of(baseline, args.repeat)
    rate_base = total / t_base
    print(f"lines={args.lines} writes={total} chunk={args.chunk}")
    print(f"{'numpy.bincount (baseline)':30s} {rate_base / 1e6:8.1f} M writes/s")
    for name, params in SCHEMES:
        def run(name: str = name, params: dict = params) -> None:
            run_wear(chunks, make_leveler(name, args.lines, np.random.default_rng(1),
                                          **params))
        t = best_of(run, args.repeat)
        rate = total / t
        print(f"{'wear engine ' + name:30s} {rate / 1e6:8.1f} M writes/s"
              f"   ratio to baseline {rate / rate_base:5.2f}")


if __name__ == "__main__":
    main()
