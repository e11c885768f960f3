"""Results that stream: latency statistics in fixed memory.

Both timing engines record every completed request here, in completion
order (the fast engine as it goes, the reference at the end from its
lists), so their float sums agree exactly.

Latency percentiles come from a log histogram of fixed resolution:
``BINS_PER_DECADE`` bins per decade between 1e-3 ns and 1e13 ns, so a bin
spans a ratio ``GAMMA = 10 ** (1 / BINS_PER_DECADE)``.  A bin is represented
by the value whose relative distance to both edges is the same,
``2 a b / (a + b)``, so every order statistic is known within
``REL_ERROR = (GAMMA - 1) / (GAMMA + 1)`` (about 0.0993%) of its value;
percentiles interpolated between two order statistics (numpy's default
"linear" rule) keep that bound.  (The same construction as the relative-error
sketch of Masson, Rim and Lee, "DDSketch", VLDB 2019.)  Mean, minimum and
maximum are exact.

The time-average number of requests in the system is sampled on an even
grid of times ``k * step`` that stays between ``GRID / 2`` and ``GRID``
points: the grid step doubles when the run outgrows it, and the counts of
the coarser grid are exact sums of the finer one's differences.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
from numba import njit

BINS_PER_DECADE = 1160          # 58 per 1/20 decade, so the report table's bins are unions
LOG10_MIN = -3
DECADES = 16
NBINS = DECADES * BINS_PER_DECADE
GAMMA = 10.0 ** (1.0 / BINS_PER_DECADE)
REL_ERROR = (GAMMA - 1.0) / (GAMMA + 1.0)
GRID = 8192
TABLE_BINS_PER_DECADE = 20


@njit(cache=True)
def _coarsen(grid):
    """Halve the grid's resolution: the new point m is the old point 2 m; an
    interval that starts at old index k starts at new index ceil(k / 2)."""
    for m in range(1, GRID // 2 + 1):
        grid[m] = grid[2 * m - 1] + grid[2 * m]
    for m in range(GRID // 2 + 1, GRID + 1):
        grid[m] = 0


@njit(cache=True)
def record_many(counts, fs, grid, gstep, ops, arrival, finish):
    """Count completed requests (op 0 read, 1 write), in the order given.

    The grid step lives in a local for the whole batch: written back to
    ``gstep`` once, it spares a reload after every store.
    """
    step = gstep[0]
    limit = step * GRID
    for k in range(ops.size):
        op = ops[k]
        t0 = arrival[k]
        t1 = finish[k]
        lat = t1 - t0
        if lat > 0.0:
            i = int(math.floor(math.log10(lat) * BINS_PER_DECADE)) - LOG10_MIN * BINS_PER_DECADE
            i = min(max(i, 0), NBINS - 1)
        else:
            i = 0
        counts[op, i] += 1
        fs[op, 0] += lat
        if fs[op, 3] == 0.0:
            fs[op, 1] = lat
            fs[op, 2] = lat
            fs[op, 3] = 1.0
        else:
            if lat < fs[op, 1]:
                fs[op, 1] = lat
            if lat > fs[op, 2]:
                fs[op, 2] = lat
        while t1 >= limit:
            _coarsen(grid)
            step *= 2.0
            limit = step * GRID
        grid[int(math.ceil(t0 / step))] += 1
        grid[int(math.ceil(t1 / step))] -= 1
    gstep[0] = step


class LatencyStream:
    """Fixed-size latency and occupancy statistics of a run."""

    def __init__(self) -> None:
        self.counts = np.zeros((2, NBINS), np.int64)
        self.fs = np.zeros((2, 4))               # per op: sum, min, max, seen
        self.grid = np.zeros(GRID + 1, np.int64)   # occupancy differences
        self.gstep = np.array([2.0 ** -4])         # grid step, ns

    def add(self, ops: np.ndarray, arrival: np.ndarray, finish: np.ndarray) -> None:
        """Record completions given in completion order."""
        record_many(self.counts, self.fs, self.grid, self.gstep, np.asarray(ops, np.int64),
                    np.asarray(arrival, float), np.asarray(finish, float))

    def count(self, op: int) -> int:
        return int(self.counts[op].sum())

    def percentiles(self, op: int, q: np.ndarray) -> np.ndarray:
        """Percentiles (numpy's linear rule) within ``REL_ERROR`` relative."""
        c = self.counts[op]
        n = int(c.sum())
        if n == 0:
            return np.full(len(q), np.nan)
        cum = np.cumsum(c)
        lo_min, hi_max = self.fs[op, 1], self.fs[op, 2]

        def order_stat(k: np.ndarray) -> np.ndarray:
            i = np.searchsorted(cum, k + 1)          # bin holding the k-th smallest (0-based)
            a = 10.0 ** ((i + LOG10_MIN * BINS_PER_DECADE) / BINS_PER_DECADE)
            b = a * GAMMA
            return np.clip(2 * a * b / (a + b), lo_min, hi_max)

        h = (n - 1) * np.asarray(q, float) / 100.0
        k = np.floor(h).astype(np.int64)
        lo, hi = order_stat(k), order_stat(np.minimum(k + 1, n - 1))
        return lo + (h - k) * (hi - lo)

    def stats(self, op: int, prefix: str) -> dict[str, float]:
        """Mean (exact) and p50/p95/p99 (histogram) of one operation, ns; NaN when empty."""
        n = self.count(op)
        q = self.percentiles(op, np.array([50.0, 95.0, 99.0]))
        return {f"{prefix}_mean_ns": float(self.fs[op, 0] / n) if n else float("nan"),
                f"{prefix}_p50_ns": float(q[0]), f"{prefix}_p95_ns": float(q[1]),
                f"{prefix}_p99_ns": float(q[2])}

    def mean_in_system(self, horizon_ns: float) -> float:
        """Time-average requests in the system over [0, horizon), sampled on the grid."""
        if horizon_ns <= 0:
            return 0.0
        k = min(math.ceil(horizon_ns / self.gstep[0]), GRID)
        return float(np.cumsum(self.grid[:k]).mean()) if k else 0.0

    def table(self) -> pd.DataFrame:
        """Log-binned latency histogram (20 bins a decade): columns op, lo_ns, hi_ns, count."""
        per = BINS_PER_DECADE // TABLE_BINS_PER_DECADE
        rows = []
        for code, name in ((0, "read"), (1, "write")):
            coarse = self.counts[code].reshape(-1, per).sum(axis=1)
            for j in np.flatnonzero(coarse):
                lo = 10.0 ** (LOG10_MIN + j / TABLE_BINS_PER_DECADE)
                hi = 10.0 ** (LOG10_MIN + (j + 1) / TABLE_BINS_PER_DECADE)
                rows.append((name, float(lo), float(hi), int(coarse[j])))
        return pd.DataFrame(rows, columns=["op", "lo_ns", "hi_ns", "count"])
