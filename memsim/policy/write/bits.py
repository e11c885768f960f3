"""Bit helpers shared by write schemes: popcounts over packed lines."""
from __future__ import annotations

import numpy as np
from numba import njit

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


@njit(cache=True)
def _add_cell_wear(cell_wear, rows, mask, flags):
    # Skip unprogrammed bytes; add the bits of the others without branches.
    nbits = mask.shape[1] * 8
    for i in range(rows.size):
        w = cell_wear[rows[i]]
        for j in range(mask.shape[1]):
            m = np.int64(mask[i, j])
            if m == 0:
                continue
            for k in range(8):          # np.unpackbits order: most significant bit first
                w[8 * j + k] += (m >> (7 - k)) & 1
        for f in range(flags.shape[1]):
            if flags[i, f]:
                w[nbits + f] += 1


def add_cell_wear(cell_wear: np.ndarray, rows: np.ndarray, mask: np.ndarray, flags: np.ndarray) -> None:
    """``cell_wear[rows] += unpackbits(mask) ++ flags`` without the unpacked copy.

    ``mask`` is packed (n, line_bytes) uint8 (bit order as ``np.unpackbits``),
    ``flags`` (n, flag_cells) bool; rows may repeat.
    """
    _add_cell_wear(cell_wear, np.asarray(rows, np.int64), np.ascontiguousarray(mask, np.uint8),
                   np.ascontiguousarray(flags).view(np.uint8) if flags.dtype == np.bool_
                   else np.ascontiguousarray(flags, np.uint8))
