"""Summary of a trace: counts, mix, footprint, rate and reuse distances.

:func:`trace_info` streams a trace once; :func:`reuse_distances` gives the
LRU stack distance of every access of a line sequence and
:func:`reuse_histogram` bins them.
"""
from __future__ import annotations

import os

import numpy as np
import pandas as pd

from memsim.workload.chunk import HINT, READ, WRITE
from memsim.workload.trace_format import DEFAULT_CHUNK_SIZE, DEFAULT_MAX_LEAD_NS
from memsim.workload.trace_reader import TraceReader


def reuse_distances(lines: np.ndarray) -> np.ndarray:
    """LRU stack (reuse) distance of each access; -1 for a first access.

    The distance of an access is the number of distinct other lines touched
    since the previous access to the same line.

    Computed offline in O(n log^2 n) numpy work: with ``p`` the previous
    access and ``D_i`` the distinct lines before ``i``, the distance is
    ``D_i - 1 - #{j < p : next(j) >= i}``; the count is a 2-D dominance
    count, done level by level of a merge-sort tree over positions (every
    pair ``j < p`` is split at exactly one level).

    References
    ----------
    R. L. Mattson, J. Gecsei, D. R. Slutz, I. L. Traiger, "Evaluation
    techniques for storage hierarchies", IBM Systems Journal 9(2), 1970.
    """
    lines = np.asarray(lines, dtype=np.int64)
    n = lines.size
    out = np.full(n, -1, np.int64)
    if n < 2:
        return out
    order = np.argsort(lines, kind="stable")
    same = lines[order[1:]] == lines[order[:-1]]
    prev = np.full(n, -1, np.int64)
    nxt = np.full(n, n, np.int64)
    prev[order[1:][same]] = order[:-1][same]
    nxt[order[:-1][same]] = order[1:][same]
    first = prev < 0
    distinct_before = np.cumsum(first) - first
    q = np.flatnonzero(~first)
    a, b = prev[q], q
    count = np.zeros(q.size, np.int64)
    pos = np.arange(n, dtype=np.int64)
    width = n + 1
    for level in range(int(n - 1).bit_length()):
        left = ((pos >> level) & 1) == 0
        keys = np.sort((pos[left] >> (level + 1)) * width + nxt[left])
        qsel = np.flatnonzero(((a >> level) & 1) == 1)
        node = a[qsel] >> (level + 1)
        # Every position is a point and a query sits in a right half, so its
        # left half is full: 2**level points starting at node * 2**level in
        # `keys`.  Count them minus those whose next access is before b.
        qkeys = node * width + b[qsel]
        qorder = np.argsort(qkeys)            # sorted probes: far fewer cache misses
        below = np.empty(qsel.size, np.int64)
        below[qorder] = np.searchsorted(keys, qkeys[qorder], side="left")
        count[qsel] += (1 << level) - (below - (node << level))
    out[q] = distinct_before[q] - 1 - count
    return out


def reuse_histogram(dist: np.ndarray) -> pd.DataFrame:
    """Histogram of reuse distances in log2 bins (first accesses left out).

    Bin 0 holds distance 0; bin k >= 1 holds distances 2**(k-1) .. 2**k - 1.
    Columns: ``distance_lo``, ``distance_hi`` (inclusive), ``accesses``,
    ``fraction`` (of reuses).
    """
    d = np.asarray(dist)
    d = d[d >= 0]
    bins = np.zeros(d.size, np.int64)
    pos = d > 0
    bins[pos] = np.floor(np.log2(d[pos])).astype(np.int64) + 1
    counts = np.bincount(bins, minlength=1) if d.size else np.zeros(0, np.int64)
    k = np.arange(counts.size)
    lo = np.where(k == 0, 0, 2 ** np.maximum(k - 1, 0))
    hi = np.where(k == 0, 0, 2 ** k - 1)
    frac = counts / d.size if d.size else counts.astype(float)
    return pd.DataFrame({"distance_lo": lo.astype(np.int64), "distance_hi": hi.astype(np.int64),
                         "accesses": counts.astype(np.int64), "fraction": frac})


class _Distinct:
    """Exact count of distinct values seen, merging sorted runs geometrically."""

    def __init__(self) -> None:
        self.main = np.zeros(0, np.int64)
        self.side: list[np.ndarray] = []
        self.side_n = 0

    def add(self, values: np.ndarray) -> None:
        u = np.unique(values)
        self.side.append(u)
        self.side_n += u.size
        if self.side_n > max(self.main.size, 1 << 20):
            self._merge()

    def _merge(self) -> None:
        self.main = np.unique(np.concatenate([self.main, *self.side]))
        self.side, self.side_n = [], 0

    def count(self) -> int:
        self._merge()
        return int(self.main.size)


def trace_info(path: str | os.PathLike[str] | TraceReader, *, line_bytes: int = 64,
               footprint: int | None = None, skip_bad: bool = False,
               reuse_window: int = 1 << 20, chunk_size: int = DEFAULT_CHUNK_SIZE,
               max_lead_ns: float = DEFAULT_MAX_LEAD_NS) -> tuple[dict[str, float | int | bool],
                                                                   pd.DataFrame]:
    """Summarize a trace in one streaming pass.

    ``path`` is a trace file, or a :class:`TraceReader` (then the reading
    options here are ignored; after the call it holds ``bad_examples``).
    Returns a flat dict and the reuse-distance histogram
    (:func:`reuse_histogram`).  Counts, mix, footprint, time span and rate
    cover the whole trace; the footprint is exact and keeps 8 bytes per
    distinct line.  Reuse distances are exact over the first
    ``reuse_window`` reads and writes (hints are not data accesses); on a
    longer trace only that prefix is analysed, which overstates first-touch
    (cold) accesses: ``reuse_sampled`` says whether this happened.

    Keys: ``rows`` (well-formed trace rows), ``requests`` (line requests: a
    row of ``size_lines`` n asks for n lines; also under ``line_requests``),
    ``reads``, ``writes``, ``hints`` (line requests of each kind) and their
    ``*_fraction``; ``footprint_lines`` (distinct lines named by any request)
    and ``footprint_bytes``; ``first_time_ns``, ``last_time_ns``, ``span_ns``;
    ``request_rate_per_s`` (requests over the span); ``bad_lines`` (skipped
    with ``skip_bad``); ``reuse_window_accesses``, ``reuse_sampled``,
    ``reuse_cold_accesses`` and ``reuse_distance_median``.
    """
    reader = path if isinstance(path, TraceReader) else TraceReader(
        path, chunk_size=chunk_size, skip_bad=skip_bad, line_bytes=line_bytes, footprint=footprint,
        max_lead_ns=max_lead_ns)
    line_bytes = reader.line_bytes
    counts = np.zeros(3, np.int64)
    first_t = last_t = np.nan
    distinct = _Distinct()
    window: list[np.ndarray] = []
    in_window = 0
    data_accesses = 0
    for ch in reader:
        counts += np.bincount(ch.op, minlength=3)[:3]
        if np.isnan(first_t):
            first_t = float(ch.time_ns[0])
        last_t = float(ch.time_ns[-1])
        distinct.add(ch.line)
        acc = ch.line[ch.op != HINT]
        data_accesses += acc.size
        if in_window < reuse_window:
            take = acc[: reuse_window - in_window]
            window.append(take)
            in_window += take.size
    total = int(counts.sum())
    span = last_t - first_t if total else np.nan
    dist = reuse_distances(np.concatenate(window) if window else np.zeros(0, np.int64))
    lines = distinct.count()
    info: dict[str, float | int | bool] = {
        "rows": int(reader.rows - reader.bad_lines),
        "requests": total,
        "line_requests": total,
        "reads": int(counts[READ]), "writes": int(counts[WRITE]), "hints": int(counts[HINT]),
        "read_fraction": float(counts[READ] / total) if total else np.nan,
        "write_fraction": float(counts[WRITE] / total) if total else np.nan,
        "hint_fraction": float(counts[HINT] / total) if total else np.nan,
        "footprint_lines": lines, "footprint_bytes": lines * line_bytes,
        "first_time_ns": first_t, "last_time_ns": last_t, "span_ns": span,
        "request_rate_per_s": total / (span / 1e9) if total and span > 0 else np.nan,
        "bad_lines": reader.bad_lines,
        "reuse_window_accesses": int(dist.size),
        "reuse_sampled": bool(data_accesses > dist.size),
        "reuse_cold_accesses": int((dist < 0).sum()),
        "reuse_distance_median": float(np.median(dist[dist >= 0])) if (dist >= 0).any() else np.nan,
    }
    return info, reuse_histogram(dist)
