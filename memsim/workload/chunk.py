"""A chunk of requests: a struct of numpy arrays, never one object per request."""
from __future__ import annotations

from collections.abc import Iterable, Iterator
from dataclasses import dataclass

import numpy as np

READ = 0
WRITE = 1
HINT = 2      # "this line will be written soon" (pre-initialization hint)

OP_NAMES = {READ: "R", WRITE: "W", HINT: "H"}
OP_CODES = {"R": READ, "W": WRITE, "H": HINT}


@dataclass
class Chunk:
    """Requests in arrival order.

    Attributes
    ----------
    time_ns:
        Arrival time of each request, float64, non-decreasing.
    op:
        ``READ``, ``WRITE`` or ``HINT`` (int8).
    line:
        Logical line index (int64).
    data:
        Optional new content for writes: uint8 array of shape
        ``(n, line_bytes)``; rows of non-writes are ignored.  ``None`` means
        the run's data model supplies the content.
    """

    time_ns: np.ndarray
    op: np.ndarray
    line: np.ndarray
    data: np.ndarray | None = None

    def __post_init__(self) -> None:
        self.time_ns = np.asarray(self.time_ns, dtype=np.float64)
        self.op = np.asarray(self.op, dtype=np.int8)
        self.line = np.asarray(self.line, dtype=np.int64)

    def __len__(self) -> int:
        return int(self.time_ns.size)

    def take(self, idx: np.ndarray | slice) -> Chunk:
        data = None if self.data is None else self.data[idx]
        return Chunk(self.time_ns[idx], self.op[idx], self.line[idx], data)

    @staticmethod
    def concat(chunks: list[Chunk]) -> Chunk:
        if not chunks:
            return Chunk(np.empty(0), np.empty(0, np.int8), np.empty(0, np.int64))
        data = None
        if all(c.data is not None for c in chunks):
            data = np.concatenate([c.data for c in chunks])
        return Chunk(
            np.concatenate([c.time_ns for c in chunks]),
            np.concatenate([c.op for c in chunks]),
            np.concatenate([c.line for c in chunks]),
            data,
        )


def rechunk(chunks: Iterable[Chunk], size: int) -> Iterator[Chunk]:
    """The same requests in chunks of exactly ``size`` (the last may be shorter).

    The engines apply writes and look up reads chunk by chunk, so a
    generator and the replay of its trace must cut the stream alike, and a
    generator drawing in blocks of its own is cut to the run's chunk size.
    """
    parts: list[Chunk] = []
    held = 0
    for ch in chunks:
        if not parts and len(ch) == size:        # the usual case: nothing to do
            yield ch
            continue
        if len(ch) == 0:
            continue
        parts.append(ch)
        held += len(ch)
        if held < size:
            continue
        whole = parts[0] if len(parts) == 1 else Chunk.concat(parts)
        cut = held - held % size
        for s in range(0, cut, size):
            yield whole.take(slice(s, s + size))
        rest = whole.take(slice(cut, None))
        parts, held = ([rest] if len(rest) else []), len(rest)
    if held:
        yield parts[0] if len(parts) == 1 else Chunk.concat(parts)
