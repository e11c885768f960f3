"""No wear leveling: logical line ``i`` is physical line ``i`` forever."""
from __future__ import annotations

import numpy as np

from memsim.policy.leveling._common import check_int
from memsim.policy.leveling.base import Leveler, LevelResult
from memsim.policy.leveling.device_model import DeviceModel
from memsim.policy.leveling.device_models import NoLevelingDevice


class NoLeveling(Leveler):
    """Identity map; no moves.  The baseline every scheme is compared with."""

    name = "none"

    def __init__(self, n_logical: int, rng: np.random.Generator | None = None) -> None:
        check_int("n_logical", n_logical, 1)
        super().__init__(n_logical, rng)

    def apply(self, logical: np.ndarray) -> LevelResult:
        logical = np.asarray(logical, dtype=np.int64)
        self.user_writes += logical.size
        return LevelResult(phys=logical.copy())

    def scale_free(self) -> bool:
        return True

    def device_model(self) -> DeviceModel:
        return NoLevelingDevice()

    def state(self) -> dict:
        return {"scheme": self.name, **super().state()}
