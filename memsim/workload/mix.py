"""Mixed streams: several request streams (cores, tenants) merged by arrival time.

Each stream is its own synthetic generator (with its own rate, footprint,
address offset and read/write mix, on its own random stream) or a trace.  The merge
orders requests by arrival time, ties by stream index (then by order within
the stream), so the mixed stream is a function of the streams alone, not of
how they were cut into chunks.  Write content passes through when every
stream carries it (a chunk without content drops it from the merge).  The merger records which stream each
request came from (``tags``), in the order it yields them.
"""
from __future__ import annotations

from collections.abc import Iterable, Iterator

import numpy as np

from memsim.workload.chunk import Chunk


class StreamMerge:
    """Merge chunk iterators of several streams into one, in time order.

    Parameters
    ----------
    streams:
        One iterable of chunks per stream (each in time order).
    offsets:
        Line offset added to each stream's lines (its place in the address space).
    """

    def __init__(self, streams: list[Iterable[Chunk]], offsets: list[int]) -> None:
        self.streams = [iter(s) for s in streams]
        self.offsets = offsets
        self.tags: list[np.ndarray] = []
        self.readers: list = []          # trace readers of trace streams (to close, to count bad rows)
        self.has_data = False            # every stream's chunks carry write content

    def stream_of_requests(self) -> np.ndarray:
        """Stream index of every request yielded so far, in order."""
        return np.concatenate(self.tags) if self.tags else np.empty(0, np.int16)

    def __iter__(self) -> Iterator[Chunk]:
        k = len(self.streams)
        bufs: list[Chunk | None] = [None] * k
        live = [True] * k
        while True:
            for j in range(k):
                while live[j] and (bufs[j] is None or len(bufs[j]) == 0):
                    nxt = next(self.streams[j], None)
                    if nxt is None:
                        live[j] = False
                    else:
                        bufs[j] = Chunk(nxt.time_ns, nxt.op, nxt.line + self.offsets[j], nxt.data)
            # Nothing later than the earliest last-buffered time of a live
            # stream can be overtaken: emit up to there.
            horizon = min((float(bufs[j].time_ns[-1]) for j in range(k) if live[j]), default=np.inf)
            parts, tags = [], []
            for j in range(k):
                b = bufs[j]
                if b is None or len(b) == 0:
                    continue
                cut = int(np.searchsorted(b.time_ns, horizon, side="right"))
                if cut:
                    parts.append(b.take(slice(0, cut)))
                    tags.append(np.full(cut, j, np.int16))
                    bufs[j] = b.take(slice(cut, None))
            if not parts:
                if not any(live):
                    return
                continue
            merged = Chunk.concat(parts)
            tag = np.concatenate(tags)
            order = np.lexsort((tag, merged.time_ns))      # by time, ties by stream (stable)
            self.tags.append(tag[order])
            yield merged.take(order)
