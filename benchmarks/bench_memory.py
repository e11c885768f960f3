"""Peak memory of the fast timing engine: 2 M against 20 M requests.

Same workload as ``bench_timing.py`` (8 banks, 70% reads, near saturation).
Each size runs in a fresh process so each peak (resident set high-water mark)
is its own.  Targets: below 1 GB at 20 M requests and within 1.5x of the peak
at 2 M (per-request arrays are not kept: ``run.keep_requests = false``).
Prints; does not assert.

    python benchmarks/bench_memory.py [--small N] [--large N]
"""
from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time


def child(n: int) -> None:
    from memsim import simulate

    ov = {"array.channels": 1, "array.banks": 8, "array.lines": 65536,
          "workload.requests": n, "workload.read_fraction": 0.7,
          "workload.arrival": "poisson", "workload.interval_ns": 15.5,
          "write.scheme": "data_comparison", "run.seed": 5, "run.engine": "fast"}
    t0 = time.perf_counter()
    s = simulate(None, overrides=ov).summary
    wall = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024     # Linux: KiB
    print(json.dumps({"requests": s["requests"], "engine": s["engine"], "wall_s": wall,
                      "peak_mb": peak_mb, "p99_read_ns": s["read_latency_p99_ns"]}))


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--small", type=int, default=2_000_000)
    ap.add_argument("--large", type=int, default=20_000_000)
    ap.add_argument("--child", type=int, default=0)
    a = ap.parse_args()
    if a.child:
        child(a.child)
        return
    res = {}
    for n in (a.small, a.large):
        out = subprocess.run([sys.executable, __file__, "--child", str(n)], check=True,
                             capture_output=True, text=True).stdout
        res[n] = json.loads(out.strip().splitlines()[-1])
        r = res[n]
        print(f"{n:>12,} requests  engine {r['engine']}  {r['wall_s']:7.1f} s  "
              f"{n / r['wall_s']:12,.0f} requests/s  peak {r['peak_mb']:8.1f} MB")
    ratio = res[a.large]["peak_mb"] / res[a.small]["peak_mb"]
    print(f"peak ratio {a.large:,} / {a.small:,} requests: {ratio:.2f}x  (target <= 1.5x, and < 1024 MB)")


if __name__ == "__main__":
    main()
