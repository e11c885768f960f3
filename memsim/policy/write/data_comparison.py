"""Data-comparison write: read the line, program only the cells that change.

References
----------
Zhou, Zhao, Yang and Zhang, "A durable and energy efficient main memory using
phase change memory technology", ISCA 2009 (data-comparison write).
"""
from __future__ import annotations

import numpy as np

from memsim.policy import bitops
from memsim.policy.write.base import Encoded, WriteScheme


class DataComparison(WriteScheme):
    name = "data_comparison"
    kernel = bitops.COMPARE
    pre_read = True

    def encode(self, old: np.ndarray, old_flags: np.ndarray, new: np.ndarray) -> Encoded:
        n = new.shape[0]
        empty = np.zeros((n, 0), dtype=bool)
        return Encoded(new.copy(), self._empty_flags(n), ~old & new, old & ~new, empty, empty)
