"""A DRAM cache in front of the PCM: a filter on the request stream.

The cache acts before either timing engine, on the chunks of host requests,
so both engines see the same PCM stream by construction.  It is
set-associative (``capacity_lines / ways`` sets, set = line mod sets),
write-back and write-allocate:

* a read hit and every write complete at arrival + ``hit_ns`` and never
  reach the PCM;
* a read miss becomes a PCM read of the line (the line fill) at the
  request's arrival (the tag check overlaps the PCM access); the host read
  completes when the PCM read does;
* a write miss allocates the line without a fill: every request writes a
  whole line, so nothing of the old content is needed (common practice for
  full-line writes);
* a victim that is dirty is written back: a PCM write of the victim's line,
  with the content last written to it, at the time of the eviction.

Dirty lines still in the cache when the stream ends are not written back
(the run measures the PCM traffic during the stream).  Hints pass through to
the PCM side unchanged.  Replacement is ``lru`` (least recently used) or
``fifo`` (first in, first out: hits do not refresh a line).

The per-request loop is compiled (numba) over a chunk; state lives in a few
numpy arrays, so the result does not depend on how the stream is cut.
"""
from __future__ import annotations

from collections.abc import Iterable, Iterator

import numpy as np
from numba import njit

from memsim.engine.stream import LatencyStream
from memsim.workload.chunk import HINT, READ, WRITE, Chunk

REPLACEMENTS = ("lru", "fifo")

# What became of each host request: it went on to the PCM (a read miss, a
# hint), hit, or was a write miss the cache took without the PCM.
PASSED, HIT, ABSORBED = 0, 1, 2

# Counter slots.
C_READ_HITS, C_READ_MISSES, C_WRITE_HITS, C_WRITE_MISSES, C_WRITEBACKS, C_CLOCK = range(6)


@njit(cache=True)
def _filter(op, line, time, data, has_data, tags, dirty, stamp, store, lru, counts,
            out_op, out_line, out_time, out_data, hit):
    """One chunk through the cache; returns the number of PCM requests written to ``out_*``."""
    sets, ways = tags.shape
    n_out = 0
    for k in range(op.size):
        o = op[k]
        hit[k] = PASSED
        if o == HINT:
            out_op[n_out] = o
            out_line[n_out] = line[k]
            out_time[n_out] = time[k]
            n_out += 1
            continue
        ln = line[k]
        s = ln % sets
        w = -1
        for j in range(ways):
            if tags[s, j] == ln:
                w = j
                break
        if w >= 0:
            hit[k] = HIT
            if lru:
                counts[C_CLOCK] += 1
                stamp[s, w] = counts[C_CLOCK]
            if o == WRITE:
                counts[C_WRITE_HITS] += 1
                dirty[s, w] = True
                if has_data:
                    store[s * ways + w, :] = data[k, :]
            else:
                counts[C_READ_HITS] += 1
            continue
        # Miss: an empty way, else the oldest stamp.
        v = -1
        for j in range(ways):
            if tags[s, j] < 0:
                v = j
                break
        if v < 0:
            v = 0
            for j in range(1, ways):
                if stamp[s, j] < stamp[s, v]:
                    v = j
        if o == READ:
            counts[C_READ_MISSES] += 1
            out_op[n_out] = READ
            out_line[n_out] = ln
            out_time[n_out] = time[k]
            n_out += 1
        else:
            counts[C_WRITE_MISSES] += 1
            hit[k] = ABSORBED       # done at arrival + hit_ns, though the line was not there
        if tags[s, v] >= 0 and dirty[s, v]:
            counts[C_WRITEBACKS] += 1
            out_op[n_out] = WRITE
            out_line[n_out] = tags[s, v]
            out_time[n_out] = time[k]
            if has_data:
                out_data[n_out, :] = store[s * ways + v, :]
            n_out += 1
        tags[s, v] = ln
        dirty[s, v] = o == WRITE
        counts[C_CLOCK] += 1
        stamp[s, v] = counts[C_CLOCK]
        if o == WRITE and has_data:
            store[s * ways + v, :] = data[k, :]
    return n_out


class DramCache:
    """Cache state and counters; :meth:`filter` turns host chunks into PCM chunks.

    Parameters
    ----------
    capacity_lines, ways:
        Lines the cache holds and lines per set (``capacity_lines`` is a
        multiple of ``ways``).
    replacement:
        ``lru`` or ``fifo``.
    hit_ns:
        Latency of a hit (and of every write), ns.
    line_bytes:
        Line size, bytes (for the stored content of dirty lines).
    """

    def __init__(self, capacity_lines: int, ways: int, replacement: str, hit_ns: float,
                 line_bytes: int) -> None:
        if replacement not in REPLACEMENTS:
            raise ValueError(f"unknown replacement {replacement!r}")
        if capacity_lines % ways:
            raise ValueError("capacity_lines must be a multiple of ways")
        sets = capacity_lines // ways
        self.tags = np.full((sets, ways), -1, np.int64)
        self.dirty = np.zeros((sets, ways), np.bool_)
        self.stamp = np.zeros((sets, ways), np.int64)
        self.store: np.ndarray | None = None        # allocated on the first chunk with content
        self.line_bytes = line_bytes
        self.lru = replacement == "lru"
        self.hit_ns = hit_ns
        self.counts = np.zeros(6, np.int64)
        self.hits = LatencyStream()                  # requests the cache completed
        self.last_hit_finish_ns = 0.0
        # Per host request (op, arrival, hit), kept only when asked: per-stream
        # keys of a mix attribute each request to its stream.
        self.keep_host = False
        self.host_log: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []

    @classmethod
    def from_config(cls, cfg) -> DramCache | None:
        """The cache of a run config, or None when ``cache.enabled`` is false."""
        c = getattr(cfg, "cache", None)
        if c is None or not c.enabled:
            return None
        return cls(c.capacity_lines, c.ways, c.replacement, c.hit_ns, cfg.array.line_bytes)

    def filter(self, chunk: Chunk) -> Chunk:
        """The PCM requests of one chunk of host requests (same time order)."""
        n = len(chunk)
        has_data = chunk.data is not None
        if has_data and self.store is None:
            self.store = np.zeros((self.tags.size, self.line_bytes), np.uint8)
        store = self.store if has_data else np.zeros((1, 1), np.uint8)
        data = chunk.data if has_data else np.zeros((1, 1), np.uint8)
        out_op = np.empty(2 * n, np.int8)
        out_line = np.empty(2 * n, np.int64)
        out_time = np.empty(2 * n)
        out_data = np.zeros((2 * n if has_data else 1, self.line_bytes if has_data else 1), np.uint8)
        hit = np.empty(n, np.int8)
        m = _filter(chunk.op, chunk.line, chunk.time_ns, data, has_data, self.tags, self.dirty,
                    self.stamp, store, self.lru, self.counts, out_op, out_line, out_time, out_data, hit)
        if self.keep_host:
            self.host_log.append((chunk.op.copy(), chunk.time_ns.copy(), hit.copy()))
        done_here = hit != PASSED
        if done_here.any():
            t = chunk.time_ns[done_here]
            done = t + self.hit_ns
            self.hits.add(chunk.op[done_here], t, done)
            self.last_hit_finish_ns = max(self.last_hit_finish_ns, float(done.max()))
        return Chunk(out_time[:m], out_op[:m], out_line[:m], out_data[:m] if has_data else None)

    def run(self, chunks: Iterable[Chunk]) -> Iterator[Chunk]:
        for ch in chunks:
            out = self.filter(ch)
            if len(out):
                yield out

    def host_requests(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(op, arrival_ns, fate) of every host request so far, in order (``keep_host`` only).

        ``fate`` is ``HIT``, ``ABSORBED`` (a write miss: the cache completes
        it) or ``PASSED`` (a read miss: its line fill is a PCM read, in the
        same order as the PCM reads).
        """
        if not self.host_log:
            return np.empty(0, np.int8), np.empty(0), np.empty(0, np.int8)
        return tuple(np.concatenate(parts) for parts in zip(*self.host_log))

    # ------------------------------------------------------------ results
    @property
    def read_hits(self) -> int:
        return int(self.counts[C_READ_HITS])

    @property
    def read_misses(self) -> int:
        return int(self.counts[C_READ_MISSES])

    @property
    def write_hits(self) -> int:
        return int(self.counts[C_WRITE_HITS])

    @property
    def write_misses(self) -> int:
        return int(self.counts[C_WRITE_MISSES])

    @property
    def writebacks(self) -> int:
        return int(self.counts[C_WRITEBACKS])

    def accesses(self) -> int:
        """Line accesses of the DRAM array: every host request, every fill, every victim read out."""
        return (self.read_hits + self.read_misses + self.write_hits + self.write_misses
                + self.read_misses + self.writebacks)


def merged_latency(pcm: LatencyStream, hits: LatencyStream) -> LatencyStream:
    """Host-side latency: the PCM reads (line fills) plus the requests the cache completed.

    The PCM writes are write-backs, which no host request waits for, so the
    host's write row is the cache's alone.  Only the histogram and the
    sums are merged (the occupancy grid is not: it stays per side).
    """
    out = LatencyStream()
    out.counts[READ] = pcm.counts[READ] + hits.counts[READ]
    out.counts[WRITE] = hits.counts[WRITE]
    out.fs[WRITE] = hits.fs[WRITE]
    a, b = pcm.fs[READ], hits.fs[READ]
    if a[3] and b[3]:
        out.fs[READ] = (a[0] + b[0], min(a[1], b[1]), max(a[2], b[2]), 1.0)
    else:
        out.fs[READ] = a if a[3] else b
    return out
