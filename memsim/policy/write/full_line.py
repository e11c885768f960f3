"""Full-line write: every cell of the line is programmed on every write."""
from __future__ import annotations

import numpy as np

from memsim.policy import bitops
from memsim.policy.write.base import Encoded, WriteScheme


class FullLine(WriteScheme):
    """Program every cell: 1 bits get a SET pulse, 0 bits a RESET pulse."""

    name = "full_line"
    kernel = bitops.FULL
    pre_read = False

    def encode(self, old: np.ndarray, old_flags: np.ndarray, new: np.ndarray) -> Encoded:
        n = new.shape[0]
        empty = np.zeros((n, 0), dtype=bool)
        return Encoded(new.copy(), self._empty_flags(n), new.copy(), ~new, empty, empty)
