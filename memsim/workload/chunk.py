"""A chunk of requests: a struct of numpy arrays, never one object per request."""
from __future__ import annotations

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
