"""SLC PCM cell: asymmetric SET and RESET pulses under a current budget.

A line write programs its RESET cells and its SET cells in rounds.  In a round
a bank may drive as many cells as its programming-current budget allows
(``budget // reset_ua`` RESETs, or ``budget // set_ua`` SETs).  RESET rounds
run first, then SET rounds, so a write that programs fewer cells, or only
RESET cells, finishes sooner.  This two-phase, budget-limited write is the
usual architecture-level model of PCM line programming (common practice; see
e.g. Hay et al., MICRO 2011, for per-chip current budgets).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class CellTech:
    read_ns: float
    set_ns: float
    reset_ns: float
    read_ua: float
    set_ua: float
    reset_ua: float
    read_pj: float
    set_pj: float
    reset_pj: float

    @classmethod
    def from_config(cls, cell) -> CellTech:
        return cls(**{k: getattr(cell, k) for k in cls.__dataclass_fields__})

    def cells_per_round(self, budget_ua: float) -> tuple[int, int]:
        """(RESET cells, SET cells) one round may program within ``budget_ua``."""
        return max(1, int(budget_ua // self.reset_ua)), max(1, int(budget_ua // self.set_ua))

    def program_ns(self, n_set: np.ndarray, n_reset: np.ndarray, budget_ua: float) -> np.ndarray:
        """Time to program ``n_set`` SET and ``n_reset`` RESET cells, ns (vectorized)."""
        per_reset, per_set = self.cells_per_round(budget_ua)
        n_set = np.asarray(n_set, dtype=np.int64)
        n_reset = np.asarray(n_reset, dtype=np.int64)
        reset_rounds = -(-n_reset // per_reset)
        set_rounds = -(-n_set // per_set)
        return reset_rounds * self.reset_ns + set_rounds * self.set_ns

    def program_pj(self, n_set: np.ndarray, n_reset: np.ndarray) -> np.ndarray:
        return np.asarray(n_set) * self.set_pj + np.asarray(n_reset) * self.reset_pj

    def peak_cell_rate_per_ns(self, budget_ua: float) -> float:
        """Upper bound on cells programmed per ns by one budget (SET-only or RESET-only)."""
        per_reset, per_set = self.cells_per_round(budget_ua)
        return max(per_reset / self.reset_ns, per_set / self.set_ns)
