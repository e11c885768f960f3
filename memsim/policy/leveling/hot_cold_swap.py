"""Table-based hot/cold region swapping.

The line space is cut into regions of G lines; a table maps each logical
region to a physical region.  The controller keeps two sets of counters:
writes per *physical* region since the start (its wear, moves included) and
writes per *logical* region in the current epoch (its heat).  Every
``period`` user writes it takes the hottest logical region of the epoch and
the least-worn physical region; if the hot region is not already there and
its physical region is more worn, the two regions trade places (all G lines
copied both ways, 2G line writes) and two table entries change.  The epoch
counters then restart.

Cost accounting (``Moves.cost_writes``): counters are assumed to live in
controller SRAM (no PCM writes); the table lives in PCM, and each changed
entry costs one line write, so a swap costs ``table_writes_per_swap`` = 2
line writes besides the 2G data-line writes.

References
----------
P. Zhou, B. Zhao, J. Yang and Y. Zhang, "A durable and energy efficient
main memory using phase change memory technology", ISCA 2009 (segment
swapping).
"""
from __future__ import annotations

import numpy as np

from memsim.policy.leveling._common import check_int
from memsim.policy.leveling.base import Leveler, LevelResult, Moves
from memsim.policy.leveling.device_model import DeviceModel
from memsim.policy.leveling.device_models import HotColdSwapDevice


class HotColdSwap(Leveler):
    """Swap the hottest logical region into the least-worn physical region.

    Parameters
    ----------
    n_logical:
        Logical lines N; ``ceil(N / G) * G`` physical lines are used.
    rng:
        Unused (deterministic scheme).
    region_lines:
        Region size G in lines.
    period:
        User writes per epoch (one swap decision per epoch).
    table_writes_per_swap:
        Line writes charged for the table update of one swap.

    References
    ----------
    P. Zhou, B. Zhao, J. Yang and Y. Zhang, ISCA 2009.
    """

    name = "hot_cold_swap"

    def __init__(self, n_logical: int, rng: np.random.Generator | None = None, *,
                 region_lines: int = 64, period: int = 10_000,
                 table_writes_per_swap: int = 2) -> None:
        check_int("n_logical", n_logical, 1)
        super().__init__(n_logical, rng)
        self.region_lines = check_int("region_lines", region_lines, 1)
        self.period = check_int("period", period, 1)
        self.table_writes_per_swap = check_int("table_writes_per_swap",
                                               table_writes_per_swap, 0)
        self.regions = -(-self.n_logical // self.region_lines)
        self.n_physical = self.regions * self.region_lines
        self.table = np.arange(self.regions, dtype=np.int64)     # logical -> physical
        self.inverse = np.arange(self.regions, dtype=np.int64)   # physical -> logical
        self.phys_wear = np.zeros(self.regions, dtype=np.int64)
        self.epoch_heat = np.zeros(self.regions, dtype=np.int64)
        self.swaps = 0
        self.cost_writes = 0

    def lookup(self, logical: np.ndarray) -> np.ndarray:
        la = np.asarray(logical, dtype=np.int64)
        G = self.region_lines
        return self.table[la // G] * G + la % G

    def _decide(self) -> tuple[int, int] | None:
        hot_l = int(np.argmax(self.epoch_heat))
        cold_p = int(np.argmin(self.phys_wear))
        hot_p = int(self.table[hot_l])
        self.epoch_heat[:] = 0
        if hot_p == cold_p or self.phys_wear[hot_p] <= self.phys_wear[cold_p]:
            return None
        cold_l = int(self.inverse[cold_p])
        self.table[hot_l], self.table[cold_l] = cold_p, hot_p
        self.inverse[cold_p], self.inverse[hot_p] = hot_l, cold_l
        self.phys_wear[[hot_p, cold_p]] += self.region_lines
        self.swaps += 1
        return hot_p, cold_p

    def apply(self, logical: np.ndarray) -> LevelResult:
        la = np.asarray(logical, dtype=np.int64)
        G, M = self.region_lines, self.regions
        lr_all, off_all = np.divmod(la, G)
        phys = np.empty_like(la)
        lines = np.arange(G, dtype=np.int64)
        src, dst, after = [], [], []
        pos, n = 0, la.size
        # One iteration per epoch, not per write: the table is fixed inside
        # an epoch, so each epoch is one vectorized gather.
        while pos < n:
            into = self.user_writes % self.period
            end = min(n, pos + self.period - into)
            lr = lr_all[pos:end]
            pr = self.table[lr]
            phys[pos:end] = pr * G + off_all[pos:end]
            self.epoch_heat += np.bincount(lr, minlength=M)
            self.phys_wear += np.bincount(pr, minlength=M)
            self.user_writes += end - pos
            pos = end
            if self.user_writes % self.period == 0:
                pair = self._decide()
                if pair is not None:
                    hp, cp = pair
                    src += [hp * G + lines, cp * G + lines]
                    dst += [cp * G + lines, hp * G + lines]
                    after.append(np.full(2 * G, end - 1, dtype=np.int64))
        if src:
            moves = Moves(np.concatenate(src), np.concatenate(dst),
                          np.concatenate(after))
        else:
            moves = Moves.none()
        cost = (len(after)) * self.table_writes_per_swap
        moves = Moves(moves.src, moves.dst, moves.after, cost)
        self.move_writes += len(moves)
        self.cost_writes += cost
        return LevelResult(phys=phys, moves=moves)

    def device_model(self) -> DeviceModel:
        return HotColdSwapDevice(self.region_lines, self.period)

    def state(self) -> dict:
        return {"scheme": self.name, "region_lines": self.region_lines,
                "period": self.period, "regions": self.regions,
                "swaps": self.swaps, "cost_writes": self.cost_writes,
                "region_wear_max": int(self.phys_wear.max()),
                "region_wear_min": int(self.phys_wear.min()),
                **super().state()}
