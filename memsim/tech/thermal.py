"""Lumped electro-thermal model of one phase-change cell, from geometry and
material to SET and RESET pulses.

The programmed region is one thermal node: heat capacity ``C = c_v * V`` of the
active volume, connected to the surroundings (at ``T0``) through the capping
layer, a slab of thickness ``d`` and conductivity ``k`` over the contact area
``A``: ``R = d / (k A)`` (Fourier's law).  A constant power ``P`` (Joule heat
``I^2 R_on`` in the cell's ON-state resistance) raises the temperature as::

    T(t) = T0 + P R (1 - exp(-t / (R C)))

RESET.  The drive is ``overdrive`` times the power that holds the cell at
melting, ``P_melt = (Tm - T0) / R``.  It reaches ``Tm`` after
``tau ln(o / (o - 1))``, then the surplus ``P - P_melt`` supplies the latent
heat ``L V``; the pulse is never shorter than the driver's shortest pulse.
After the pulse the cell cools as ``T0 + (Tm - T0) exp(-t/tau)``; it must pass
the crystallization window ``[Tx, Tm]`` before crystals grow.  With the
additivity rule the crystallized fraction on the way down is
``1 - exp(-(tau I)^n)`` with ``I = integral k(T)/(T - T0) dT``
(:meth:`Kinetics.cooling_integral`), so the slowest acceptable cooling is
``tau_c = (-ln(1 - X_max))^(1/n) / I``: the critical crystallization time is
the cooling time through the window at ``tau_c``.

SET.  The drive holds the cell at the SET temperature (default: the nose of
the crystallization curve, where crystals grow fastest) until the fraction
reaches ``set_fraction``, along the heating curve above.

Scope: one node, one heat path, temperature-independent properties, an ideal
trailing pulse edge.  These are estimates for architecture studies, not a
device design; device decisions belong to silicon characterisation.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import integrate, optimize

from memsim.tech.crystallization import ZERO_C_K, Kinetics, avrami_fraction, avrami_reduced_time

CAUTION = ("Estimates for architecture studies from a lumped one-node thermal model, not a device "
           "design; device decisions belong to silicon characterisation.")


@dataclass(frozen=True)
class CellPhysics:
    """Inputs of the lumped model (units in the names)."""

    active_volume_nm3: float
    contact_area_nm2: float
    heat_capacity_j_cm3k: float
    latent_heat_j_cm3: float
    melt_c: float
    cryst_c: float
    capping_conductivity_w_mk: float
    capping_thickness_nm: float
    on_resistance_ohm: float
    current_limit_ua: float
    min_pulse_ns: float
    ambient_c: float
    reset_overdrive: float
    quench_max_fraction: float
    set_fraction: float
    kinetics: Kinetics
    set_c: float | None = None

    def __post_init__(self) -> None:
        for name in ("active_volume_nm3", "contact_area_nm2", "heat_capacity_j_cm3k",
                     "capping_conductivity_w_mk", "capping_thickness_nm", "on_resistance_ohm",
                     "current_limit_ua"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v > 0):
                raise ValueError(f"{name} must be a finite number > 0, got {v!r}")
        if not (self.latent_heat_j_cm3 >= 0 and self.min_pulse_ns >= 0):
            raise ValueError("latent_heat_j_cm3 and min_pulse_ns must be >= 0")
        if not self.ambient_c < self.cryst_c < self.melt_c:
            raise ValueError("need ambient_c < cryst_c < melt_c")
        if not self.reset_overdrive > 1:
            raise ValueError("reset_overdrive must be > 1 (the cell must pass melting)")
        if not (0 < self.quench_max_fraction < 1 and 0 < self.set_fraction < 1):
            raise ValueError("quench_max_fraction and set_fraction must lie strictly between 0 and 1")
        if self.set_c is not None and not self.cryst_c < self.set_c < self.melt_c:
            raise ValueError("set_c must lie between cryst_c and melt_c")

    # -- the thermal node --------------------------------------------------
    @property
    def t0_k(self) -> float:
        return self.ambient_c + ZERO_C_K

    @property
    def melt_k(self) -> float:
        return self.melt_c + ZERO_C_K

    @property
    def cryst_k(self) -> float:
        return self.cryst_c + ZERO_C_K

    @property
    def r_th_k_per_w(self) -> float:
        """Thermal resistance of the capping path ``d / (k A)``, K/W."""
        return (self.capping_thickness_nm * 1e-9) / (self.capping_conductivity_w_mk
                                                     * self.contact_area_nm2 * 1e-18)

    @property
    def c_th_j_per_k(self) -> float:
        """Heat capacity of the active volume ``c_v V``, J/K."""
        return self.heat_capacity_j_cm3k * 1e6 * self.active_volume_nm3 * 1e-27

    @property
    def tau_s(self) -> float:
        return self.r_th_k_per_w * self.c_th_j_per_k

    def temperature_k(self, power_w: float, t_s: np.ndarray | float) -> np.ndarray:
        """``T0 + P R (1 - exp(-t/(R C)))``: heating under constant power, K."""
        t = np.asarray(t_s, dtype=np.float64)
        return self.t0_k + power_w * self.r_th_k_per_w * -np.expm1(-t / self.tau_s)

    def current_ua(self, power_w: float) -> float:
        """Current that dissipates ``power_w`` in the ON-state resistance, uA."""
        return math.sqrt(power_w / self.on_resistance_ohm) * 1e6

    # -- RESET ---------------------------------------------------------------
    def reset(self) -> dict[str, float | bool]:
        r, tau = self.r_th_k_per_w, self.tau_s
        p_melt = (self.melt_k - self.t0_k) / r
        o = self.reset_overdrive
        p = o * p_melt
        t_heat = tau * math.log(o / (o - 1.0))
        latent_j = self.latent_heat_j_cm3 * 1e6 * self.active_volume_nm3 * 1e-27
        t_latent = latent_j / (p - p_melt)
        need_s = t_heat + t_latent
        pulse_s = max(need_s, self.min_pulse_ns * 1e-9)
        current = self.current_ua(p)
        return {
            "reset_melt_power_uw": p_melt * 1e6,
            "reset_power_uw": p * 1e6,
            "reset_current_ua": current,
            "reset_voltage_v": current * 1e-6 * self.on_resistance_ohm,
            "reset_heat_ns": t_heat * 1e9,
            "reset_latent_ns": t_latent * 1e9,
            "reset_pulse_needed_ns": need_s * 1e9,
            "reset_ns": pulse_s * 1e9,
            "reset_pj": p * pulse_s * 1e12,
            "reset_within_current_limit": bool(current <= self.current_limit_ua),
        }

    # -- quench --------------------------------------------------------------
    def quench(self) -> dict[str, float | bool]:
        kin, tau = self.kinetics, self.tau_s
        window = math.log((self.melt_k - self.t0_k) / (self.cryst_k - self.t0_k))
        integral = kin.cooling_integral(self.t0_k, self.melt_k, self.cryst_k)
        frac = float(avrami_fraction(tau * integral, kin.avrami_n))
        tau_c = avrami_reduced_time(self.quench_max_fraction, kin.avrami_n) / integral
        return {
            "quench_ns": tau * window * 1e9,
            "critical_quench_ns": tau_c * window * 1e9,
            "quench_crystallized_fraction": frac,
            "quench_fast_enough": bool(frac <= self.quench_max_fraction),
        }

    # -- SET -----------------------------------------------------------------
    def set_temperature_k(self) -> float:
        if self.set_c is not None:
            return self.set_c + ZERO_C_K
        return self.kinetics.fastest_k(self.cryst_k)

    def set_(self) -> dict[str, float | bool]:
        kin, tau = self.kinetics, self.tau_s
        t_set = self.set_temperature_k()
        p = (t_set - self.t0_k) / self.r_th_k_per_w
        target = avrami_reduced_time(self.set_fraction, kin.avrami_n)
        k_set = float(kin.rate(t_set))

        def reduced(t: float) -> float:
            v, _ = integrate.quad(lambda s: float(kin.rate(self.temperature_k(p, s))), 0.0, t,
                                  limit=400, epsabs=0.0, epsrel=1e-10)
            return v

        # Bracket: the heating lag adds at most a few tau to the isothermal time.
        hi = target / k_set + 50.0 * tau
        need_s = float(optimize.brentq(lambda t: reduced(t) - target, 0.0, hi, xtol=1e-15, rtol=1e-10))
        pulse_s = max(need_s, self.min_pulse_ns * 1e-9)
        current = self.current_ua(p)
        return {
            "set_temperature_c": t_set - ZERO_C_K,
            "set_power_uw": p * 1e6,
            "set_current_ua": current,
            "set_pulse_needed_ns": need_s * 1e9,
            "set_ns": pulse_s * 1e9,
            "set_pj": p * pulse_s * 1e12,
            "set_within_current_limit": bool(current <= self.current_limit_ua),
        }

    def derive(self) -> dict[str, float | bool]:
        """Every derived quantity, units in the names."""
        out: dict[str, float | bool] = {
            "thermal_resistance_k_per_uw": self.r_th_k_per_w * 1e-6,
            "heat_capacity_fj_per_k": self.c_th_j_per_k * 1e15,
            "thermal_time_constant_ns": self.tau_s * 1e9,
        }
        out.update(self.reset())
        out.update(self.quench())
        out.update(self.set_())
        kin = self.kinetics
        out["retention_years_at_85c"] = float(kin.retention_s(85.0 + ZERO_C_K)) / (365.25 * 86400)
        return out
