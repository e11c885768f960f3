"""Data retention of the amorphous state: crystallization at temperature.

An amorphous (RESET) region crystallizes slowly even at operating
temperatures; once enough of it has crystallized the cell reads as SET.  The
probability that a cell has failed by age ``t`` at temperature ``T`` is taken
as the JMAK fraction (a Weibull distribution of failure times with shape
``n``)::

    F(t, T) = 1 - exp(-(k(T) t)^n),   k(T) = k_ref exp(-Ea/kB (1/T - 1/T_ref))

anchored so that ``F(t_ref, T_ref) = fail_fraction`` (e.g. half of the cells
fail after 10 years at 85 C).  Reading the JMAK fraction as the share of
failed cells is our modeling choice: in cells of a few tens of nanometres one
nucleus crosses the cell, so the per-cell failure time inherits the JMAK
time dependence (common practice for the retention of small cells; the Weibull
form of failure times is from memory).  Levels above the lowest hold
amorphous material; a crystallized cell reads as the lowest level (fully SET).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from memsim.errors import ConfigError
from memsim.tech.crystallization import K_B_EV_PER_K, avrami_fraction, avrami_reduced_time


@dataclass(frozen=True)
class Retention:
    """Crystallization of amorphous cells at temperature (units in the names)."""

    activation_ev: float
    ref_k: float
    ref_s: float
    fail_fraction: float = 0.5
    avrami_n: float = 3.0

    def __post_init__(self) -> None:
        for key, v in (("retention_activation_ev", self.activation_ev), ("retention_ref_k", self.ref_k),
                       ("retention_ref_s", self.ref_s), ("retention_avrami_n", self.avrami_n)):
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v > 0):
                raise ConfigError(f"cell.{key}", repr(v), "a finite number > 0")
        if not 0.0 < self.fail_fraction < 1.0:
            raise ConfigError("cell.retention_fail_fraction", repr(self.fail_fraction),
                              "a number strictly between 0 and 1")

    def rate_per_s(self, temp_k: float) -> float:
        """``k(T)``, 1/s (Arrhenius through the anchor)."""
        k_ref = avrami_reduced_time(self.fail_fraction, self.avrami_n) / self.ref_s
        return k_ref * math.exp(-self.activation_ev / K_B_EV_PER_K * (1.0 / temp_k - 1.0 / self.ref_k))

    def fail_prob(self, ages_s: np.ndarray | float, temp_k: float | None) -> np.ndarray:
        """Probability that an amorphous cell has crystallized by each age."""
        t = self.ref_k if temp_k is None else temp_k
        return avrami_fraction(self.rate_per_s(t) * np.asarray(ages_s, dtype=np.float64), self.avrami_n)

    def median_s(self, temp_k: float) -> float:
        """Age at which half of the amorphous cells have failed, s."""
        return avrami_reduced_time(0.5, self.avrami_n) / self.rate_per_s(temp_k)
