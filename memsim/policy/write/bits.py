"""Bit helpers shared by write schemes: popcounts over packed lines."""
from __future__ import annotations

import numpy as np

_WORD_DTYPES = {8: np.uint8, 16: np.uint16, 32: np.uint32, 64: np.uint64}


def words(lines: np.ndarray, word_bits: int) -> np.ndarray:
    """View packed lines ``(n, line_bytes)`` uint8 as ``(n, words)`` of ``word_bits``."""
    return np.ascontiguousarray(lines).view(_WORD_DTYPES[word_bits])


def popcount_rows(lines: np.ndarray) -> np.ndarray:
    """Set bits per row of a packed ``(n, line_bytes)`` uint8 array, int64."""
    if lines.shape[1] % 8 == 0:
        return np.bitwise_count(np.ascontiguousarray(lines).view(np.uint64)).sum(axis=1, dtype=np.int64)
    return np.bitwise_count(lines).sum(axis=1, dtype=np.int64)


def random_lines(rng: np.random.Generator, n: int, line_bytes: int, p_one: float = 0.5) -> np.ndarray:
    """``n`` packed lines whose bits are 1 with probability ``p_one`` (independent)."""
    if p_one == 0.5:
        return rng.integers(0, 256, size=(n, line_bytes), dtype=np.uint8)
    bits = rng.random((n, line_bytes * 8)) < p_one
    return np.packbits(bits, axis=1)
