"""Crystallization kinetics of an amorphous phase-change region.

Fraction crystallized after time ``t`` at a constant temperature follows the
Johnson-Mehl-Avrami-Kolmogorov (JMAK) law::

    X(t) = 1 - exp(-(k(T) t)^n)

with Avrami exponent ``n`` and rate ``k(T)``.  Under a changing temperature the
additivity rule replaces ``k t`` by ``integral k(T(t)) dt`` (an isokinetic
process).  The rate is thermally activated (Arrhenius) with activation energy
``Ea``, optionally times the Wilson-Frenkel driving-force factor
``1 - exp(-dG/kT)`` with Turnbull's estimate ``dG = dH_f * Omega * (Tm - T) / Tm``
per atom, which takes the rate to zero at the melting point (why a melted cell
can be quenched amorphous at all).

The rate is anchored at one reference point instead of an unmeasurable
pre-factor: the time ``t_ref`` for ``X`` to reach ``x_ref`` at ``T_ref``
(e.g. 10 years to half crystallized at 85 C, the usual data-retention
specification point).

References
----------
.. [1] M. Avrami, "Kinetics of phase change I", J. Chem. Phys. 7, 1939.
.. [2] W. A. Johnson, R. F. Mehl, Trans. AIME 135, 1939.
.. [3] J. W. Cahn, "Transformation kinetics during continuous cooling",
   Acta Metall. 4, 1956 (additivity rule; from memory).
.. [4] D. Turnbull, J. Appl. Phys. 21, 1950 (driving force estimate; from memory).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import constants, integrate, optimize

K_B_EV_PER_K: float = constants.physical_constants["Boltzmann constant in eV/K"][0]
K_B_J_PER_K: float = constants.k
EV_J: float = constants.e
ZERO_C_K = 273.15
YEAR_S = 365.25 * 24 * 3600.0


def avrami_fraction(kt: np.ndarray | float, n: float) -> np.ndarray:
    """JMAK crystallized fraction ``1 - exp(-(k t)^n)`` of a reduced time ``k t``."""
    kt = np.asarray(kt, dtype=np.float64)
    return -np.expm1(-np.power(np.maximum(kt, 0.0), n))


def avrami_reduced_time(fraction: float, n: float) -> float:
    """``k t`` at which the JMAK fraction reaches ``fraction`` (inverse of avrami_fraction)."""
    if not 0.0 < fraction < 1.0:
        raise ValueError("fraction must be strictly between 0 and 1")
    return (-math.log1p(-fraction)) ** (1.0 / n)


@dataclass(frozen=True)
class Kinetics:
    """Crystallization rate of the amorphous phase against temperature.

    Attributes
    ----------
    activation_ev:
        Activation energy of crystallization, eV.
    avrami_n:
        Avrami exponent.
    ref_k, ref_time_s, ref_fraction:
        Anchor: ``X`` reaches ``ref_fraction`` after ``ref_time_s`` at ``ref_k``.
    melt_k:
        Melting temperature, K (the rate is zero at and above it with a driving force).
    driving_ev_per_k:
        ``dH_f * Omega / Tm`` in eV/K, so that ``dG = driving_ev_per_k * (Tm - T)``;
        0 = pure Arrhenius (no driving-force factor).
    """

    activation_ev: float
    avrami_n: float
    ref_k: float
    ref_time_s: float
    ref_fraction: float
    melt_k: float
    driving_ev_per_k: float = 0.0

    def __post_init__(self) -> None:
        for name in ("activation_ev", "avrami_n", "ref_k", "ref_time_s", "melt_k"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v > 0):
                raise ValueError(f"{name} must be a finite number > 0, got {v!r}")
        if not 0.0 < self.ref_fraction < 1.0:
            raise ValueError("ref_fraction must be strictly between 0 and 1")
        if not self.ref_k < self.melt_k:
            raise ValueError("the reference temperature must lie below melting")
        if self.driving_ev_per_k < 0:
            raise ValueError("driving_ev_per_k must be >= 0")

    @property
    def ref_rate_per_s(self) -> float:
        """``k(T_ref)`` from the anchor point."""
        return avrami_reduced_time(self.ref_fraction, self.avrami_n) / self.ref_time_s

    def driving_factor(self, temp_k: np.ndarray | float) -> np.ndarray:
        """Wilson-Frenkel factor ``1 - exp(-dG/kT)`` (1 without a driving force, 0 at melting)."""
        t = np.asarray(temp_k, dtype=np.float64)
        if self.driving_ev_per_k == 0.0:
            return np.ones_like(t)
        dg = self.driving_ev_per_k * np.maximum(self.melt_k - t, 0.0)
        return -np.expm1(-dg / (K_B_EV_PER_K * t))

    def arrhenius_ratio(self, temp_k: np.ndarray | float) -> np.ndarray:
        """``exp(-Ea/k (1/T - 1/T_ref))``: the activated part against the anchor."""
        t = np.asarray(temp_k, dtype=np.float64)
        return np.exp(-self.activation_ev / K_B_EV_PER_K * (1.0 / t - 1.0 / self.ref_k))

    def rate(self, temp_k: np.ndarray | float) -> np.ndarray:
        """Crystallization rate ``k(T)``, 1/s; exactly the anchor rate at ``T_ref``."""
        t = np.asarray(temp_k, dtype=np.float64)
        g = self.driving_factor(t) / float(self.driving_factor(self.ref_k))
        return self.ref_rate_per_s * self.arrhenius_ratio(t) * g

    def time_to_fraction_s(self, fraction: float, temp_k: np.ndarray | float) -> np.ndarray:
        """Isothermal time for ``X`` to reach ``fraction``, s (inf at or above melting)."""
        k = self.rate(temp_k)
        with np.errstate(divide="ignore"):
            return np.where(k > 0, avrami_reduced_time(fraction, self.avrami_n) / np.where(k > 0, k, 1.0),
                            np.inf)

    def fastest_k(self, low_k: float) -> float:
        """Temperature of the fastest crystallization between ``low_k`` and melting
        (the nose of the time-temperature-transformation curve).  Without a
        driving force the rate only grows, so this is just below melting."""
        hi = self.melt_k - 1e-3
        res = optimize.minimize_scalar(lambda t: -math.log(max(float(self.rate(t)), 1e-300)),
                                       bounds=(low_k, hi), method="bounded",
                                       options={"xatol": 1e-3})
        return float(res.x)

    def cooling_integral(self, ambient_k: float, high_k: float, low_k: float) -> float:
        """``I = integral_{low}^{high} k(T) / (T - T0) dT``, 1/s.

        For exponential cooling ``T = T0 + (high - T0) exp(-t/tau)`` from
        ``high`` down to ``low``, the additivity rule gives a reduced time
        ``tau * I`` (substituting ``dt = -tau dT / (T - T0)``).
        """
        if not ambient_k < low_k < high_k:
            raise ValueError("need ambient < low < high temperatures")
        nose = min(max(self.fastest_k(low_k), low_k), high_k)
        pts = [p for p in (nose,) if low_k < p < high_k]
        val, _ = integrate.quad(lambda t: float(self.rate(t)) / (t - ambient_k), low_k, high_k,
                                points=pts or None, limit=400, epsabs=0.0, epsrel=1e-10)
        return float(val)

    def retention_s(self, temp_k: np.ndarray | float, fail_fraction: float | None = None) -> np.ndarray:
        """Time for an amorphous cell held at ``temp_k`` to crystallize to
        ``fail_fraction`` (default: the anchor's fraction), s."""
        return self.time_to_fraction_s(self.ref_fraction if fail_fraction is None else fail_fraction,
                                       temp_k)

    def ramp_crystallization_k(self, rate_k_per_s: float, start_k: float = 300.0,
                               fraction: float = 0.5) -> float:
        """Temperature at which a constant heating ramp reaches ``fraction``
        crystallized (what a calorimeter or resistance-versus-temperature
        measurement reports as the crystallization temperature)."""
        target = avrami_reduced_time(fraction, self.avrami_n) * rate_k_per_s

        def reduced(t_end: float) -> float:
            v, _ = integrate.quad(lambda t: float(self.rate(t)), start_k, t_end, limit=400,
                                  epsabs=0.0, epsrel=1e-10)
            return v

        lo, hi = start_k + 1e-6, self.fastest_k(start_k + 1.0)
        if reduced(hi) < target:
            return math.inf
        return float(optimize.brentq(lambda t: reduced(t) - target, lo, hi, xtol=1e-6))


def driving_ev_per_k(latent_heat_j_cm3: float, atomic_volume_nm3: float, melt_k: float) -> float:
    """Turnbull's ``dH_f * Omega / Tm`` in eV/K from a volumetric latent heat."""
    per_atom_j = latent_heat_j_cm3 * 1e6 * atomic_volume_nm3 * 1e-27
    return per_atom_j / EV_J / melt_k
