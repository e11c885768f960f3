"""Lifetime study: 6 levelers x 3 workloads, on a 16 GiB and a 1 TiB device.

Prints each lifetime, the scale its leveling was evaluated at, and the wall
time of each device size, to show that the cost does not grow with the
device (the modeled lines and the window stay the same).  No asserts.

    python benchmarks/bench_lifetime.py [--lines N] [--window W]
"""
from __future__ import annotations

import argparse
import time

from memsim.experiment.lifetime import lifetime

LEVELERS = ("none", "start_gap", "randomized_start_gap", "region_start_gap", "security_refresh",
            "hot_cold_swap")
WORKLOADS = {
    "uniform": {"workload.pattern": "uniform"},
    "zipf": {"workload.pattern": "zipf", "workload.zipf_exponent": 0.9},
    "hot run": {"workload.pattern": "hotspot", "workload.hot_fraction": 1 / 256,
                "workload.hot_share": 0.5, "workload.hot_layout": "contiguous"},
}


def study(capacity_gib: float, lines: int, window: int) -> float:
    t0 = time.perf_counter()
    print(f"\n{capacity_gib:g} GiB device, {lines} modeled lines, {window} writes per window")
    print(f"{'leveler':22s} {'workload':9s} {'years':>10s} {'vs ideal':>9s} {'vs even':>8s}  scale")
    for lev in LEVELERS:
        for name, wl in WORKLOADS.items():
            s = lifetime(None, write_rate_gbps=1.0, method="extrapolated", overrides={
                "array.capacity_gib": capacity_gib, "array.lines": lines, "leveling.scheme": lev,
                "workload.read_fraction": 0.0, "lifetime.window_writes": window, **wl}).summary
            if s["lifetime_years"] is None:       # no estimate: say why
                print(f"{lev:22s} {name:9s} {'null':>10s} {'':9s} {'':8s}  {s['lifetime_note'][:60]}")
                continue
            print(f"{lev:22s} {name:9s} {s['lifetime_years']:10.4g} {s['lifetime_vs_ideal']:9.3g} "
                  f"{s['lifetime_vs_even_wear']:8.3g}  {s['lifetime_leveling_scale']}")
    wall = time.perf_counter() - t0
    print(f"wall time: {wall:.1f} s")
    return wall


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--lines", type=int, default=65536)
    ap.add_argument("--window", type=int, default=2_000_000)
    a = ap.parse_args()
    small = study(16.0, a.lines, a.window)
    big = study(1024.0, a.lines, a.window)
    print(f"\n1 TiB / 16 GiB wall time: {big / small:.2f}")


if __name__ == "__main__":
    main()
