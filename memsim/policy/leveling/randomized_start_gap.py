"""Start-Gap behind a static keyed address randomizer.

Plain Start-Gap shifts lines by one position per gap cycle, so a hot
*region* of neighbouring lines stays hot in physical space.  A static random
permutation in front of it scatters logical neighbours over the whole space.

References
----------
M. K. Qureshi et al., "Enhancing lifetime and security of PCM-based main
memory with Start-Gap wear leveling", MICRO 2009 (randomized Start-Gap).
"""
from __future__ import annotations

import numpy as np

from memsim.policy.leveling._common import check_int
from memsim.policy.leveling.base import Leveler, LevelResult
from memsim.policy.leveling.device_model import DeviceModel
from memsim.policy.leveling.device_models import RandomizedStartGapDevice
from memsim.policy.leveling.randomizer import KeyedPermutation
from memsim.policy.leveling.start_gap import StartGap


class RandomizedStartGap(Leveler):
    """``PA = StartGap(P(LA))`` with ``P`` a keyed permutation (key from ``rng``).

    Parameters
    ----------
    n_logical:
        Logical lines N; N + 1 physical lines are used.
    rng:
        Generator the permutation keys are drawn from.
    psi:
        User writes between gap moves.
    rounds:
        Feistel rounds of the randomizer.

    References
    ----------
    M. K. Qureshi et al., MICRO 2009.
    """

    name = "randomized_start_gap"

    def __init__(self, n_logical: int, rng: np.random.Generator | None = None, *,
                 psi: int = 100, rounds: int = 4) -> None:
        check_int("n_logical", n_logical, 1)
        super().__init__(n_logical, rng)
        self.perm = KeyedPermutation(self.n_logical, self.rng,
                                     rounds=check_int("rounds", rounds, 1))
        self.inner = StartGap(self.n_logical, psi=psi)
        self.n_physical = self.inner.n_physical

    def lookup(self, logical: np.ndarray) -> np.ndarray:
        return self.inner.lookup(self.perm(logical))

    def apply(self, logical: np.ndarray) -> LevelResult:
        res = self.inner.apply(self.perm(logical))
        self.user_writes = self.inner.user_writes
        self.move_writes = self.inner.move_writes
        return res

    def device_model(self) -> DeviceModel:
        return RandomizedStartGapDevice(self.inner.psi)

    def cycle_writes(self) -> float:
        return self.inner.cycle_writes()

    def state(self) -> dict:
        inner = self.inner.state()
        inner["scheme"] = self.name
        inner["randomizer"] = self.perm.state()
        return inner
