"""Key-rotation remapping in the style of Security Refresh.

Lines are grouped in regions of ``S = 2**m`` lines.  Inside a region a line
lives at ``LA xor key``.  A round moves every line from the previous key
``kp`` to the current key ``kc``: a refresh pointer ``crp`` walks the region
addresses 0..S-1, one address every ``interval`` writes to the region.  At
address ``a`` with partner ``b = a xor kp xor kc``: if ``b > a`` the two
lines are swapped (physical ``a xor kp`` <-> ``a xor kc``); if ``b < a`` the
pair was swapped when the pointer passed ``b``.  A line ``a`` is *refreshed*
when ``a < crp`` or ``b < crp``; then ``PA = a xor kc``, else ``a xor kp``.
When the pointer wraps, ``kp = kc`` and a new key is drawn.

Our choices (documented differences from a hardware design):

* one level of regions (the paper also nests an outer level);
* the key of round ``j`` of region ``g`` is ``hash(secret, g, j) mod S`` with
  ``secret`` drawn from ``rng`` once, instead of a fresh draw at each round;
  it is as unpredictable to the workload and makes results independent of
  how the write stream is cut into chunks;
* a swap is two entries of :class:`Moves` with the same ``after`` (two line
  writes); the pointer advances one address per ``interval`` writes whether
  or not that address needs a swap, so the overhead is about ``1/interval``
  line writes per user write.

References
----------
N. H. Seong, D. H. Woo and H.-H. S. Lee, "Security Refresh: prevent
malicious wear-out and increase durability for phase-change memory with
dynamically randomized address mapping", ISCA 2010.
doi:10.1145/1815961.1816014
"""
from __future__ import annotations

import numpy as np

from memsim.errors import ConfigError
from memsim.policy.leveling._common import check_int, group_ranks, grouped_step_events, mix64
from memsim.policy.leveling.base import Leveler, LevelResult, Moves
from memsim.policy.leveling.device_model import DeviceModel
from memsim.policy.leveling.device_models import SecurityRefreshDevice


class SecurityRefresh(Leveler):
    """Per-region XOR key, migrated one address at a time to a new key.

    Parameters
    ----------
    n_logical:
        Logical lines N.  ``ceil(N / S) * S`` physical lines are used.
    rng:
        Generator the key secret is drawn from.
    region_lines:
        Region size S, a power of two; default the smallest power of two
        >= N (one region).  Lifetime at device size counts it in device
        lines (:class:`~memsim.policy.leveling.device_models.SecurityRefreshDevice`).
    interval:
        Writes to a region between two advances of its refresh pointer.

    References
    ----------
    N. H. Seong, D. H. Woo and H.-H. S. Lee, ISCA 2010.
    """

    name = "security_refresh"

    def __init__(self, n_logical: int, rng: np.random.Generator | None = None, *,
                 region_lines: int | None = None, interval: int = 100) -> None:
        check_int("n_logical", n_logical, 1)
        super().__init__(n_logical, rng)
        N = self.n_logical
        # As configured (None: one region); at device size a region is this many device lines.
        self.region_lines_set = region_lines
        if region_lines is None:
            region_lines = 1 << (N - 1).bit_length()
        S = check_int("region_lines", region_lines, 1)
        if S & (S - 1):
            raise ConfigError("leveling.region_lines", repr(region_lines),
                              "a power of two")
        self.region_lines = S
        self.shift = S.bit_length() - 1
        self.interval = check_int("interval", interval, 1)
        self.regions = -(-N // S)
        self.n_physical = self.regions * S
        self.secret = np.uint64(self.rng.integers(0, 2**63, dtype=np.int64))
        self.region_writes = np.zeros(self.regions, dtype=np.int64)

    def key(self, region: np.ndarray, rnd: np.ndarray) -> np.ndarray:
        """Key of round ``rnd`` of ``region`` (vectorized)."""
        g = np.asarray(region, dtype=np.int64).astype(np.uint64)
        j = np.asarray(rnd, dtype=np.int64).astype(np.uint64)
        h = mix64(mix64(g ^ self.secret) ^ j)
        return (h & np.uint64(self.region_lines - 1)).astype(np.int64)

    def _keys(self, g: np.ndarray, rnd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Keys (previous, current) of each write's round, via a small table.

        A chunk spans few rounds per region, so hashing a (region, round)
        table once is much cheaper than hashing per write.
        """
        first = self.region_writes // self.interval >> self.shift
        d = rnd - first[g]
        span = int(d.max()) + 2 if d.size else 2
        if self.regions * span > 4 * d.size + 64:     # sparse: hash per write
            return self.key(g, rnd), self.key(g, rnd + 1)
        regs = np.repeat(np.arange(self.regions, dtype=np.int64), span)
        rounds = (first[:, None] + np.arange(span)).ravel()
        table = self.key(regs, rounds)
        idx = g * span + d
        return table[idx], table[idx + 1]

    def _map(self, g: np.ndarray, a: np.ndarray, steps: np.ndarray) -> np.ndarray:
        rnd = steps >> self.shift
        crp = steps & (self.region_lines - 1)
        kp, kc = self._keys(g, rnd)
        b = a ^ kp ^ kc
        done = (a < crp) | (b < crp)
        return (g << self.shift) + np.where(done, a ^ kc, a ^ kp)

    def lookup(self, logical: np.ndarray) -> np.ndarray:
        la = np.asarray(logical, dtype=np.int64)
        g = la >> self.shift
        return self._map(g, la & (self.region_lines - 1),
                         self.region_writes[g] // self.interval)

    def apply(self, logical: np.ndarray) -> LevelResult:
        la = np.asarray(logical, dtype=np.int64)
        g = la >> self.shift
        if self.regions == 1:
            order = np.arange(la.size, dtype=np.int64)
            rank, counts = order, np.array([la.size], dtype=np.int64)
        else:
            order, rank, counts = group_ranks(g, self.regions)
        steps = (self.region_writes[g] + rank) // self.interval
        phys = self._map(g, la & (self.region_lines - 1), steps)

        grp, j, after = grouped_step_events(self.region_writes, counts, order,
                                            self.interval)
        rnd = j >> self.shift
        a = j & (self.region_lines - 1)
        kp, kc = self.key(grp, rnd), self.key(grp, rnd + 1)
        swap = (a ^ kp ^ kc) > a
        base = grp[swap] << self.shift
        p, q = base + (a ^ kp)[swap], base + (a ^ kc)[swap]
        # Interleave so the two halves of each swap sit side by side.
        src = np.stack([p, q], axis=1).ravel()
        dst = np.stack([q, p], axis=1).ravel()
        aft = np.repeat(after[swap], 2)
        self.region_writes += counts
        self.user_writes += la.size
        self.move_writes += src.size
        return LevelResult(phys=phys, moves=Moves(src, dst, aft, 0))

    def device_model(self) -> DeviceModel:
        return SecurityRefreshDevice(self.region_lines_set, self.interval)

    def cycle_writes(self) -> float:
        """One key round of every region: ``n_physical * interval`` user writes."""
        return float(self.n_physical) * self.interval

    def state(self) -> dict:
        steps = self.region_writes // self.interval
        rnd = steps >> self.shift
        g = np.arange(self.regions)
        return {"scheme": self.name, "region_lines": self.region_lines,
                "interval": self.interval, "regions": self.regions,
                "round": rnd.tolist(),
                "refresh_pointer": (steps & (self.region_lines - 1)).tolist(),
                "key_prev": self.key(g, rnd).tolist(),
                "key_cur": self.key(g, rnd + 1).tolist(), **super().state()}
