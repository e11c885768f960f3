"""MLC programming: Gray code, thresholds, program-and-verify moments."""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from memsim.errors import ConfigError
from memsim.tech.mlc import (
    MlcCell,
    bit_distance_matrix,
    bits_to_level,
    gray_code,
    gray_decode,
    level_to_bits,
)

PRESET = Path(__file__).resolve().parents[1] / "memsim" / "config" / "presets" / "pcm_mlc2.toml"


def make_cell(bits: int = 2, model: str = "geometric", cap: int = 16, **kw) -> MlcCell:
    n = 1 << bits
    args = {
        "bits_per_cell": bits,
        "level_log10_ohm": tuple(np.linspace(3.0, 6.0, n)),
        "program_sigma_decades": 1 / 6,
        "pv_mean_iterations": tuple(np.linspace(1.0, 5.0, n)),
        "pulse_ns": tuple(np.linspace(150.0, 40.0, n)),
        "pulse_pj": tuple(np.linspace(13.5, 19.2, n)),
        "verify_ns": 48.0,
        "verify_pj": 2.47,
        "pv_model": model,
        "pv_max_iterations": cap,
    }
    args.update(kw)
    return MlcCell(**args)


def popcount(v: int) -> int:
    return v.bit_count()


# ------------------------------------------------------------------ Gray code
@pytest.mark.parametrize("bits", [1, 2, 3])
def test_gray_adjacent_levels_differ_in_one_bit(bits: int) -> None:
    # Reflected binary code: consecutive words differ in exactly one bit
    # (F. Gray, "Pulse code communication", US patent 2,632,058, 1953).
    words = level_to_bits(np.arange(1 << bits), bits)
    assert np.all(np.abs(np.diff(words.astype(int), axis=0)).sum(axis=1) == 1)
    assert len({tuple(w) for w in words}) == 1 << bits  # a bijection


@pytest.mark.parametrize("bits", [1, 2, 3])
def test_gray_round_trip_and_distance_matrix(bits: int) -> None:
    lv = np.arange(1 << bits)
    assert np.array_equal(bits_to_level(level_to_bits(lv, bits)), lv)
    assert np.array_equal(gray_decode(gray_code(lv)), lv)
    # Hamming distance of the words, counted independently with Python ints.
    ref = np.array([[popcount((i ^ (i >> 1)) ^ (j ^ (j >> 1))) for j in lv] for i in lv])
    assert np.array_equal(bit_distance_matrix(bits), ref)


def test_gray_code_known_words() -> None:
    # 2-bit reflected Gray sequence 00, 01, 11, 10 (common practice).
    assert level_to_bits(np.arange(4), 2).tolist() == [[0, 0], [0, 1], [1, 1], [1, 0]]


# ------------------------------------------------------------------ geometry
def test_default_thresholds_are_log_midpoints_and_read_level() -> None:
    c = make_cell(2)
    assert np.allclose(c.thresholds, [3.5, 4.5, 5.5])
    assert c.read_level(np.array([2.0, 3.49, 3.51, 4.6, 5.9, 9.0])).tolist() == [0, 0, 1, 2, 3, 3]


@pytest.mark.parametrize(
    "kw, key",
    [
        ({"bits_per_cell": 4}, "cell.bits_per_cell"),
        ({"level_log10_ohm": (3.0, 5.0, 4.0, 6.0)}, "cell.level_log10_ohm"),
        ({"read_thresholds_log10_ohm": (3.5, 5.2, 5.5)}, "cell.read_thresholds_log10_ohm"),
        ({"pv_mean_iterations": 0.5}, "cell.pv_mean_iterations"),
        ({"pv_model": "staircase"}, "cell.pv_model"),
        ({"pv_max_iterations": 0}, "cell.pv_max_iterations"),
        ({"program_sigma_decades": 0.0}, "cell.program_sigma_decades"),
        ({"pulse_ns": (1.0, 2.0)}, "cell.pulse_ns"),
    ],
)
def test_bad_cell_raises_config_error(kw: dict, key: str) -> None:
    with pytest.raises(ConfigError) as err:
        make_cell(**kw)
    assert err.value.where == key


def test_preset_loads_and_missing_key_is_reported() -> None:
    section = tomllib.loads(PRESET.read_text())["cell"]
    c = MlcCell.from_dict(section)
    assert c.n_levels == 4 and c.verify_band_sigma == 2.75
    broken = {k: v for k, v in section.items() if k != "verify_ns"}
    with pytest.raises(ConfigError, match="verify_ns"):
        MlcCell.from_dict(broken)


# ------------------------------------------------------ program-and-verify
@pytest.mark.parametrize("model", ["geometric", "poisson"])
def test_pmf_is_a_distribution(model: str) -> None:
    pmf = make_cell(3, model=model).iteration_pmf()
    assert pmf.shape == (8, 17)
    assert np.all(pmf >= 0) and np.allclose(pmf.sum(axis=1), 1.0)


@pytest.mark.filterwarnings("ignore::RuntimeWarning")  # scipy's geom at p = 1
def test_geometric_mean_matches_truncated_geometric_closed_form() -> None:
    # E[min(G, c)] = (1 - (1-p)^c) / p for G ~ Geometric(p) on {1, 2, ...}
    # (textbook: sum of survival probabilities; common practice).
    c = make_cell(2, cap=6)
    p = 1.0 / np.asarray(c.pv_mean_iterations)
    assert np.allclose(c.mean_iterations(), (1 - (1 - p) ** 6) / p)
    # Probability still unconverged after the cap = P(G > c), from scipy.stats.
    assert np.allclose(c.p_unconverged(), stats.geom.sf(6, p))


@pytest.mark.filterwarnings("ignore::RuntimeWarning")  # scipy's geom at p = 1
def test_uncapped_moments_equal_geometric_and_poisson_formulas() -> None:
    # Large cap: Geometric mean 1/p, variance (1-p)/p^2; 1 + Poisson(lam):
    # mean 1 + lam, variance lam (scipy.stats moments as the reference).
    g = make_cell(2, cap=400)
    p = 1.0 / np.asarray(g.pv_mean_iterations)
    assert np.allclose(g.mean_iterations(), stats.geom.mean(p))
    assert np.allclose(g.var_iterations(), stats.geom.var(p))
    q = make_cell(2, model="poisson", cap=400)
    lam = np.asarray(q.pv_mean_iterations) - 1
    assert np.allclose(q.mean_iterations(), 1 + stats.poisson.mean(lam))
    assert np.allclose(q.var_iterations(), stats.poisson.var(lam))


def test_poisson_capped_mean_matches_survival_sum() -> None:
    # E[min(1+X, c)] = 1 + sum_{k=0}^{c-2} P(X > k), X ~ Poisson (scipy.stats).
    c = make_cell(2, model="poisson", cap=4)
    lam = np.asarray(c.pv_mean_iterations) - 1
    ref = 1 + sum(stats.poisson.sf(k, lam) for k in range(3))
    assert np.allclose(c.mean_iterations(), ref)


@pytest.mark.parametrize("model", ["geometric", "poisson"])
def test_sampled_iterations_match_expected_mean(model: str) -> None:
    c = make_cell(2, model=model, cap=8)
    rng = np.random.default_rng(11)
    n = 40_000
    mean, var = c.mean_iterations(), c.var_iterations()
    for lv in range(4):
        s = c.sample_iterations(np.full(n, lv), rng)
        assert s.min() >= 1 and s.max() <= 8
        se = math.sqrt(var[lv] / n)
        assert abs(s.mean() - mean[lv]) <= 4 * se + 1e-12
        if var[lv] > 0:  # sample variance within 10 % (several SE at n = 40 000)
            assert abs(s.var() - var[lv]) <= 0.1 * var[lv]


def test_uniform_data_latency_energy_wear_match_samples() -> None:
    c = make_cell(2, cap=10)
    rng = np.random.default_rng(5)
    n = 60_000
    lv = rng.integers(0, 4, n)
    it = c.sample_iterations(lv, rng)
    lat = it * c.iteration_ns()[lv]
    en = it * c.iteration_pj()[lv]
    exp = c.expected_cell_write()
    for name, s in (("iterations", it), ("latency_ns", lat), ("energy_pj", en), ("wear_pulses", it)):
        assert abs(s.mean() - exp[name]) <= 4 * s.std(ddof=1) / math.sqrt(n), name
    # Per level: latency = mean iterations x (pulse + verify).
    assert np.allclose(c.expected_latency_ns(), c.mean_iterations() * (np.asarray(c.pulse_ns) + 48.0))


def test_line_iterations_expected_max_matches_samples() -> None:
    c = make_cell(2, cap=12)
    rng = np.random.default_rng(3)
    writes, cells = 4_000, 64
    lv = rng.integers(0, 4, (writes, cells))
    mx = c.sample_iterations(lv, rng).max(axis=1)
    exp = c.expected_line_iterations(cells)
    assert abs(mx.mean() - exp) <= 4 * mx.std(ddof=1) / math.sqrt(writes)
    assert c.expected_line_iterations(1) == pytest.approx(c.expected_cell_write()["iterations"])


def test_programmed_resistance_matches_truncated_normal() -> None:
    c = make_cell(2, verify_band_sigma=2.0)
    rng = np.random.default_rng(2)
    n = 50_000
    r = c.sample_program_log10_r(np.full(n, 1), rng)
    mu, sd = c.level_mu[1], c.level_sigma[1]
    assert np.all(np.abs(r - mu) <= 2.0 * sd)
    m_ref, v_ref = stats.truncnorm.stats(-2.0, 2.0, loc=mu, scale=sd, moments="mv")  # scipy.stats
    assert abs(r.mean() - m_ref) <= 4 * math.sqrt(v_ref / n)


def test_sampling_is_reproducible_and_checks_levels() -> None:
    c = make_cell(2)
    lv = np.arange(4).repeat(10)
    a = c.sample_iterations(lv, np.random.default_rng(9))
    b = c.sample_iterations(lv, np.random.default_rng(9))
    assert np.array_equal(a, b)
    with pytest.raises(ValueError):
        c.sample_iterations([0, 4], np.random.default_rng(0))
