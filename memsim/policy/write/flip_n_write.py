"""Flip-N-Write: per word, store the data or its complement, whichever
programs fewer cells, and remember the choice in one flag cell per word.

With ``d`` the Hamming distance between the stored word and the new word and
``f`` the old flag, writing the word plain costs ``d + f`` cells and writing
it inverted costs ``W - d + 1 - f``; the two add up to ``W + 1``, so the
cheaper never exceeds ``floor((W + 1) / 2)`` cells per word including its
flag.  Ties keep the plain form.

References
----------
Cho and Lee, "Flip-N-Write: a simple deterministic technique to improve PRAM
write performance, energy and endurance", MICRO 2009.
"""
from __future__ import annotations

import numpy as np

from memsim.policy import bitops
from memsim.policy.write.base import Encoded, WriteScheme
from memsim.policy.write.bits import words


class FlipNWrite(WriteScheme):
    name = "flip_n_write"
    kernel = bitops.FLIP
    pre_read = True

    @property
    def flag_cells(self) -> int:
        return self.line_bytes * 8 // self.word_bits

    def encode(self, old: np.ndarray, old_flags: np.ndarray, new: np.ndarray) -> Encoded:
        w = self.word_bits
        old_w, new_w = words(old, w), words(new, w)
        d = np.bitwise_count(old_w ^ new_w).astype(np.int64)
        f = old_flags.astype(np.int64)
        invert = (w - d + 1 - f) < (d + f)
        stored_w = np.where(invert, ~new_w, new_w)
        stored = stored_w.view(np.uint8).reshape(new.shape)
        flags = invert.astype(np.uint8)
        return Encoded(
            stored, flags, ~old & stored, old & ~stored,
            (flags == 1) & (old_flags == 0), (flags == 0) & (old_flags == 1),
        )

    def decode(self, stored: np.ndarray, flags: np.ndarray) -> np.ndarray:
        sw = words(stored, self.word_bits)
        return np.where(flags.astype(bool), ~sw, sw).view(np.uint8).reshape(stored.shape)
