"""Crystallization of the amorphous state at temperature: retention-limited refresh."""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize, stats

from memsim.experiment.drift import drift_report
from memsim.tech.drift import DriftParams, line_rber, rber_mc, refresh_age
from memsim.tech.mlc import MlcCell
from memsim.tech.retention import Retention

YEAR_S = 365.25 * 24 * 3600
KB = 8.617333262e-5  # eV/K, CODATA 2018


@pytest.fixture()
def ret() -> Retention:
    # 10 years to half failed at 85 C (common practice spec point), Ea 2.3 eV (from memory).
    return Retention(2.3, 358.15, 10 * YEAR_S, 0.5, 3.0)


def slc(ret: Retention | None) -> tuple[MlcCell, DriftParams]:
    cell = MlcCell(bits_per_cell=1, level_log10_ohm=(3.0, 6.0), program_sigma_decades=1 / 6,
                   pv_mean_iterations=1.0, pulse_ns=(150.0, 40.0), pulse_pj=(13.5, 19.2), verify_ns=48.0,
                   verify_pj=2.0, verify_band_sigma=2.75)
    return cell, DriftParams((0.0, 0.0), (0.0, 0.0), 1.0, 1e9, 0.0, 300.0, ret)


def test_failure_times_are_weibull_through_the_anchor(ret) -> None:
    # JMAK fraction 1 - exp(-(k t)^n) is the Weibull cdf with shape n, scale 1/k (scipy.stats.weibull_min).
    ages = np.array([1e5, 1e7, 10 * YEAR_S, 1e9])
    k = ret.rate_per_s(358.15)
    assert np.allclose(ret.fail_prob(ages, 358.15), stats.weibull_min.cdf(ages, 3.0, scale=1 / k), rtol=1e-12)
    assert float(ret.fail_prob(10 * YEAR_S, 358.15)) == pytest.approx(0.5, rel=1e-12)
    assert ret.median_s(358.15) == pytest.approx(10 * YEAR_S, rel=1e-12)


def test_median_life_scales_as_arrhenius(ret) -> None:
    # t50(T) / t50(T_ref) = exp(Ea/kB (1/T - 1/T_ref)) (Arrhenius).
    for t in (300.0, 398.15, 423.15):
        want = 10 * YEAR_S * math.exp(2.3 / KB * (1 / t - 1 / 358.15))
        assert ret.median_s(t) == pytest.approx(want, rel=1e-9)


@pytest.mark.parametrize("temp_k", [358.15, 398.15])
def test_slc_retention_refresh_age_closed_form(ret, temp_k) -> None:
    # SLC, random data, no drift: half the cells are RESET, a crystallized one
    # flips its bit, so RBER = F(t)/2; the line fails when Bin(512, RBER) > 8
    # (scipy.stats.binom).  Solve for the age by hand and compare.
    cell, drift = slc(ret)
    got = refresh_age(cell, drift, 512, 8, 1e-9, temp_k)
    f_target = 2 * optimize.brentq(lambda p: math.log(stats.binom.sf(8, 512, p)) - math.log(1e-9), 1e-12, 0.4,
                                   xtol=1e-16, rtol=1e-14)
    k = ret.rate_per_s(temp_k)
    want = (-math.log1p(-f_target)) ** (1 / 3) / k
    assert got.status == "found"
    assert got.age_s == pytest.approx(want, rel=1e-6)


def test_crystallization_rber_agrees_with_monte_carlo(ret) -> None:
    cell, drift = slc(ret)
    ages = np.array([1e8, 3e8])
    n = 200_000
    est, _ = rber_mc(cell, drift, ages, n, np.random.default_rng(5), temp_k=358.15)
    ref = line_rber(cell, drift, ages, temp_k=358.15)
    assert np.all(ref > 1e-4)
    assert np.all(np.abs(est - ref) <= 4 * np.sqrt(ref * (1 - ref) / n))


def test_drift_report_gives_retention_age_at_high_temperature() -> None:
    hot = drift_report(None, refresh__temperature_k=398.15).summary
    warm = drift_report(None, refresh__temperature_k=358.15).summary
    # No default drift activation energy: the combined age is null with a note.
    assert hot["refresh_age_s"] is None and "drift_activation_ev" in hot["note"]
    assert 0 < hot["retention_refresh_age_s"] < warm["retention_refresh_age_s"] < 10 * YEAR_S
    # With a drift activation energy given, the combined age exists and is no longer than retention alone.
    both = drift_report(None, refresh__temperature_k=398.15, cell__drift_activation_ev=1.0).summary
    assert both["refresh_age_s"] <= hot["retention_refresh_age_s"] * (1 + 1e-9)
    room = drift_report(None).summary
    assert room["retention_refresh_age_s"] is None  # not within the law's window at 300 K
