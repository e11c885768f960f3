"""Endurance sampling, ECP line death and lifetime estimates.

Checks against closed forms, scipy.stats and published figures; each check
names its source.  Endurance is scaled down and N kept small for speed.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from memsim.engine.wear import WearResult, run_wear
from memsim.errors import ConfigError
from memsim.metrics.lifetime import (
    ideal_lifetime_writes,
    lifetime_extrapolated,
    lifetime_to_failure,
    writes_to_years,
)
from memsim.policy.leveling import make_leveler
from memsim.tech.endurance import EnduranceModel, dead_lines, failed_cells, failure_times, line_death_wear
from memsim.workload.attacks import attack_stream

# ---------------------------------------------------------------- helpers


def uniform_chunks(seed: int, n: int, total: int, chunk: int = 1 << 16) -> list[np.ndarray]:
    rng = np.random.default_rng(seed)
    return [rng.integers(0, n, min(chunk, total - i)) for i in range(0, total, chunk)]


def zipf_chunks(seed: int, n: int, total: int, alpha: float = 1.0,
                chunk: int = 1 << 16) -> list[np.ndarray]:
    """Zipf(alpha) over n lines by inverse CDF (rank 0 hottest)."""
    rng = np.random.default_rng(seed)
    w = 1.0 / np.arange(1, n + 1) ** alpha
    cdf = np.cumsum(w) / w.sum()
    return [np.minimum(np.searchsorted(cdf, rng.random(min(chunk, total - i))), n - 1)
            for i in range(0, total, chunk)]


def wear_from_counts(counts: list[int], user_writes: int) -> WearResult:
    c = np.asarray(counts, dtype=np.int64)
    return WearResult(c, np.zeros_like(c), user_writes, 0, np.zeros(1))


# ---------------------------------------------------------------- endurance


@pytest.mark.parametrize("dist", ["normal", "lognormal"])
def test_endurance_moments(dist: str) -> None:
    m = EnduranceModel(mean=1e8, cov=0.2, dist=dist)
    x = m.sample(np.random.default_rng(1), 400_000)
    # Sample mean / CoV within 5 standard errors of the model's.
    assert x.mean() == pytest.approx(1e8, rel=5 * 0.2 / np.sqrt(x.size))
    assert x.std() / x.mean() == pytest.approx(0.2, rel=0.01)


def test_truncated_normal_against_scipy() -> None:
    # Large CoV so the truncation at 0 matters; reference: scipy.stats.truncnorm.
    m = EnduranceModel(mean=1.0, cov=0.8, dist="normal")
    ref = stats.truncnorm(a=-1 / 0.8, b=np.inf, loc=1.0, scale=0.8)
    x = m.sample(np.random.default_rng(2), 200_000)
    assert x.min() > 0
    assert stats.kstest(x, ref.cdf).pvalue > 1e-3
    u = np.linspace(0.01, 0.99, 25)
    np.testing.assert_allclose(m.ppf(u), ref.ppf(u), rtol=1e-9)


def test_lognormal_against_scipy() -> None:
    m = EnduranceModel(mean=5.0, cov=0.5, dist="lognormal")
    s = np.sqrt(np.log1p(0.25))
    ref = stats.lognorm(s=s, scale=5.0 / np.sqrt(1.25))   # mean = scale*exp(s^2/2)
    assert ref.mean() == pytest.approx(5.0)
    u = np.linspace(0.01, 0.99, 25)
    np.testing.assert_allclose(m.ppf(u), ref.ppf(u), rtol=1e-9)
    x = m.sample(np.random.default_rng(3), 100_000)
    assert stats.kstest(x, ref.cdf).pvalue > 1e-3


def test_endurance_bad_values() -> None:
    for kw in ({"mean": 0}, {"cov": -0.1}, {"dist": "weibull"}):
        with pytest.raises(ConfigError):
            EnduranceModel(**kw)


def test_failed_cells_and_dead_lines_hand_case() -> None:
    wear = np.array([[5, 5, 5, 5], [1, 9, 9, 0]])
    endu = np.array([[4, 6, 5, 9], [2, 3, 4, 5]])
    np.testing.assert_array_equal(failed_cells(wear, endu), [2, 2])
    np.testing.assert_array_equal(dead_lines(wear, endu, 1), [True, True])
    np.testing.assert_array_equal(dead_lines(wear, endu, 2), [False, False])


def test_failure_times_is_kth_order_statistic() -> None:
    # ECP-k line death = (k+1)-th cell failure (Schechter et al., ISCA 2010).
    endu = np.array([[10.0, 40.0, 20.0, 30.0]])
    rate = np.array([[1.0, 2.0, 4.0, 0.0]])       # times 10, 20, 5, inf
    assert failure_times(endu, rate, 0)[0] == 5
    assert failure_times(endu, rate, 1)[0] == 10
    assert failure_times(endu, rate, 2)[0] == 20
    assert failure_times(endu, rate, 3)[0] == np.inf
    assert failure_times(endu, rate, 9)[0] == np.inf


def test_order_statistic_sampling_matches_cell_sampling() -> None:
    # U_(k+1) of L uniforms ~ Beta(k+1, L-k) (David & Nagaraja, Order
    # Statistics, 2003), so F^-1 of it has the law of the (k+1)-th smallest
    # endurance.  Reference: explicit per-cell sampling; two-sample KS test.
    m = EnduranceModel(mean=1e8, cov=0.25)
    for k in (0, 3):
        a = line_death_wear(np.random.default_rng(4), m, 4000, 256, k, method="cells")
        b = line_death_wear(np.random.default_rng(5), m, 4000, 256, k, method="order_stat")
        assert stats.ks_2samp(a.ravel(), b.ravel()).pvalue > 1e-3


def test_death_wear_profile_and_copies() -> None:
    m = EnduranceModel(mean=100.0, cov=0.0)
    # Half the cells programmed per write: line dies after 200 writes.
    d = line_death_wear(np.random.default_rng(0), m, 3, 64, 0, profile=0.5, copies=2)
    assert d.shape == (3, 2) and np.all(d == 200.0)
    # Per-bit profile: the most-programmed cell (prob 0.8) fails first.
    p = np.full(64, 0.1)
    p[5] = 0.8
    p[6] = 0.4
    d = line_death_wear(np.random.default_rng(0), m, 2, 64, 0, profile=p)
    np.testing.assert_allclose(d, 125.0)
    d = line_death_wear(np.random.default_rng(0), m, 2, 64, 1, profile=p)
    np.testing.assert_allclose(d, 250.0)
    with pytest.raises(ConfigError):
        line_death_wear(np.random.default_rng(0), m, 2, 64, 0, profile=p, method="order_stat")


def test_ecp_delays_first_line_death_same_seed() -> None:
    # ECP-k tolerates k failed cells (Schechter et al., ISCA 2010): with the
    # same cells, each line's death wear under k = 4 is >= under k = 0, and
    # the first line death comes later.
    m = EnduranceModel(mean=1e4, cov=0.2)
    n = 64
    lv0 = make_leveler("start_gap", n, None, psi=10)
    lv4 = make_leveler("start_gap", n, None, psi=10)
    d0 = line_death_wear(np.random.default_rng(8), m, n + 1, 128, 0, method="cells")
    d4 = line_death_wear(np.random.default_rng(8), m, n + 1, 128, 4, method="cells")
    assert np.all(d4 >= d0)

    def stream():
        return uniform_chunks(1, n, 200_000)

    f0 = lifetime_to_failure(stream, lv0, d0).first_failure_writes
    f4 = lifetime_to_failure(stream, lv4, d4).first_failure_writes
    assert f4 > 1.2 * f0


# ---------------------------------------------------------------- arithmetic


def test_ideal_lifetime_hand_computed() -> None:
    # 16 GiB of 64-byte lines (2**28 lines), endurance 1e8, 1e9 bytes/s of
    # writes: 1.5625e7 line writes/s, ideal = 1e8 * 2**28 / 1.5625e7 s
    # = 1.71799e9 s = 54.44 years (365.25-day years).  Hand arithmetic.
    years = writes_to_years(ideal_lifetime_writes(1e8, 2**28), line_bytes=64,
                            write_bytes_per_s=1e9)
    assert years == pytest.approx(54.440, abs=1e-3)
    # The same device modeled with 2**16 lines, each standing for 2**12.
    years_scaled = writes_to_years(ideal_lifetime_writes(1e8, 2**16), line_bytes=64,
                                   write_bytes_per_s=1e9, line_scale=2**12)
    assert years_scaled == pytest.approx(years, rel=1e-12)


def test_extrapolation_hand_case() -> None:
    # 10 user writes put 1, 2, 3, 4 writes on four lines that die at 10:
    # death at 100, 50, 33.3, 25 user writes.
    wear = wear_from_counts([1, 2, 3, 4], 10)
    death = np.full((4, 1), 10.0)
    life = lifetime_extrapolated(wear, death)
    assert life.first_failure_writes == pytest.approx(25.0)
    assert life.end_writes == pytest.approx(25.0)
    # Up to half the capacity may go: ends at the 3rd death (floor(0.5*4)+1).
    life = lifetime_extrapolated(wear, death, capacity_loss=0.5)
    assert life.end_writes == pytest.approx(50.0)
    # Ideal: every cell of every line used up evenly (Qureshi et al., MICRO 2009).
    assert ideal_lifetime_writes(10.0, 4) == 40.0
    assert life.end_writes / ideal_lifetime_writes(10.0, 4) == pytest.approx(50.0 / 40.0)
    assert writes_to_years(life.end_writes, line_bytes=64, write_bytes_per_s=64.0) == pytest.approx(
        50.0 / 3.15576e7)


def test_run_to_failure_hand_case() -> None:
    # Round-robin over 4 lines, no leveling, death at 10, 20, 30, 40 writes:
    # line 0 gets its 10th write at user write 37 (4*9 + 1); line 1 its 20th
    # at 4*19 + 2 = 78.
    lv = make_leveler("none", 4, None)
    death = np.array([[10.0], [20.0], [30.0], [40.0]])

    def stream():
        return [np.array([i]) for i in range(4)]

    life = lifetime_to_failure(stream, lv, death)
    assert life.first_failure_writes == 37 and life.end_writes == 37
    lv = make_leveler("none", 4, None)
    life = lifetime_to_failure(stream, lv, death, capacity_loss=0.25)
    assert life.end_writes == 78
    # Endurance scaled down 10x, times scaled back: the same lifetime.
    lv = make_leveler("none", 4, None)
    life = lifetime_to_failure(stream, lv, death * 10, endurance_scale=10)
    assert life.first_failure_writes == 370
    # A write cap reached first: no end of life reported.
    lv = make_leveler("none", 4, None)
    life = lifetime_to_failure(stream, lv, death, max_user_writes=20)
    assert not life.reached_end and life.end_writes == np.inf


# ---------------------------------------------------------------- published


def test_repeated_address_attack_no_leveling_vs_remapping() -> None:
    # Without leveling one line takes every write and dies after ~its
    # endurance (Qureshi et al., MICRO 2009; Seong et al., ISCA 2010).
    # Remapping spreads the attack: by orders of magnitude.
    E, n = 1e4, 256
    m = EnduranceModel(mean=E, cov=0.0)
    lives = {}
    for name, p in [("none", {}), ("start_gap", {"psi": 4}),
                    ("security_refresh", {"interval": 1})]:
        lv = make_leveler(name, n, np.random.default_rng(3), **p)
        d = line_death_wear(np.random.default_rng(5), m, lv.n_physical, 64, 0)

        def stream():
            return attack_stream("repeated_address", np.random.default_rng(0), 1 << 21, n,
                                 chunk=1 << 14, line=7)

        lives[name] = lifetime_to_failure(stream, lv, d).first_failure_writes
    assert lives["none"] == pytest.approx(E)
    assert lives["start_gap"] > 100 * E
    assert lives["security_refresh"] > 50 * E
    # Start-Gap in closed form (derived from the algorithm of Qureshi et al.):
    # per rotation of N (N+1) psi writes each line hosts the attacked line
    # for (N+1) psi writes and receives N gap moves.
    psi = 4
    per_rotation = (n + 1) * psi + n
    expect = E / per_rotation * n * (n + 1) * psi
    assert lives["start_gap"] == pytest.approx(expect, rel=0.15)


@pytest.mark.parametrize("workload", ["uniform", "zipf"])
def test_randomized_start_gap_near_ideal(workload: str) -> None:
    # Qureshi et al., MICRO 2009 report randomized Start-Gap at ~97% of
    # perfect wear leveling on average (from memory).  Endurance without
    # variation isolates the leveling.  Tolerance [0.95, bound]: psi = 100
    # costs 1% extra writes, and a finite window of 8 Start-Gap rotations
    # (N (N+1) psi writes each) leaves ~1% sampling noise in the max line;
    # the bound is the exact ceiling (N+1)/N / (1 + 1/psi) from spreading
    # all writes, moves included, over N+1 lines.
    n, psi = 128, 100
    total = 8 * n * (n + 1) * psi
    chunks = uniform_chunks(11, n, total) if workload == "uniform" else zipf_chunks(11, n, total)
    lv = make_leveler("randomized_start_gap", n, np.random.default_rng(2), psi=psi)
    wear = run_wear(chunks, lv)
    d = line_death_wear(np.random.default_rng(0), EnduranceModel(1e8, 0.0),
                        lv.n_physical, 512, 0)
    life = lifetime_extrapolated(wear, d)
    ratio = life.end_writes / ideal_lifetime_writes(1e8, n)
    assert 0.95 <= ratio <= (n + 1) / n / (1 + 1 / psi) + 1e-9
    assert wear.leveling_write_overhead == pytest.approx(1 / psi, rel=1e-3)
    # Without leveling the same skewed stream wears its hottest line ~Zipf
    # weight x N times faster than average: far from ideal.
    if workload == "zipf":
        w0 = run_wear(chunks, make_leveler("none", n, None))
        r0 = lifetime_extrapolated(w0, d[:n]).end_writes / ideal_lifetime_writes(1e8, n)
        assert r0 < 0.2


@pytest.mark.parametrize("workload", ["uniform", "zipf"])
@pytest.mark.parametrize("k", [0, 2])
def test_extrapolated_and_run_to_failure_agree(workload: str, k: int) -> None:
    # (a) extrapolates wear measured over a window; (b) replays the same
    # stream with endurance divided by F until the first line death.  They
    # should agree within 5%: both see the same stream, (b) differs only by
    # the nonlinearity of the start-up period and per-line Poisson noise
    # (~1/sqrt(2e4 writes per line) = 0.7% per line).
    n, psi = 128, 10
    model = EnduranceModel(1e8, 0.2)
    d = line_death_wear(np.random.default_rng(5), model, n + 1, 512, k)
    F = 1e8 / 2e4
    total = int(1.5 * d.mean() / F * n)
    make = uniform_chunks if workload == "uniform" else zipf_chunks
    chunks = make(1, n, total)
    lv = make_leveler("randomized_start_gap", n, np.random.default_rng(9), psi=psi)
    a = lifetime_extrapolated(run_wear(chunks, lv), d)
    lv = make_leveler("randomized_start_gap", n, np.random.default_rng(9), psi=psi)
    b = lifetime_to_failure(lambda: chunks, lv, d, endurance_scale=F)
    assert b.reached_end
    assert a.end_writes == pytest.approx(b.end_writes, rel=0.05)
    # Capacity-loss end of life agrees as well, and comes after the first death.
    lv = make_leveler("randomized_start_gap", n, np.random.default_rng(9), psi=psi)
    b2 = lifetime_to_failure(lambda: chunks, lv, d, endurance_scale=F, capacity_loss=0.05)
    lv = make_leveler("randomized_start_gap", n, np.random.default_rng(9), psi=psi)
    a2 = lifetime_extrapolated(run_wear(chunks, lv), d, capacity_loss=0.05)
    assert b2.end_writes > b.end_writes
    assert a2.end_writes == pytest.approx(b2.end_writes, rel=0.05)


def test_line_scale_lowers_first_failure() -> None:
    # More device lines per modeled line = more chances of a weak line:
    # first failure can only come earlier (same wear, min over more lines).
    m = EnduranceModel(1e8, 0.2)
    n = 32
    wear = run_wear(uniform_chunks(3, n, 100_000), make_leveler("start_gap", n, None, psi=10))
    d1 = line_death_wear(np.random.default_rng(1), m, n + 1, 256, 1, copies=1)
    d8 = line_death_wear(np.random.default_rng(1), m, n + 1, 256, 1, copies=8)
    f1 = lifetime_extrapolated(wear, d1).first_failure_writes
    f8 = lifetime_extrapolated(wear, d8).first_failure_writes
    assert f8 < f1
    with pytest.raises(ConfigError):
        lifetime_extrapolated(wear, d1, capacity_loss=1.0)
