"""Vectorized helpers shared by the wear levelers.

Most levelers act "every ``period`` writes" (to the whole memory or to one
region).  The helpers here turn such counters into per-write arrays and into
the list of step events of a chunk without a Python loop per write.
"""
from __future__ import annotations

import numpy as np

from memsim.errors import require_int

_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)


def check_int(key: str, value: object, lo: int, hi: int | None = None) -> int:
    """Validate an integer leveler parameter; raise :class:`memsim.errors.ConfigError`."""
    return require_int(f"leveling.{key}", value, lo, hi)


def mix64(x: np.ndarray) -> np.ndarray:
    """SplitMix64 finalizer on a uint64 array (a fast keyed-hash building block)."""
    x = np.asarray(x, dtype=np.uint64) + _GOLDEN
    x = (x ^ (x >> np.uint64(30))) * _M1
    x = (x ^ (x >> np.uint64(27))) * _M2
    return x ^ (x >> np.uint64(31))


def step_runs(w0: int, n: int, period: int) -> tuple[np.ndarray, np.ndarray]:
    """Runs of equal step count over a chunk of ``n`` writes.

    A step happens after every ``period``-th write.  The write with global
    index ``w0 + i`` sees ``(w0 + i) // period`` completed steps.  Returns the
    distinct step counts and how many writes of the chunk see each, so that
    ``np.repeat(values, lengths)`` gives the per-write count without a
    division per write.
    """
    s0 = w0 // period
    s1 = (w0 + n) // period
    vals = np.arange(s0, s1 + 1, dtype=np.int64)
    starts = np.maximum(vals * period - w0, 0)
    ends = np.minimum((vals + 1) * period - w0, n)
    return vals, ends - starts


def step_events(w0: int, n: int, period: int) -> tuple[np.ndarray, np.ndarray]:
    """Steps completed inside a chunk: (step index, chunk index it follows)."""
    j = np.arange(w0 // period, (w0 + n) // period, dtype=np.int64)
    return j, (j + 1) * period - 1 - w0


def group_ranks(gid: np.ndarray, n_groups: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rank of each write among the writes of its group within the chunk.

    Returns ``(order, rank, counts)`` where ``order`` lists chunk indices
    sorted by group (stable), ``rank[i]`` is how many earlier writes of the
    chunk belong to the group of write ``i`` and ``counts`` the writes per
    group.
    """
    n = gid.size
    # Small integer keys make numpy's stable sort a radix sort.
    key = gid.astype(np.uint16) if n_groups <= 1 << 16 else gid
    order = np.argsort(key, kind="stable")
    counts = np.bincount(gid, minlength=n_groups).astype(np.int64)
    first = np.cumsum(counts) - counts
    rank = np.empty(n, dtype=np.int64)
    rank[order] = np.arange(n, dtype=np.int64) - np.repeat(first, counts)
    return order, rank, counts


def grouped_step_events(
    w_before: np.ndarray, counts: np.ndarray, order: np.ndarray, period: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Steps of per-group counters completed inside a chunk.

    Group ``g`` had ``w_before[g]`` writes before the chunk and receives
    ``counts[g]`` in it; it steps after each of its ``period``-th writes.
    Returns ``(group, step index, chunk index it follows)`` sorted by chunk
    index.
    """
    s0 = w_before // period
    ns = (w_before + counts) // period - s0
    total = int(ns.sum())
    if total == 0:
        e = np.empty(0, dtype=np.int64)
        return e, e.copy(), e.copy()
    grp = np.repeat(np.arange(ns.size, dtype=np.int64), ns)
    within = np.arange(total, dtype=np.int64) - np.repeat(np.cumsum(ns) - ns, ns)
    j = s0[grp] + within
    rank = (j + 1) * period - 1 - w_before[grp]
    first = np.cumsum(counts) - counts
    after = order[first[grp] + rank]
    srt = np.argsort(after, kind="stable")
    return grp[srt], j[srt], after[srt]


def concat_moves(parts: list[tuple[np.ndarray, np.ndarray, np.ndarray]]) -> tuple[
    np.ndarray, np.ndarray, np.ndarray
]:
    """Concatenate (src, dst, after) triples and order them by ``after``."""
    if not parts:
        e = np.empty(0, dtype=np.int64)
        return e, e.copy(), e.copy()
    src = np.concatenate([p[0] for p in parts])
    dst = np.concatenate([p[1] for p in parts])
    after = np.concatenate([p[2] for p in parts])
    srt = np.argsort(after, kind="stable")
    return src[srt], dst[srt], after[srt]
