"""Contract of a write scheme.

A write scheme decides which cells a line write programs and with which
pulse.  It is a pure, vectorized function over a batch of distinct lines:

``encode(old, old_flags, new) -> Encoded``

``old`` and ``new`` are packed bits, ``(n, line_bytes)`` uint8; ``old_flags``
is ``(n, flag_cells)`` uint8 (0/1) for schemes that keep per-word flag cells.
Convention (common practice): bit 1 is the SET (crystalline, low-resistance)
state, bit 0 the RESET (amorphous) state.  A 0 -> 1 transition is a SET pulse,
1 -> 0 a RESET pulse.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from memsim.policy.write.bits import popcount_rows


@dataclass
class Encoded:
    stored: np.ndarray       # new stored data bits (n, line_bytes) uint8
    flags: np.ndarray        # new flag cells (n, flag_cells) uint8
    set_mask: np.ndarray     # data cells receiving a SET pulse, packed
    reset_mask: np.ndarray   # data cells receiving a RESET pulse, packed
    flag_set: np.ndarray     # flag cells receiving a SET pulse (n, flag_cells) bool
    flag_reset: np.ndarray   # flag cells receiving a RESET pulse

    @property
    def n_set(self) -> np.ndarray:
        return popcount_rows(self.set_mask) + self.flag_set.sum(axis=1, dtype=np.int64)

    @property
    def n_reset(self) -> np.ndarray:
        return popcount_rows(self.reset_mask) + self.flag_reset.sum(axis=1, dtype=np.int64)


class WriteScheme:
    """Base: subclasses set ``name``/``pre_read`` and implement :meth:`encode`."""

    name = ""
    pre_read = False       # must the old content be read before programming?
    out_of_place = False   # placed by an erase-block pool instead of in place
    kernel: int | None = None   # code of the compiled encoder (memsim.policy.bitops), if any

    def __init__(self, line_bytes: int, word_bits: int = 32) -> None:
        self.line_bytes = line_bytes
        self.word_bits = word_bits

    @property
    def flag_cells(self) -> int:
        return 0

    def encode(self, old: np.ndarray, old_flags: np.ndarray, new: np.ndarray) -> Encoded:
        raise NotImplementedError

    def decode(self, stored: np.ndarray, flags: np.ndarray) -> np.ndarray:
        """Logical content of stored lines."""
        return stored

    def _empty_flags(self, n: int) -> np.ndarray:
        return np.zeros((n, self.flag_cells), dtype=np.uint8)
