"""A static keyed permutation of ``[0, n)``: a small Feistel network.

The address randomizer that sits in front of Start-Gap must be a bijection
that scatters neighbouring lines.  A Feistel network is a bijection for any
round function, so keys can be arbitrary.  It permutes ``[0, 2**b)`` with
``2**(b-1) < n <= 2**b``; for other ``n`` we cycle-walk (apply it again
until the value falls below ``n``), which stays a bijection of ``[0, n)``
and needs fewer than two rounds of walking on average.

The round splits the ``b`` bits into a high and a low half (unequal when
``b`` is odd) and alternately XORs one half with a keyed hash of the other.

References
----------
M. Luby and C. Rackoff, "How to construct pseudorandom permutations from
pseudorandom functions", SIAM J. Computing 17(2), 1988.
J. Black and P. Rogaway, "Ciphers with arbitrary finite domains", CT-RSA 2002
(cycle walking).
"""
from __future__ import annotations

import numpy as np

from memsim.policy.leveling._common import mix64

# Above this many lines the table would cost too much memory; the permutation
# is then evaluated per chunk instead of looked up.
TABLE_LIMIT = 1 << 24


class KeyedPermutation:
    """Bijection of ``[0, n)`` chosen by keys drawn from ``rng``.

    Parameters
    ----------
    n:
        Size of the domain.
    rng:
        Generator the round keys are drawn from.
    rounds:
        Feistel rounds (4 gives good mixing for address scattering).
    """

    def __init__(self, n: int, rng: np.random.Generator, rounds: int = 4) -> None:
        self.n = int(n)
        self.bits = (self.n - 1).bit_length()
        self.lo_bits = self.bits - self.bits // 2
        self.hi_bits = self.bits // 2
        self.keys = rng.integers(0, 2**63, size=rounds, dtype=np.int64).astype(np.uint64)
        self._table: np.ndarray | None = None
        if self.n <= TABLE_LIMIT:
            dt = np.int32 if self.n < 2**31 else np.int64
            self._table = self._walk(np.arange(self.n, dtype=np.int64)).astype(dt)

    def _rounds(self, x: np.ndarray) -> np.ndarray:
        lo_mask = np.uint64((1 << self.lo_bits) - 1)
        hi_mask = np.uint64((1 << self.hi_bits) - 1)
        sh = np.uint64(self.lo_bits)
        u = x.astype(np.uint64)
        hi, lo = u >> sh, u & lo_mask
        for r, key in enumerate(self.keys):
            if r % 2 == 0:
                lo ^= mix64(hi ^ key) & lo_mask
            else:
                hi ^= mix64(lo ^ key) & hi_mask
        return ((hi << sh) | lo).astype(np.int64)

    def _walk(self, x: np.ndarray) -> np.ndarray:
        if self.n <= 1:
            return x.copy()
        y = self._rounds(x)
        out = np.flatnonzero(y >= self.n)
        while out.size:
            y[out] = self._rounds(y[out])
            out = out[y[out] >= self.n]
        return y

    def __call__(self, x: np.ndarray) -> np.ndarray:
        """Image of each element of ``x`` (int64)."""
        x = np.asarray(x, dtype=np.int64)
        if self._table is not None:
            return self._table[x].astype(np.int64, copy=False)
        return self._walk(x)

    def state(self) -> dict:
        return {"bits": self.bits, "rounds": int(self.keys.size),
                "keys": [int(k) for k in self.keys]}
