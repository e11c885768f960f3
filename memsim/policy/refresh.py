"""Refresh policies: when a line must be rewritten because its cells drift.

The refresh age ``A`` is the line age (s, device time) at which the
probability that the line holds more errors than its ECC corrects reaches
``refresh.max_fail_prob`` (:func:`memsim.tech.drift.refresh_age`).

Time scaling.  The timing engine simulates ``array.lines`` modeled lines that
stand for ``S = device lines / modeled lines`` device lines each, while every
bank sees the full request rate.  A device line therefore sees a modeled
line's writes ``S`` times less often.  Running the modeled lines with ages
scaled by ``S`` (a modeled line of simulated age ``a`` stands for device lines
of age ``S a``) makes each bank's refresh operation rate equal to the
device's: the bank refreshes ``S`` times more lines, each ``S`` times less
often.  So a periodic refresh of period ``T`` runs every ``T / S`` of
simulated time, and the drift-triggered policy refreshes a modeled line whose
simulated age reaches ``A / S``.  Deterministic rewrite patterns keep their
meaning: a line rewritten every ``P`` simulated ns is rewritten every ``S P``
in the device.
"""
from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from memsim.config import RunConfig
from memsim.errors import ConfigError
from memsim.registry import Registry
from memsim.tech.drift import error_table, refresh_age
from memsim.tech.models import drift_params, mlc_cell
from memsim.units import GIB, NS_PER_S


@dataclass(frozen=True)
class RefreshPolicy:
    """A refresh policy: its name, what it does, and the device-time interval at which it
    rewrites a line (NaN: it rewrites none on a schedule)."""

    name: str
    summary: str
    interval_s: Callable[[float, float], float]     # (refresh.interval_s, refresh age s) -> interval s


REFRESH_POLICIES: Registry[RefreshPolicy] = Registry("refresh policy", "refresh.policy")
for _p in (
    RefreshPolicy("none", "no refresh", lambda period, age: math.nan),
    RefreshPolicy("periodic", "every line every refresh.interval_s", lambda period, age: period),
    RefreshPolicy("drift", "a line when its age since its last write reaches the refresh age",
                  lambda period, age: age),
    RefreshPolicy("scrub", "a read that sees more than refresh.scrub_errors errors rewrites the line",
                  lambda period, age: math.nan),
):
    REFRESH_POLICIES.add(_p)
# The names, for callers that only need them.
POLICIES: tuple[str, ...] = tuple(REFRESH_POLICIES.names())


@dataclass
class RefreshPlan:
    """Everything the engine needs to run a refresh policy.

    Attributes
    ----------
    age_s:
        Refresh age the design needs (device seconds; inf if never within the
        drift law's window).
    interval_s:
        Period the policy refreshes with (``age_s`` for drift, the configured
        interval for periodic, NaN for none and scrub).
    scale:
        Device lines per modeled line.
    threshold_ns:
        Simulated age at which the policy refreshes a line (``interval / S``).
    """

    policy: str
    age_s: float
    status: str
    interval_s: float
    scale: float
    threshold_ns: float
    scan_ns: float
    bits_per_line: int
    scrub_errors: int
    start: str
    log_age_grid: np.ndarray          # log10 device age, s
    rber_grid: np.ndarray
    p_fail_grid: np.ndarray

    @property
    def active(self) -> bool:
        """A scanning policy with a refresh age that comes (a cell that never needs
        refresh within the drift law's window, e.g. SLC, leaves nothing to scan)."""
        return self.policy in ("periodic", "drift") and math.isfinite(self.threshold_ns)

    def _interp(self, grid: np.ndarray, device_age_s: np.ndarray) -> np.ndarray:
        x = np.log10(np.maximum(np.asarray(device_age_s, dtype=float), 1e-12))
        return np.interp(x, self.log_age_grid, grid, left=grid[0], right=grid[-1])

    def rber(self, device_age_s: npt.ArrayLike) -> np.ndarray:
        """Raw bit error rate of a line of the given device age."""
        return self._interp(self.rber_grid, device_age_s)

    def p_fail(self, device_age_s: npt.ArrayLike) -> np.ndarray:
        """Probability that a line of that age is uncorrectable."""
        return self._interp(self.p_fail_grid, device_age_s)

    def device_age_s(self, sim_age_ns: npt.ArrayLike) -> np.ndarray:
        return np.asarray(sim_age_ns, dtype=float) * self.scale / NS_PER_S


def line_scale(cfg: RunConfig) -> float:
    """Device lines per modeled line (>= 1)."""
    device_lines = cfg.array.capacity_gib * GIB / cfg.array.line_bytes
    return max(1.0, device_lines / cfg.array.lines)


def plan_refresh(cfg: RunConfig) -> RefreshPlan:
    """Refresh age and the engine-side plan of a config's refresh policy."""
    r = cfg.refresh
    cell, drift = mlc_cell(cfg), drift_params(cfg)
    n_cells = cell.cells_per_line(cfg.array.line_bytes * 8)
    ra = refresh_age(cell, drift, n_cells, r.correctable_bits, r.max_fail_prob, r.temperature_k,
                     method=r.fail_model)
    ages = np.logspace(-3, math.log10(drift.drift_t_max_s), 121)
    tab = error_table(cell, drift, ages, n_cells, r.correctable_bits, r.temperature_k,
                      method=r.fail_model)
    scale = line_scale(cfg)
    interval = REFRESH_POLICIES.get_part(r.policy).interval_s(r.interval_s, ra.age_s)
    threshold = interval * NS_PER_S / scale if math.isfinite(interval) else math.inf
    scan = threshold * r.scan_fraction if math.isfinite(threshold) else math.inf
    return RefreshPlan(r.policy, ra.age_s, ra.status, interval, scale, threshold, scan,
                       round(n_cells * cell.bits_stored), r.scrub_errors, r.start, np.log10(ages),
                       tab["rber_line"].to_numpy(), tab["p_uncorrectable"].to_numpy())


def refresh_load(plan: RefreshPlan, lines_per_bank: np.ndarray, service_ns: float) -> float:
    """Share of the busiest bank's time that refresh alone needs (0 for no scanning policy).

    Each of a bank's modeled lines is refreshed once per ``threshold_ns`` of
    simulated time and each refresh holds the bank ``service_ns``.  By the
    time scaling above this equals the device's own figure, device lines
    per bank x service time / refresh interval, whatever ``array.lines`` is.
    """
    if not plan.active or not math.isfinite(plan.threshold_ns) or plan.threshold_ns <= 0:
        return 0.0
    return float(np.max(lines_per_bank, initial=0)) * service_ns / plan.threshold_ns


# Refresh operations one run may simulate: the same bound as workload.requests
# (each costs the engine about as much as a request).
MAX_REFRESH_OPS = 50_000_000


def refresh_ops(plan: RefreshPlan, lines_per_bank: np.ndarray, span_ns: float) -> float:
    """Refresh operations a run of ``span_ns`` simulated time performs (steady state).

    Every modeled line is refreshed once per ``threshold_ns``; by the time
    scaling this is the device's own count, whatever ``array.lines`` is.
    """
    if not plan.active or not math.isfinite(plan.threshold_ns) or plan.threshold_ns <= 0:
        return 0.0
    return float(np.sum(lines_per_bank)) * span_ns / plan.threshold_ns


def check_refresh_load(plan: RefreshPlan, lines_per_bank: np.ndarray, service_ns: float,
                       span_ns: float | None = None) -> float:
    """Raise ConfigError if refresh alone needs a bank's whole time; return the load.

    At a load of 1 or more the refresh backlog grows without end: lines
    outlive their refresh age, and since refresh outranks writes the run
    need not end at all.  No modeled result would mean anything.  With the
    run's expected simulated span ``span_ns``, a run that would simulate
    more than :data:`MAX_REFRESH_OPS` refreshes is refused too: it would
    not hang, but run for hours.
    """
    if span_ns is not None and math.isfinite(span_ns):
        ops = refresh_ops(plan, lines_per_bank, span_ns)
        if ops > MAX_REFRESH_OPS:
            raise ConfigError(
                "workload.requests",
                f"a run of about {span_ns / 1e9:,.4g} s simulated time, in which refresh policy "
                f"'{plan.policy}' would perform about {ops:,.3g} refreshes",
                f"at most {MAX_REFRESH_OPS:,} refreshes per run: fewer workload.requests or a shorter "
                f"workload.interval_ns (refreshes scale with simulated time and array.capacity_gib, "
                f"not with array.lines)")
    load = refresh_load(plan, lines_per_bank, service_ns)
    if load >= 1.0:
        per_bank = float(np.max(lines_per_bank)) * plan.scale
        longer = ("a longer refresh.interval_s" if plan.policy == "periodic" else
                  "a longer refresh age (refresh.correctable_bits, refresh.max_fail_prob)")
        raise ConfigError(
            "refresh.policy",
            f"'{plan.policy}' needing {load:.2f} times a bank's time for refresh alone "
            f"({per_bank:,.0f} device lines per bank, each refreshed every {plan.interval_s:,.4g} s "
            f"at {service_ns:,.0f} ns a refresh)",
            f"a refresh load below 1: more banks (array.banks, array.channels), less capacity "
            f"(array.capacity_gib), {longer}, or refresh.policy 'none' or 'scrub'")
    return load
