"""Region Start-Gap: the line space split into R regions, each its own Start-Gap.

Region ``r`` holds a contiguous run of ``n_r`` logical lines (sizes differ by
at most one) on ``n_r + 1`` physical lines; its gap moves after every
``psi``-th write *to that region*.  With ``randomize`` the logical address is
first passed through a static keyed permutation of the whole space, so a hot
logical region is spread over all physical regions.

References
----------
M. K. Qureshi et al., "Enhancing lifetime and security of PCM-based main
memory with Start-Gap wear leveling", MICRO 2009 (regions, each with its own
Start and Gap registers).
"""
from __future__ import annotations

import numpy as np

from memsim.policy.leveling._common import check_int, group_ranks, grouped_step_events
from memsim.policy.leveling.base import Leveler, LevelResult, Moves
from memsim.policy.leveling.device_model import DeviceModel
from memsim.policy.leveling.device_models import RegionStartGapDevice
from memsim.policy.leveling.randomizer import KeyedPermutation
from memsim.policy.leveling.start_gap import sg_map, sg_move, sg_registers


class RegionStartGap(Leveler):
    """R independent Start-Gap regions.

    Parameters
    ----------
    n_logical:
        Logical lines N; ``N + regions`` physical lines are used.
    rng:
        Generator for the optional randomizer key.
    regions:
        Number of regions R (1 <= R <= N).
    psi:
        Writes to a region between two of its gap moves.
    randomize:
        Put a static keyed permutation of ``[0, N)`` in front of the regions.

    References
    ----------
    M. K. Qureshi et al., MICRO 2009.
    """

    name = "region_start_gap"

    def __init__(self, n_logical: int, rng: np.random.Generator | None = None, *,
                 regions: int = 8, psi: int = 100, randomize: bool = False) -> None:
        check_int("n_logical", n_logical, 1)
        super().__init__(n_logical, rng)
        N = self.n_logical
        self.regions = check_int("regions", regions, 1, N)
        self.psi = check_int("psi", psi, 1)
        self.q, self.rem = divmod(N, self.regions)
        r = np.arange(self.regions, dtype=np.int64)
        self.size = np.where(r < self.rem, self.q + 1, self.q).astype(np.int64)
        self.lo = np.cumsum(self.size) - self.size        # first logical line
        self.base = self.lo + r                           # first physical line
        self.n_physical = N + self.regions
        self.region_writes = np.zeros(self.regions, dtype=np.int64)
        self.perm = KeyedPermutation(N, self.rng) if randomize else None

    def _region(self, la: np.ndarray) -> np.ndarray:
        big = self.rem * (self.q + 1)
        if self.rem == 0:
            return la // self.q
        r = la // (self.q + 1)
        if self.q > 0:
            tail = la >= big
            r[tail] = self.rem + (la[tail] - big) // self.q
        return r

    def _prep(self, logical: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        la = np.asarray(logical, dtype=np.int64)
        if self.perm is not None:
            la = self.perm(la)
        r = self._region(la)
        return r, la - self.lo[r]

    def lookup(self, logical: np.ndarray) -> np.ndarray:
        r, local = self._prep(logical)
        n_r = self.size[r]
        start, gap = sg_registers(self.region_writes[r] // self.psi, n_r)
        return self.base[r] + sg_map(local, start, gap, n_r)

    def apply(self, logical: np.ndarray) -> LevelResult:
        r, local = self._prep(logical)
        order, rank, counts = group_ranks(r, self.regions)
        n_r = self.size[r]
        start, gap = sg_registers((self.region_writes[r] + rank) // self.psi, n_r)
        phys = self.base[r] + sg_map(local, start, gap, n_r)
        grp, c, after = grouped_step_events(self.region_writes, counts, order, self.psi)
        src, dst = sg_move(c, self.size[grp])
        moves = Moves(src + self.base[grp], dst + self.base[grp], after, 0)
        self.region_writes += counts
        self.user_writes += r.size
        self.move_writes += len(moves)
        return LevelResult(phys=phys, moves=moves)

    def device_model(self) -> DeviceModel | None:
        # Behind the randomizer the regions hold scattered lines: no device-scale form.
        return RegionStartGapDevice(self.regions, self.psi) if self.perm is None else None

    def cycle_writes(self) -> float:
        """Every region's Start rotation: ``N (n_max + 1) psi`` user writes."""
        return float(self.n_logical) * (int(self.size.max()) + 1) * self.psi

    def state(self) -> dict:
        c = self.region_writes // self.psi
        start, gap = sg_registers(c, self.size)
        return {"scheme": self.name, "regions": self.regions, "psi": self.psi,
                "randomized": self.perm is not None,
                "start": start.tolist(), "gap": gap.tolist(),
                "gap_moves": c.tolist(), **super().state()}
