"""Data models: what a write stores.

The model sees the line's current logical content and returns the new one, so
SET and RESET counts come from real bit comparisons.  Each model exposes the
expected share of bits a data-comparison write changes on it, for tests.
"""
from __future__ import annotations

import numpy as np


class DataModel:
    """New content for writes.

    Parameters
    ----------
    kind:
        ``random`` (every bit uniform), ``flip`` (each bit of the old content
        flips with probability ``flip_fraction``), ``zeros`` (bits are 1 with
        probability ``one_fraction``) or ``ones`` (bits are 1 with probability
        ``1 - one_fraction``).
    """

    def __init__(self, kind: str, line_bytes: int, flip_fraction: float = 0.1,
                 one_fraction: float = 0.1) -> None:
        self.kind = kind
        self.line_bytes = line_bytes
        self.flip_fraction = flip_fraction
        self.p_one = {"random": 0.5, "flip": 0.5, "zeros": one_fraction,
                      "ones": 1.0 - one_fraction}[kind]

    def initial(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """Content of ``n`` lines before the first write."""
        return _bernoulli_lines(rng, n, self.line_bytes, self.p_one)

    def new(self, rng: np.random.Generator, old: np.ndarray) -> np.ndarray:
        """New logical content for lines whose current content is ``old``."""
        n = old.shape[0]
        if self.kind == "flip":
            return old ^ self.flip_mask(rng, n)
        return _bernoulli_lines(rng, n, self.line_bytes, self.p_one)

    def flip_mask(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """The bits ``n`` writes of the flip model invert (what :meth:`new` XORs in)."""
        return _bernoulli_lines(rng, n, self.line_bytes, self.flip_fraction)

    def expected_changed_fraction(self) -> float:
        """Expected share of bits that differ between old and new content.

        For independent Bernoulli(p) bits, P(differ) = 2 p (1 - p); for the
        flip model it is the flip probability (binomial arithmetic).
        """
        if self.kind == "flip":
            return self.flip_fraction
        return 2.0 * self.p_one * (1.0 - self.p_one)


def _bernoulli_lines(rng: np.random.Generator, n: int, line_bytes: int, p: float) -> np.ndarray:
    if p == 0.5:
        return rng.integers(0, 256, size=(n, line_bytes), dtype=np.uint8)
    if p == 0.0:
        return np.zeros((n, line_bytes), dtype=np.uint8)
    if p == 1.0:
        return np.full((n, line_bytes), 255, dtype=np.uint8)
    return np.packbits(rng.random((n, line_bytes * 8)) < p, axis=1)
