"""Resistance drift, line error rates and refresh age."""

from __future__ import annotations

import itertools
import math
import tomllib
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from memsim.errors import ConfigError
from memsim.report.drift_plot import plot_rber, rber_figure
from memsim.tech.drift import (
    DriftParams,
    arrhenius_factor,
    cell_bit_error_pmf,
    crossing_prob,
    crossing_prob_mc,
    drift_decades,
    drift_log10_r,
    error_table,
    line_fail_prob,
    line_rber,
    p_line_fail_binomial,
    p_line_fail_exact,
    rber_by_level,
    rber_limit,
    rber_mc,
    refresh_age,
)
from memsim.tech.mlc import MlcCell

PRESET = Path(__file__).resolve().parents[1] / "memsim" / "config" / "presets" / "pcm_mlc2.toml"
YEAR_S = 365.25 * 24 * 3600
LINE_CELLS_2BIT = 256  # 64-byte line of 2-bit cells
TEN_YEARS_S = 10 * YEAR_S


@pytest.fixture(scope="module")
def preset() -> dict:
    return tomllib.loads(PRESET.read_text())


@pytest.fixture(scope="module")
def mlc(preset: dict) -> tuple[MlcCell, DriftParams]:
    cell = MlcCell.from_dict(preset["cell"])
    return cell, DriftParams.from_dict(preset["cell"], cell.n_levels)


def untruncated(cell: MlcCell) -> MlcCell:
    return replace(cell, verify_band_sigma=None)


def slc_from_preset(preset: dict, band: float | None) -> tuple[MlcCell, DriftParams]:
    """SLC made of the preset's end levels: fully SET and fully RESET."""
    c = preset["cell"]
    cell = MlcCell(
        bits_per_cell=1,
        level_log10_ohm=(c["level_log10_ohm"][0], c["level_log10_ohm"][-1]),
        program_sigma_decades=c["program_sigma_decades"],
        pv_mean_iterations=1.0,
        pulse_ns=(c["pulse_ns"][0], c["pulse_ns"][-1]),
        pulse_pj=(c["pulse_pj"][0], c["pulse_pj"][-1]),
        verify_ns=c["verify_ns"],
        verify_pj=c["verify_pj"],
        verify_band_sigma=band,
    )
    nu = (c["drift_nu"][0], c["drift_nu"][-1])
    return cell, DriftParams.from_dict({**c, "drift_nu": nu}, 2)


# ------------------------------------------------------------------ the law
def test_drift_law_factor_per_decade() -> None:
    # R = R0 (t/t0)^nu: nu = 0.1 raises R by 10^0.1 (about 1.26x) per decade
    # of time (Ielmini, Lacaita, Mantegazza, IEEE Trans. Electron Devices,
    # 2007; from memory for the exact figure of nu).
    ages = np.array([1.0, 10.0, 100.0, 1e4, 1e5])
    lr = drift_log10_r(5.0, 0.1, ages, t0_s=1.0)
    assert np.allclose(10 ** np.diff(lr)[:2], 10**0.1)
    assert 10 ** (lr[4] - lr[3]) == pytest.approx(1.2589254, rel=1e-7)
    # Before t0 the fit does not apply: R is held at R0.
    assert drift_log10_r(5.0, 0.1, 0.01, t0_s=1.0) == pytest.approx(5.0)


def test_window_flags_and_clamp() -> None:
    d = DriftParams((0.1,), (0.0,), drift_t0_s=1.0, drift_t_max_s=1e6)
    x, inside = drift_decades([0.5, 10.0, 1e8], d)
    assert inside.tolist() == [False, True, False]
    assert np.allclose(x, [0.0, 1.0, 8.0])
    xc, _ = drift_decades([1e8], d, beyond="clamp")
    assert xc[0] == pytest.approx(6.0)


def test_arrhenius_factor_against_hand_formula() -> None:
    # exp(Ea/k (1/T_ref - 1/T)); k = 8.617333262e-5 eV/K (CODATA 2018).
    k = 8.617333262e-5
    assert arrhenius_factor(358.0, 300.0, 1.0) == pytest.approx(
        math.exp(1.0 / k * (1 / 300 - 1 / 358)), rel=1e-9
    )
    assert arrhenius_factor(300.0, 300.0, 1.0) == 1.0
    assert arrhenius_factor(280.0, 300.0, 0.5) < 1.0


def test_other_temperature_needs_activation_energy(mlc) -> None:
    cell, drift = mlc
    assert drift.drift_activation_ev is None
    with pytest.raises(ConfigError) as err:
        crossing_prob(cell, drift, [10.0], temp_k=350.0)
    assert err.value.where == "refresh.temperature_k"


# --------------------------------------------------- crossing probabilities
def test_analytic_crossing_is_the_normal_tail(mlc) -> None:
    # log R(t) ~ N(mu + mu_nu x, s^2 + s_nu^2 x^2) (sum of independent normals);
    # tail from scipy.stats.norm.
    cell, drift = mlc
    cell = untruncated(cell)
    ages = np.array([1.0, 30.0, 1e5])
    got = crossing_prob(cell, drift, ages)
    x = np.log10(ages)
    for lv in range(3):
        mean = cell.level_mu[lv] + drift.drift_nu[lv] * x
        sd = np.sqrt(cell.level_sigma[lv] ** 2 + (drift.drift_nu_sd[lv] * x) ** 2)
        assert np.allclose(got[:, lv], stats.norm.sf(cell.thresholds[lv], mean, sd), rtol=1e-9, atol=0)
    assert np.all(got[:, 3] == 0.0)  # nothing above the top level


def test_wide_verify_band_equals_untruncated(mlc) -> None:
    # A band of 30 sigma cuts nothing: the quadrature must reproduce the closed form.
    cell, drift = mlc
    ages = np.array([3.0, 1e3, 1e7])
    wide = crossing_prob(replace(cell, verify_band_sigma=30.0), drift, ages)
    ref = crossing_prob(untruncated(cell), drift, ages)
    assert np.allclose(wide, ref, rtol=1e-6, atol=0)


@pytest.mark.parametrize("band", [1.0, 2.75])
def test_truncated_crossing_matches_integral_over_nu(mlc, band) -> None:
    # Reference in the other order of integration: E_nu[ P(R0 > th - nu x) ]
    # with R0's survival from scipy.stats.truncnorm, nu's density from
    # scipy.stats.norm, integrated by scipy.integrate.quad.
    from scipy import integrate

    cell, drift = mlc
    cell = replace(cell, verify_band_sigma=band)
    ages = np.array([300.0, 1e6])
    got = crossing_prob(cell, drift, ages)
    for lv in (1, 2):
        mu, sig, th = cell.level_mu[lv], cell.level_sigma[lv], cell.thresholds[lv]
        m, s = drift.drift_nu[lv], drift.drift_nu_sd[lv]
        for a, x in enumerate(np.log10(ages)):

            def f(
                v: float,
                x: float = x,
                mu: float = mu,
                sig: float = sig,
                th: float = th,
                m: float = m,
                s: float = s,
            ) -> float:
                return stats.norm.pdf(v, m, s) * stats.truncnorm.sf(
                    th - v * x, -band, band, loc=mu, scale=sig
                )

            lo, hi = m - 12 * s, m + 12 * s
            kinks = sorted(k for e in (-1, 1) if lo < (k := (th - mu - e * band * sig) / x) < hi)
            ref, _ = integrate.quad(f, lo, hi, points=kinks or None, epsabs=0, epsrel=1e-10, limit=200)
            assert got[a, lv] == pytest.approx(ref, rel=1e-6)


@pytest.mark.parametrize("band", [None, 2.75])
@pytest.mark.parametrize("level", [1, 2])
def test_analytic_crossing_agrees_with_monte_carlo(mlc, band, level) -> None:
    cell, drift = mlc
    cell = replace(cell, verify_band_sigma=band)
    ages = np.array([200.0, 1e4, 1e7])
    n = 200_000
    est, _ = crossing_prob_mc(cell, drift, level, ages, n, np.random.default_rng(100 + level))
    ref = crossing_prob(cell, drift, ages)[:, level]
    se = np.sqrt(ref * (1 - ref) / n)
    assert np.all(ref > 1e-4)  # the comparison must have something to see
    assert np.all(np.abs(est - ref) <= 4 * se)


def test_truncated_band_has_no_errors_at_t0(mlc) -> None:
    cell, drift = mlc
    assert np.all(crossing_prob(cell, drift, [1.0]) == 0.0)  # band 2.75 sigma < 3 sigma margin
    margin = (cell.thresholds[0] - cell.level_mu[0]) / cell.level_sigma[0]
    assert crossing_prob(untruncated(cell), drift, [1.0])[0, 0] == pytest.approx(
        stats.norm.sf(margin), rel=1e-9
    )


# ------------------------------------------------------------- bit errors
@pytest.mark.parametrize("band", [None, 2.75])
def test_line_rber_agrees_with_monte_carlo_read_back(mlc, band) -> None:
    # Independent path: sample cells, read them through the thresholds and
    # compare Gray-coded bits one by one.
    cell, drift = mlc
    cell = replace(cell, verify_band_sigma=band)
    ages = np.array([100.0, 1e5, 1e8])
    est, se = rber_mc(cell, drift, ages, 200_000, np.random.default_rng(7))
    ref = line_rber(cell, drift, ages)
    assert np.all(np.abs(est - ref) <= 4 * se)


def test_gray_code_adjacent_crossing_is_one_bit(mlc) -> None:
    # With Gray code a misread to the adjacent level flips exactly one of the
    # cell's bits, so while double crossings are negligible the per-level RBER
    # is the crossing probability over bits_per_cell (common practice).
    cell, drift = mlc
    ages = np.array([30.0, 300.0])
    cross = crossing_prob(cell, drift, ages)
    rber = rber_by_level(cell, drift, ages)
    assert np.allclose(rber[:, :3], cross[:, :3] / 2, rtol=1e-3)


def test_double_crossing_counts_two_bits() -> None:
    # Level 0 -> level 2 is 00 -> 11 in Gray code: two bits.
    cell = MlcCell(2, (3.0, 3.1, 3.2, 6.0), 0.01, 1.0, 1.0, 1.0, 1.0, 1.0)
    drift = DriftParams((0.1, 0.0, 0.0, 0.0), (0.0, 0.0, 0.0, 0.0))
    # At 10 s level 0 sits at log R = 3.1 + tail: above 3.05, mostly below 3.15.
    ages = np.array([10.0, 10.0**1.6])
    q = cell_bit_error_pmf(cell, drift, ages, level_probs=[1, 0, 0, 0])
    P1 = stats.norm.sf(3.05, 3.1, 0.01) - stats.norm.sf(3.15, 3.1, 0.01)
    P2 = stats.norm.sf(3.15, 3.1, 0.01)
    assert q[0, 1] == pytest.approx(P1) and q[0, 2] == pytest.approx(P2, rel=1e-6)
    assert q[1, 2] == pytest.approx(
        stats.norm.sf(3.15, 3.16, 0.01) - stats.norm.sf(4.6, 3.16, 0.01), rel=1e-6
    )
    assert rber_by_level(cell, drift, ages)[1, 0] == pytest.approx(q[1, 1] / 2 + q[1, 2], rel=1e-9)


# ----------------------------------------------------------- line failure
def test_binomial_line_failure_equals_scipy_and_closed_form() -> None:
    p = np.array([1e-12, 1e-6, 1e-3, 0.02])
    got = p_line_fail_binomial(p, 512, 4)
    assert np.allclose(got, stats.binom.sf(4, 512, p), rtol=1e-12)
    # No ECC: P(at least one error) = 1 - (1-p)^n, closed form.
    assert np.allclose(p_line_fail_binomial(p, 512, 0), -np.expm1(512 * np.log1p(-p)), rtol=1e-10)


def test_exact_line_failure_single_bit_cells_is_binomial() -> None:
    # One bit per cell: errors in n cells are Binomial(n, q1) (scipy.stats).
    q = np.array([[1 - 3e-4, 3e-4], [0.99, 0.01]])
    got = p_line_fail_exact(q, 512, 3)
    assert np.allclose(got, stats.binom.sf(3, 512, q[:, 1]), rtol=1e-9)


def test_exact_line_failure_matches_enumeration() -> None:
    q = np.array([0.9, 0.07, 0.03])  # 0, 1, 2 flipped bits per cell
    n, e = 4, 2
    brute = sum(
        math.prod(q[k] for k in combo) for combo in itertools.product(range(3), repeat=n) if sum(combo) > e
    )
    assert p_line_fail_exact(q, n, e)[0] == pytest.approx(brute, rel=1e-12)


def test_rber_limit_is_the_binomial_root() -> None:
    lim = rber_limit(512, 8, 1e-9)
    assert stats.binom.sf(8, 512, lim) == pytest.approx(1e-9, rel=1e-8)


# ------------------------------------------------------------ refresh age
@pytest.mark.parametrize("method", ["binomial", "exact"])
@pytest.mark.parametrize("band", [None, 2.75])
def test_refresh_age_plugs_back_to_target(mlc, method, band) -> None:
    cell, drift = mlc
    cell = replace(cell, verify_band_sigma=band)
    target = 1e-9
    ra = refresh_age(cell, drift, LINE_CELLS_2BIT, 8, target, method=method)
    assert ra.status == "found"
    p = line_fail_prob(cell, drift, [ra.age_s, ra.age_s * 0.99], LINE_CELLS_2BIT, 8, method=method)
    assert p[0] == pytest.approx(target, rel=1e-6)
    assert p[1] < target  # earliest crossing, not a later one


def test_refresh_age_flags_start_of_window(mlc) -> None:
    cell, drift = mlc
    # Untruncated cells already miss their band at t0 (3 sigma margin): with no
    # ECC a strict target is exceeded before drift even starts.
    ra = refresh_age(untruncated(cell), drift, LINE_CELLS_2BIT, 0, 1e-6)
    assert ra.status == "at_start" and ra.age_s == drift.drift_t0_s and ra.p_fail >= 1e-6


def test_refresh_age_scales_with_arrhenius_factor(mlc) -> None:
    # Temperature only rescales time, so the hot refresh age is the cold one
    # divided by the acceleration (activation energy here is a test value).
    cell, drift = mlc
    hot = replace(drift, drift_activation_ev=1.0)
    cold_age = refresh_age(cell, hot, LINE_CELLS_2BIT, 8, 1e-9).age_s
    hot_age = refresh_age(cell, hot, LINE_CELLS_2BIT, 8, 1e-9, temp_k=330.0).age_s
    assert hot_age == pytest.approx(cold_age / arrhenius_factor(330.0, 300.0, 1.0), rel=1e-6)


@pytest.mark.parametrize("band", [None, 2.75])
def test_slc_needs_no_refresh_in_ten_years_at_room_temperature(preset, band) -> None:
    # SLC keeps its two levels three decades apart; even without ECC a 64-byte
    # line stays below a 1e-9 failure probability for 10 years at 300 K
    # (common practice: SLC PCM is treated as non-volatile for ~10 years).
    cell, drift = slc_from_preset(preset, band)
    assert drift.drift_t_max_s >= TEN_YEARS_S  # inside the trusted window
    p10 = line_fail_prob(cell, drift, [TEN_YEARS_S], 512, 0, temp_k=300.0)[0]
    assert p10 < 1e-9
    ra = refresh_age(cell, drift, 512, 0, 1e-9, temp_k=300.0)
    assert ra.age_s > TEN_YEARS_S
    # The same line stored as 2-bit MLC does need refreshing (sanity of contrast).
    mcell = MlcCell.from_dict(preset["cell"])
    mdrift = DriftParams.from_dict(preset["cell"], 4)
    assert refresh_age(mcell, mdrift, LINE_CELLS_2BIT, 0, 1e-9).age_s < TEN_YEARS_S


# ------------------------------------------------------------------ table
def test_error_table_columns_agree_with_functions(mlc) -> None:
    cell, drift = mlc
    ages = np.logspace(0, 9, 10)
    t = error_table(cell, drift, ages, LINE_CELLS_2BIT, 8)
    assert list(t.columns[:2]) == ["age_s", "in_window"]
    assert t["in_window"].all()
    assert np.allclose(t["rber_line"], line_rber(cell, drift, ages), rtol=1e-12)
    assert np.allclose(
        t["p_uncorrectable"], line_fail_prob(cell, drift, ages, LINE_CELLS_2BIT, 8), rtol=1e-12
    )
    assert np.allclose(t[[f"cross_prob_level_{i}" for i in range(4)]], crossing_prob(cell, drift, ages))
    assert t["rber_line"].is_monotonic_increasing


def test_rber_figure_draws_table_and_saves_png(mlc, tmp_path) -> None:
    cell, drift = mlc
    t = error_table(cell, drift, np.logspace(0, 9, 19), LINE_CELLS_2BIT, 8)
    ra = refresh_age(cell, drift, LINE_CELLS_2BIT, 8, 1e-9)
    fig = rber_figure(t, rber_limit(512, 8, 1e-9), ra.age_s)
    ax = fig.axes[0]
    line = next(ln for ln in ax.get_lines() if ln.get_label() == "line (all levels)")
    y = t["rber_line"].to_numpy()
    assert np.allclose(line.get_ydata(), np.where(y > 0, y, np.nan), equal_nan=True)
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log" and "(s)" in ax.get_xlabel()
    out = plot_rber(t, 1e-3, math.inf, tmp_path / "sub" / "rber.png")
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not [p for p in out.parent.iterdir() if p.name.startswith(".")]  # temp file gone


# ------------------------------------------------------------------ errors
def test_user_mistakes_raise_config_error(mlc, preset) -> None:
    cell, drift = mlc
    with pytest.raises(ConfigError):
        refresh_age(cell, drift, LINE_CELLS_2BIT, 8, 1.5)
    with pytest.raises(ConfigError):
        line_fail_prob(cell, drift, [1.0], LINE_CELLS_2BIT, 8, method="guess")
    with pytest.raises(ConfigError):
        crossing_prob(cell, DriftParams((0.1, 0.1), (0.0, 0.0)), [1.0])
    with pytest.raises(ConfigError):
        DriftParams.from_dict({**preset["cell"], "drift_nu_sd": 0.01}, 4)
    with pytest.raises(ConfigError):
        DriftParams((0.1,), (0.0,), drift_t0_s=10.0, drift_t_max_s=5.0)
