"""Tests of memsim.metrics.stats against scipy.stats and Student-t theory."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from memsim.errors import ConfigError
from memsim.metrics.stats import SUMMARY_COLUMNS, mean_interval, summarize, t_half_width


def _tidy(rng: np.random.Generator) -> pd.DataFrame:
    rows = []
    for scheme, shift in (("flip", 0.0), ("plain", 5.0)):
        for budget in (100, 200):
            for seed in range(7 if scheme == "flip" else 4):
                rows.append({"scheme": scheme, "budget_ua": budget, "seed": seed,
                             "latency_ns": shift + budget / 10 + rng.normal(0, 2),
                             "energy_pj": rng.exponential(3.0)})
    return pd.DataFrame(rows)


def test_interval_equals_scipy_t_interval() -> None:
    # Reference: scipy.stats.t.interval(level, n-1, loc=mean, scale=sem),
    # the Student-t interval (Student, Biometrika 1908).
    df = _tidy(np.random.default_rng(11))
    for level in (0.95, 0.8):
        out = summarize(df, ["scheme", "budget_ua"], level=level)
        assert list(out.columns) == ["scheme", "budget_ua", *SUMMARY_COLUMNS]
        assert len(out) == 4 * 2
        for _, r in out.iterrows():
            x = df[(df.scheme == r.scheme) & (df.budget_ua == r.budget_ua)][r.metric].to_numpy()
            lo, hi = stats.t.interval(level, x.size - 1, loc=x.mean(), scale=stats.sem(x))
            assert r.n == x.size
            assert r["mean"] == pytest.approx(x.mean(), rel=1e-12)
            assert r["std"] == pytest.approx(x.std(ddof=1), rel=1e-12)
            assert r.ci_low == pytest.approx(lo, rel=1e-10)
            assert r.ci_high == pytest.approx(hi, rel=1e-10)
            assert r.ci_half == pytest.approx((hi - lo) / 2, rel=1e-10)


def test_handbook_value() -> None:
    # Data 1..5: mean 3, s = sqrt(2.5); t_{0.975, 4} = 2.776 (table of
    # critical values of Student's t, NIST/SEMATECH e-Handbook of Statistical
    # Methods, section 1.3.6.7.2).  Half-width = 2.776 * 1.5811 / sqrt(5).
    mean, lo, hi = mean_interval([1, 2, 3, 4, 5])
    assert mean == 3.0
    assert (hi - lo) / 2 == pytest.approx(2.776 * np.sqrt(2.5) / np.sqrt(5), abs=1e-3)
    assert float(t_half_width(np.sqrt(2.5), 5)) == pytest.approx(1.963, abs=1e-3)


def test_missing_values_and_single_replication() -> None:
    df = pd.DataFrame({"point": ["a", "a", "a", "b"], "seed": [0, 1, 2, 0],
                       "wear_max": [1.0, np.nan, 3.0, 7.0]})
    out = summarize(df, "point").set_index("point")
    assert out.loc["a", "n"] == 2 and out.loc["a", "mean"] == 2.0
    lo, _ = stats.t.interval(0.95, 1, loc=2.0, scale=stats.sem([1.0, 3.0]))
    assert out.loc["a", "ci_low"] == pytest.approx(lo)
    assert out.loc["b", "n"] == 1 and out.loc["b", "mean"] == 7.0
    assert np.isnan(out.loc["b", "std"]) and np.isnan(out.loc["b", "ci_half"])
    assert list(out.columns) == list(SUMMARY_COLUMNS)   # seed is not a metric


def test_no_groups_and_order_kept() -> None:
    df = pd.DataFrame({"p": ["z", "z", "a", "a"], "y": [1.0, 2, 3, 4], "x": [5.0, 6, 7, 8]})
    out = summarize(df, "p", metrics=["y", "x"])
    assert list(out.p) == ["z", "z", "a", "a"] and list(out.metric) == ["y", "x", "y", "x"]
    whole = summarize(df)
    assert list(whole.metric) == ["y", "x"] and list(whole.n) == [4, 4]


@pytest.mark.parametrize("n", [3, 5, 20])
def test_coverage_near_nominal(n: int) -> None:
    # For normal data the Student-t interval covers the true mean with
    # probability exactly `level` (Student, Biometrika 1908).  With R
    # replicated experiments the observed coverage is Binomial(R, 0.95)/R;
    # we accept +/- 4 binomial standard deviations (false alarm ~6e-5).
    rng = np.random.default_rng(2024 + n)
    reps, mu = 4000, 12.5
    values = rng.normal(mu, 3.0, size=(reps, n))
    df = pd.DataFrame({"experiment": np.repeat(np.arange(reps), n),
                       "seed": np.tile(np.arange(n), reps),
                       "latency_ns": values.ravel()})
    out = summarize(df, "experiment", level=0.95)
    assert len(out) == reps
    covered = ((out.ci_low <= mu) & (mu <= out.ci_high)).mean()
    tol = 4 * np.sqrt(0.95 * 0.05 / reps)
    assert abs(covered - 0.95) < tol


def test_errors_name_the_problem() -> None:
    df = pd.DataFrame({"p": ["a"], "name": ["x"], "y": [1.0]})
    with pytest.raises(ConfigError, match="nope"):
        summarize(df, "p", metrics=["nope"])
    with pytest.raises(ConfigError, match="numeric"):
        summarize(df, "p", metrics=["name"])
    with pytest.raises(ConfigError, match="between 0 and 1"):
        summarize(df, "p", level=1.5)
    with pytest.raises(ConfigError, match="missing"):
        summarize(df, "missing")
