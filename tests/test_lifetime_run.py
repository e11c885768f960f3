"""Lifetime wired into runs, Python and the CLI.

Checks against hand arithmetic, closed forms, scipy and published figures;
each names its source.  Small line counts keep them fast.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from scipy.special import betaincinv

from memsim.errors import ConfigError
from memsim.experiment.build import build_path
from memsim.experiment.lifetime import lifetime
from memsim.experiment.run import resolve
from memsim.experiment.wear_life import leveling_cycle_writes, lifetime_fields, wear_tables
from memsim.experiment.wear_profile import pooled_profile
from memsim.metrics.death_law import DeathLaw, cell_cdf, device_deaths
from memsim.policy.leveling import make_leveler
from memsim.tech.endurance import EnduranceModel, line_death_wear
from memsim.units import S_PER_YEAR
from memsim.workload.attacks import attack_stream
from memsim.workload.content import DataModel
from memsim.workload.synthetic import AddressPattern

ROOT = Path(__file__).resolve().parents[1]
GIB = 2**30


def small(lines: int = 32, scale: int = 1, **sections: dict) -> dict:
    """A config of ``lines`` modeled lines, each standing for ``scale`` device lines."""
    cfg = {
        "run": {"seed": 3},
        "array": {"lines": lines, "capacity_gib": lines * scale * 64 / GIB},
        "workload": {"read_fraction": 0.0, "requests": 1000},
        "write": {"scheme": "full_line"},
        "cell": {"endurance_cov": 0.0},
    }
    for name, values in sections.items():
        cfg.setdefault(name, {}).update(values)
    return cfg


# ---------------------------------------------------------------- arithmetic


def test_ideal_years_at_2_gbps_hand_computed() -> None:
    # 1 GiB device, endurance 1e8 writes per cell, 2 GB/s of line writes:
    # ideal = 1e8 * 2**30 B / 2e9 B/s = 5.36870912e7 s = 1.70124 years of
    # 365.25 days.  Hand arithmetic (ideal = perfect leveling of full-line
    # writes, Qureshi et al., MICRO 2009).
    cfg = small(lines=256, array={"capacity_gib": 1.0}, cell={"endurance_mean": 1e8},
                lifetime={"window_writes": 20_000})
    r = lifetime(cfg, write_rate_gbps=2.0, method="extrapolated")
    assert r.summary["lifetime_ideal_years"] == pytest.approx(1.70124, abs=1e-5)
    assert r.summary["write_rate_source"] == "argument"
    # The timing-run fields use the same definition.
    c = resolve(cfg)
    path = build_path(c, np.random.default_rng(0))
    path.apply(np.arange(256))
    f = lifetime_fields(c, path, 2e9)
    assert f["lifetime_ideal_years"] == pytest.approx(1.70124, abs=1e-5)


def test_lifetime_fields_hand_case() -> None:
    # No leveling, full-line writes, endurance exactly 1000 writes, each
    # modeled line one device line.  Writes 0,0,0,1 repeated: line 0 takes 3
    # of every 4 user writes, so it dies after 1000 * 4 / 3 user writes;
    # at 64 B per write and 64 B/s that is 1333.3 s.  Hand arithmetic.
    # The stream is deterministic (no counting noise): allow the short run.
    cfg = resolve(small(lines=16, cell={"endurance_mean": 1000.0}, lifetime={"timing_max_noise": 1.0}))
    path = build_path(cfg, np.random.default_rng(0))
    for _ in range(50):
        path.apply(np.array([0, 0, 0, 1]))
    f = lifetime_fields(cfg, path, 64.0)
    assert f["lifetime_years"] * S_PER_YEAR == pytest.approx(1000 * 4 / 3)
    assert f["lifetime_ideal_years"] * S_PER_YEAR == pytest.approx(1000 * 16)
    assert f["wear_max_over_mean"] == pytest.approx(150 / (200 / 16))
    assert f["write_rate_source"] == "run"
    # The config's rate wins over the run's when it is set.
    cfg2 = resolve(small(lines=16, cell={"endurance_mean": 1000.0},
                         lifetime={"write_rate_gbps": 1.0, "timing_max_noise": 1.0}))
    f2 = lifetime_fields(cfg2, path, 64.0)
    assert f2["write_rate_source"] == "config"
    assert f2["lifetime_years"] == pytest.approx(f["lifetime_years"] * 64 / 1e9)


def test_write_rate_scales_years_inversely() -> None:
    # years = writes * bytes / rate: 4x the rate, a quarter of the years
    # (hand arithmetic).
    cfg = small(lines=64, cell={"endurance_cov": 0.2}, lifetime={"window_writes": 200_000})
    a = lifetime(cfg, write_rate_gbps=1.0, method="extrapolated").summary
    b = lifetime(cfg, write_rate_gbps=4.0, method="extrapolated").summary
    for key in ("lifetime_years", "lifetime_first_failure_years", "lifetime_ideal_years"):
        assert a[key] == pytest.approx(4 * b[key], rel=1e-12), key
    assert a["lifetime_vs_ideal"] == pytest.approx(b["lifetime_vs_ideal"], rel=1e-12)


# ---------------------------------------------------------------- published


@pytest.mark.parametrize("pattern", ["uniform", "zipf"])
def test_randomized_start_gap_is_near_ideal(pattern: str) -> None:
    # Qureshi et al., MICRO 2009 report randomized Start-Gap within a few
    # percent of perfect wear leveling (~97%, from memory).  No endurance
    # spread and full-line writes isolate the leveling.  Window: 20 Start-Gap
    # rotations of N (N+1) psi writes, ~64k writes per line (0.4% counting
    # noise).  Upper bound: all writes, moves included, spread over N+1
    # lines, (N+1)/N / (1 + 1/psi).
    n, psi = 32, 100
    cfg = small(lines=n, workload={"pattern": pattern}, leveling={"scheme": "randomized_start_gap", "psi": psi},
                lifetime={"window_writes": 20 * n * (n + 1) * psi})
    s = lifetime(cfg, write_rate_gbps=1.0, method="extrapolated").summary
    assert s["lifetime_window_cycles"] == pytest.approx(20.0)
    assert 0.95 <= s["lifetime_vs_ideal"] <= (n + 1) / n / (1 + 1 / psi) + 1e-9
    assert s["leveling_write_overhead"] == pytest.approx(1 / psi, rel=1e-3)
    if pattern == "zipf":
        # Without leveling the hottest line of Zipf(1) over N lines takes
        # 1 / H_N of the writes, so lifetime / ideal = H_N / N (closed form).
        s0 = lifetime(cfg, write_rate_gbps=1.0, method="extrapolated", leveling__scheme="none").summary
        h_n = (1.0 / np.arange(1, n + 1)).sum()
        assert s0["lifetime_vs_ideal"] == pytest.approx(h_n / n, rel=0.03)


def test_repeated_address_without_leveling_fails_in_seconds() -> None:
    # An unprotected line hammered by one program fails in about a minute or
    # less (Qureshi et al., MICRO 2009; Seong et al., ISCA 2010; from
    # memory).  Closed form: one line takes every write, dies after E
    # full-line writes: E * 64 B / rate = 1e8 * 64 / 1e9 = 6.4 s.  The attack
    # is focused: it is not spread over the device lines a modeled line
    # stands for.
    cfg = small(lines=64, scale=4096, workload={"pattern": "repeated_address", "attack_line": 5},
                cell={"endurance_mean": 1e8}, lifetime={"window_writes": 100_000})
    s = lifetime(cfg, write_rate_gbps=1.0, method="extrapolated").summary
    seconds = s["lifetime_years"] * S_PER_YEAR
    assert s["lifetime_traffic"] == "focused"
    assert seconds == pytest.approx(6.4, rel=1e-9)
    assert seconds < 60
    # Against the ideal of the whole device (64 * 4096 lines): 1 / lines.
    assert s["lifetime_vs_ideal"] == pytest.approx(1 / (64 * 4096), rel=1e-9)
    # Start-Gap moves the hammered line: orders of magnitude longer
    # (Qureshi et al., MICRO 2009).
    # Closed form derived from the algorithm: per rotation of N (N+1) psi
    # writes each line hosts the attacked line for (N+1) psi writes and gets
    # N gap moves, so it dies after E N (N+1) psi / ((N+1) psi + N) writes.
    n, psi = 64, 4
    s2 = lifetime(cfg, write_rate_gbps=1.0, method="extrapolated",
                  leveling__scheme="start_gap", leveling__psi=psi,
                  lifetime__window_writes=4 * n * (n + 1) * psi).summary
    expect = 1e8 * n * (n + 1) * psi / ((n + 1) * psi + n) * 64 / 1e9
    assert s2["lifetime_years"] * S_PER_YEAR == pytest.approx(expect, rel=0.05)
    assert s2["lifetime_years"] > 30 * s["lifetime_years"]


def test_data_comparison_outlives_full_line() -> None:
    # Data-comparison write programs only changed cells: on random data half
    # of them, 2 p (1 - p) = 0.5 (binomial arithmetic; Zhou et al., ISCA
    # 2009 and Yang et al., ISCAS 2007 for the method).  With the same stream
    # and cells, death wear is the cell endurance divided by the program
    # probability, so lifetime scales by 1 / q exactly.
    base = small(lines=64, scale=16, cell={"endurance_cov": 0.2}, lifetime={"window_writes": 300_000})
    full = lifetime(base, write_rate_gbps=1.0, method="extrapolated").summary
    dc = lifetime(base, write_rate_gbps=1.0, method="extrapolated", write__scheme="data_comparison").summary
    q = dc["lifetime_cells_per_write"] / 512
    assert full["lifetime_cells_per_write"] == 512
    assert q == pytest.approx(DataModel("random", 64).expected_changed_fraction(), abs=0.01)
    assert dc["lifetime_years"] > 1.8 * full["lifetime_years"]
    assert dc["lifetime_years"] == pytest.approx(full["lifetime_years"] / q, rel=1e-3)


@pytest.mark.parametrize("case", ["uniform_k0", "zipf_k2_scaled"])
def test_extrapolated_and_replay_agree(case: str) -> None:
    # Same tolerance as tests/test_lifetime.py: 5%.  (a) extrapolates a window
    # as long as the replay; (b) replays with endurance / F, ~1e4 writes per
    # line to death, so counting noise is ~1%.
    if case == "uniform_k0":
        extra = {"workload": {}, "lifetime": {"ecp_entries": 0}}
        scale, e_mean = 1, 1e8
    else:
        extra = {"workload": {"pattern": "zipf", "zipf_exponent": 0.6}, "lifetime": {"ecp_entries": 2}}
        scale, e_mean = 16, 1e8
    n = 128
    # With 16 device lines per modeled line a remapping leveler is not
    # replayed (its modeled cycle would be 16x too short): no leveling there.
    lev = {"scheme": "randomized_start_gap", "psi": 10} if scale == 1 else {"scheme": "none"}
    cfg = small(lines=n, scale=scale, cell={"endurance_cov": 0.2, "endurance_mean": e_mean},
                leveling=lev, **extra)
    cfg["lifetime"].update({"endurance_scale": e_mean / 2e4, "window_writes": 2_000_000})
    s = lifetime(cfg, write_rate_gbps=1.0, method="both").summary
    assert s["lifetime_replay_reached_end"]
    assert s["lifetime_replay_years"] == pytest.approx(s["lifetime_years"], rel=0.05)
    assert s["lifetime_replay_over_extrapolated"] == pytest.approx(1.0, abs=0.05)


# ---------------------------------------------------------------- device scale


def test_death_law_uniform_matches_closed_form() -> None:
    # (k+1)-th smallest of L uniforms ~ Beta(k+1, L-k) (David & Nagaraja,
    # Order Statistics, 2003): death wear = F^-1(B^-1(u)) / q.
    for dist in ("normal", "lognormal"):
        m = EnduranceModel(1e8, 0.2, dist)
        for k in (0, 3):
            u = np.geomspace(1e-12, 0.999, 60)
            exact = m.ppf(betaincinv(k + 1, 512 - k, u)) / 0.5
            np.testing.assert_allclose(DeathLaw(m, 512, k, 0.5).ppf(u), exact, rtol=1e-5)
            # The non-uniform code path (the Poisson-binomial tail on a grid)
            # agrees: 512 cells at 0.5 beside 16 cells never programmed.
            q = np.r_[np.full(512, 0.5), np.zeros(16)]
            np.testing.assert_allclose(DeathLaw(m, 528, k, q).ppf(u), exact, rtol=1e-4)


def test_death_law_profile_against_cell_sampling() -> None:
    # A non-uniform profile (data cells 0.4, flag cells 0.9) against explicit
    # per-cell sampling; two-sample KS test (scipy.stats).
    m = EnduranceModel(1e8, 0.25)
    q = np.full(528, 0.4)
    q[512:] = 0.9
    for k in (0, 2):
        a = line_death_wear(np.random.default_rng(1), m, 8000, 528, k, profile=q, method="cells").ravel()
        b = DeathLaw(m, 528, k, q).ppf(np.random.default_rng(2).random(8000))
        assert stats.ks_2samp(a, b).pvalue > 1e-3


def test_cell_cdf_against_scipy() -> None:
    # Truncated normal and lognormal endurance CDFs: scipy.stats.truncnorm, lognorm.
    y = np.linspace(0.05, 3.0, 40)
    ref = stats.truncnorm(a=-1 / 0.8, b=np.inf, loc=1.0, scale=0.8)
    np.testing.assert_allclose(cell_cdf(EnduranceModel(1.0, 0.8, "normal"), y), ref.cdf(y), rtol=1e-9, atol=1e-15)
    s = np.sqrt(np.log1p(0.25))
    ref = stats.lognorm(s=s, scale=1.0 / np.sqrt(1.25))
    np.testing.assert_allclose(cell_cdf(EnduranceModel(1.0, 0.5, "lognormal"), y), ref.cdf(y), rtol=1e-9)


@pytest.mark.parametrize("dist", ["lognormal", "normal"])
def test_weakest_cell_of_n_against_scipy(dist: str) -> None:
    # The minimum of n i.i.d. cells has CDF 1 - (1 - F(x))^n (David and
    # Nagaraja, Order Statistics, Wiley 2003); F from scipy.stats lognorm and
    # truncnorm.  A line of n cells with ECP-0 dies at its weakest cell, so
    # DeathLaw(k=0) must follow the same law, and so must the sampled minima.
    m = EnduranceModel(1e8, 0.2, dist)
    if dist == "lognormal":
        s = np.sqrt(np.log1p(0.04))
        ref = stats.lognorm(s=s, scale=1e8 / np.sqrt(1.04))
    else:
        ref = stats.truncnorm(a=-5.0, b=np.inf, loc=1e8, scale=2e7)
    n = 512
    x = np.linspace(2e7, 1e8, 50)
    expected = -np.expm1(n * np.log1p(-ref.cdf(x)))       # 1 - (1 - F)^n, stable
    law = DeathLaw(m, n, 0, 1.0)
    np.testing.assert_allclose(law.cdf(x), expected, rtol=1e-6, atol=1e-12)
    # Quantiles of the weakest of a whole device's cells (1.4e11): exact
    # inversion of the same CDF.
    big = 1.4e11
    for u in (0.1, 0.5, 0.9):
        w = float(m.weakest_of(big, u))
        assert -np.expm1(big * np.log1p(-ref.cdf(w))) == pytest.approx(u, rel=1e-6)
    # Sampled minima of n cells against the same law (Kolmogorov-Smirnov).
    mins = m.sample(np.random.default_rng(3), (4000, n)).min(axis=1)
    def cdf_min(v):
        return -np.expm1(n * np.log1p(-ref.cdf(v)))

    assert stats.kstest(mins, cdf_min).pvalue > 1e-3


def test_lognormal_weakest_cell_is_physical() -> None:
    # Mean 1e8, CoV 0.2 over 1.4e11 cells: the truncated normal's weakest
    # cell is worn out by ~100 programs (Phi(-5) * 1.4e11 ~ 39,000 draws
    # fall below zero before truncation), the lognormal's survives ~2.6e7
    # (both from the closed forms via scipy.stats).
    big = 1.4e11
    ln = float(EnduranceModel(1e8, 0.2, "lognormal").weakest_of(big))
    nm = float(EnduranceModel(1e8, 0.2, "normal").weakest_of(big))
    assert stats.norm.cdf(-5.0) * big == pytest.approx(4.0e4, rel=0.05)
    assert 2.0e7 < ln < 3.2e7
    assert nm < 1e4


def test_weakest_copies_match_brute_force() -> None:
    # Smallest death wears of S device lines per modeled line, drawn from
    # Renyi's representation (Renyi, 1953), against sampling all S lines
    # and sorting; KS test per order (scipy.stats).
    m = EnduranceModel(1e4, 0.2)
    law = DeathLaw(m, 128, 1, 1.0)
    brute = line_death_wear(np.random.default_rng(3), m, 3000, 128, 1, copies=8, method="cells")
    dd = device_deaths(law, np.random.default_rng(4), np.ones(3000), 8, 3000 * 8,
                       capacity_loss=2.5 / 24000)
    assert dd.exact and dd.needed == 3 and dd.death.shape == (3000, 3)
    for j in range(3):
        assert stats.ks_2samp(brute[:, j], dd.death[:, j]).pvalue > 1e-3


def test_kept_copies_cover_the_deaths_before_end_of_life() -> None:
    # One hot line takes most deaths: enough of its copies must be kept that
    # none of its unkept (larger) death wears can come before end of life.
    law = DeathLaw(EnduranceModel(1e4, 0.2), 128, 0, 1.0)
    rates = np.ones(50)
    rates[7] = 30.0
    dd = device_deaths(law, np.random.default_rng(0), rates, 1000, 50_000, capacity_loss=60.5 / 50_000)
    assert dd.exact and dd.needed == 61
    t = dd.death / rates[:, None]
    end = np.sort(t.ravel())[dd.needed - 1]
    assert dd.death.shape[1] < 1000 and not np.any(t[:, -1] < end)
    assert np.count_nonzero(t[7] <= end) > 30


def test_strata_fallback_agrees_with_exact(monkeypatch: pytest.MonkeyPatch) -> None:
    # With many deaths needed (1% of the device), representing each line's
    # copies by strata must land near the exact order statistics.  Tolerance
    # 5%: ~80 stratum deaths decide (~11% noise in the quantile), and the
    # line death law is steep.
    import memsim.metrics.death_law as mod

    cfg = small(lines=256, scale=4096, cell={"endurance_cov": 0.2},
                lifetime={"window_writes": 500_000, "capacity_loss": 0.01, "ecp_entries": 1})
    exact = lifetime(cfg, write_rate_gbps=1.0, method="extrapolated").summary
    monkeypatch.setattr(mod, "_DEATH_ENTRIES", 8192)
    strata = lifetime(cfg, write_rate_gbps=1.0, method="extrapolated").summary
    assert (exact["lifetime_death_sampling"], strata["lifetime_death_sampling"]) == ("exact", "strata")
    assert strata["lifetime_years"] == pytest.approx(exact["lifetime_years"], rel=0.05)
    # The weakest copy is drawn exactly either way.
    assert strata["lifetime_first_failure_years"] < strata["lifetime_years"]


def test_pooled_profile_keeps_real_spread() -> None:
    rng = np.random.default_rng(5)
    writes = 20_000
    flat = rng.binomial(writes, 0.5, size=512)
    q = pooled_profile(flat, writes, [slice(0, 512)])
    assert np.ndim(q) == 0 and q == pytest.approx(flat.mean() / writes)
    # Differential writes of zero-heavy data (p = 0.15): successive changes
    # of a cell are correlated, the count's variance is 1 + (1-4s)/(1-2s)
    # = 1.66 times binomial (s = p(1-p); derived in pooled_profile).  Still
    # pooled: simulate the bits.
    bits = rng.random((4000, 512)) < 0.15
    changes = (bits[1:] != bits[:-1]).sum(axis=0)
    assert np.ndim(pooled_profile(changes, 3999, [slice(0, 512)])) == 0
    skew = np.concatenate([rng.binomial(writes, 0.3, 256), rng.binomial(writes, 0.7, 256)])
    q = pooled_profile(skew, writes, [slice(0, 512)])
    assert np.ndim(q) == 1 and q[:256].mean() == pytest.approx(0.3, abs=0.01)


def test_leveling_cycle_writes() -> None:
    # Start-Gap: one full rotation is N (N+1) psi writes (Qureshi et al.,
    # MICRO 2009); no leveler has no cycle.
    assert leveling_cycle_writes(make_leveler("start_gap", 10, None, psi=5)) == 10 * 11 * 5
    assert np.isnan(leveling_cycle_writes(make_leveler("none", 10, None)))


def test_wear_tables() -> None:
    t = wear_tables(np.array([1.0, 1.0, 2.0, 4.0]), bins=3)
    # Bins [1, 2), [2, 3), [3, 4] (the last one closed, as numpy.histogram).
    assert t["wear_histogram"]["count"].tolist() == [2, 1, 1]
    assert t["wear_histogram"]["lo_writes"].iloc[0] == 1.0
    cdf = t["wear_cdf"]
    assert cdf["wear_writes"].iloc[-1] == 4.0 and cdf["wear_over_mean"].iloc[-1] == 2.0


# ---------------------------------------------------------------- streams and inputs


def test_birthday_pattern_matches_attack_stream() -> None:
    # Bursts continue across draws exactly as memsim.workload.attacks does.
    pat = AddressPattern("birthday_attack", 500, np.random.default_rng(0), burst=37)
    rng = np.random.default_rng(9)
    got = np.concatenate([pat.draw(rng, 100) for _ in range(10)])
    want = np.concatenate(list(attack_stream("birthday_attack", np.random.default_rng(9), 1000, 500,
                                             chunk=100, burst=37)))
    np.testing.assert_array_equal(got, want)


def test_bad_input_raises_config_error() -> None:
    with pytest.raises(ConfigError, match="workload.attack_line"):
        lifetime(small(lines=16, workload={"pattern": "repeated_address", "attack_line": 16}),
                 write_rate_gbps=1.0)
    with pytest.raises(ConfigError, match="lifetime.method"):
        lifetime(small(), write_rate_gbps=1.0, method="guess")
    with pytest.raises(ConfigError, match="write rate"):
        lifetime(small(), write_rate_gbps=0.0)
    with pytest.raises(ConfigError, match="read_fraction"):
        lifetime(small(workload={"read_fraction": 1.0}), write_rate_gbps=1.0)


def test_write_rate_from_a_timing_run() -> None:
    from memsim.experiment.run import simulate

    cfg = small(lines=256, workload={"read_fraction": 0.5, "requests": 2000},
                lifetime={"window_writes": 50_000})
    s = lifetime(cfg, method="extrapolated").summary
    t = simulate(cfg).summary
    assert s["write_rate_source"].startswith("timing run")
    assert s["write_rate_gbps"] == pytest.approx(t["writes"] * 64 / t["simulated_ns"])


# ---------------------------------------------------------------- CLI


def memsim(*args: str, cwd: Path = ROOT) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "memsim.cli", *args], check=False, capture_output=True,
                          text=True,
                          cwd=cwd, env={**os.environ, "PYTHONPATH": str(ROOT)})


def test_cli_writes_summary_tables_and_png(tmp_path: Path) -> None:
    cfg = tmp_path / "c.toml"
    cfg.write_text('[run]\nname = "c"\n[array]\nlines = 128\n[workload]\nread_fraction = 0.0\n'
                   '[leveling]\nscheme = "start_gap"\n[lifetime]\nwindow_writes = 100000\n')
    out = tmp_path / "res"
    p = memsim("lifetime", str(cfg), "--write-rate", "2", "--out", str(out))
    assert p.returncode == 0, p.stderr
    assert "lifetime_years" in p.stdout
    doc = json.loads((out / "summary.json").read_text())
    assert doc["summary"]["write_rate_gbps"] == 2.0
    assert (out / "wear_histogram.csv").exists() and (out / "wear_cdf.csv").exists()
    assert (out / "wear.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    p = memsim("lifetime", str(cfg), "--write-rate", "-1")
    assert p.returncode == 2 and p.stderr.count("\n") == 1 and "--write-rate" in p.stderr


def test_even_wear_reads_one_under_perfectly_even_writes() -> None:
    # A sequential sweep of full-line writes wears every line exactly alike,
    # so lifetime against perfectly even wear of the same cells is 1 up to
    # the sampling spread of the weakest device line (median of the order
    # statistic, David and Nagaraja 2003); Zipf traffic without leveling
    # reads far below 1.
    base = {"write_rate_gbps": 1.0, "method": "extrapolated", "workload__read_fraction": 0.0,
                "workload__requests": 4096 * 50, "array__lines": 4096, "write__scheme": "full_line"}
    even = [lifetime(None, workload__pattern="sequential", run__seed=s, **base).summary
            for s in (1, 2)]
    for s in even:
        assert s["wear_max_over_mean"] == pytest.approx(1.0)
        assert s["lifetime_vs_even_wear"] == pytest.approx(1.0, abs=0.05)
    uneven = lifetime(None, workload__pattern="zipf", run__seed=1, **base).summary
    assert uneven["lifetime_vs_even_wear"] < 0.5
