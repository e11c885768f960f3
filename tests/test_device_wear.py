"""Start-Gap at device size: closed forms, scale invariance, direct replay."""
from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

from memsim.experiment.lifetime import lifetime
from memsim.policy.leveling.device_wear import start_gap_device_lifetime, start_gap_device_wear

GIB = 2**30


def _hot_top(n: int, h: int, f: float) -> np.ndarray:
    """Shares of ``n`` modeled lines: the top ``h`` take ``f`` of the writes, the rest even."""
    r = np.full(n, (1 - f) / (n - h))
    r[n - h:] = f / h
    return r


@pytest.mark.parametrize("lines", [1024, 16384])
@pytest.mark.parametrize("psi", [4, 100])
def test_start_gap_uniform_is_psi_over_psi_plus_one(lines: int, psi: int) -> None:
    # Uniform full-line writes, no endurance variation: every line takes the
    # user writes and one gap move per psi writes, so lifetime is psi/(psi+1)
    # of ideal (Qureshi et al., MICRO 2009), at device size and whatever
    # array.lines is.
    s = lifetime(None, write_rate_gbps=1.0, method="extrapolated", array__lines=lines,
                 array__capacity_gib=1.0, workload__pattern="sequential", workload__read_fraction=0.0,
                 write__scheme="full_line", leveling__scheme="start_gap", leveling__psi=psi,
                 cell__endurance_cov=0.0, lifetime__window_writes=lines * 4).summary
    assert s["lifetime_leveling_scale"] == "device"
    assert s["lifetime_vs_ideal"] == pytest.approx(psi / (psi + 1), rel=1e-6)


def test_contiguous_hot_region_closed_form() -> None:
    # Derived here.  D device lines, gap cycle G = (D + 1) psi device writes;
    # after W writes Start has advanced K = W / G lines.  A contiguous hot
    # region of H device lines taking share f: while K <= H the top hot line
    # hosts only hot lines, wear W f / H; after that its window holds all H
    # hot lines (G f) plus K - H cold ones at c = (1 - f) / (D - H) each.
    # Each full rotation of Start (K past D) adds G (all shares, sum 1).
    # Every line also takes one gap move per cycle, W / G.  (The region sits
    # at the top of the space, where the gap passes last, so the first
    # cycle's phase is ~0.)  Lifetime: wear = E.
    def closed_form(n: int, h: int, f: float, s_copies: int, psi: int, e: float) -> float:
        d = n * s_copies
        big_h = h * s_copies
        g = (d + 1.0) * psi
        c = (1 - f) / (d - big_h)

        def wear(w: float) -> float:
            full, x = divmod(w / g, d)
            part = x * f / big_h if x <= big_h else f + (x - big_h) * c
            return g * (full + part) + w / g

        return brentq(lambda w: wear(w) - e, 1.0, 1e30, xtol=1.0, rtol=1e-12)

    # A 16 GiB device of 64 B lines (65536 modeled x 4096) with a 1 MiB hot
    # region, and a small device where Start rotates several times.
    for n, h, s_copies, psi in ((65536, 4, 4096, 100), (4096, 4, 64, 100), (4096, 8, 16, 4)):
        f, e = 0.5, 1e8
        death = np.full((n, 1), e)
        end, first = start_gap_device_lifetime(_hot_top(n, h, f), death, 1.0, 1, psi, s_copies)
        assert end == pytest.approx(closed_form(n, h, f, s_copies, psi, e), rel=1e-3)
        assert first == end
    # At 16 GiB Start cannot move across the region in the device's life:
    # the hot lines die at ~E H / f writes, far below even wear (E D).
    n, h, s_copies = 65536, 4, 4096
    end = start_gap_device_lifetime(_hot_top(n, h, 0.5), np.full((n, 1), 1e8), 1.0, 1, 100, s_copies)[0]
    assert end == pytest.approx(1e8 * h * s_copies / 0.5, rel=1e-3)
    assert end < 1e-3 * 1e8 * n * s_copies


def test_scale_invariance_of_a_region_fixed_in_device_lines() -> None:
    # The same device (2**20 lines) and the same hot region (4096 adjacent
    # device lines, half the writes), modeled with 1024 or 16384 lines: the
    # device-scale Start-Gap lifetime must not change (no outside source:
    # the invariance DESIGN.md asks for).
    d, big_h, f, psi, e = 1 << 20, 4096, 0.5, 100, 1e8
    ends = []
    for n in (1024, 16384):
        s_copies = d // n
        r = _hot_top(n, big_h // s_copies, f)
        ends.append(start_gap_device_lifetime(r, np.full((n, 1), e), 1.0, 1, psi, s_copies)[0])
    assert ends[1] == pytest.approx(ends[0], rel=0.05)
    # And uniform traffic: identical.
    u = [start_gap_device_lifetime(np.full(n, 1 / n), np.full((n, 1), e), 1.0, 1, psi, d // n)[0]
         for n in (1024, 16384)]
    assert u[1] == pytest.approx(u[0], rel=1e-9)


def test_wear_is_continuous_and_increasing_in_writes() -> None:
    r = _hot_top(512, 3, 0.4)
    w = np.geomspace(1e3, 1e12, 200)
    worn = np.array([start_gap_device_wear(r, x, 50, 8).max() for x in w])
    assert np.all(np.diff(worn) >= 0)


@pytest.mark.parametrize(("pattern", "psi", "extra"), [
    ("uniform", 20, {}),
    ("hotspot", 20, {"workload__hot_fraction": 0.05, "workload__hot_share": 0.5}),
    ("hotspot", 100, {"workload__hot_fraction": 0.05, "workload__hot_share": 0.5}),
    ("zipf", 20, {}),
])
def test_device_scale_agrees_with_direct_replay_on_a_small_device(pattern, psi, extra) -> None:
    # One modeled line per device line and endurance low enough to replay
    # every write to failure with the real leveler (no endurance scaling):
    # the device-scale evaluation must agree (see assert_replay_agrees).
    assert_replay_agrees({**SMALL, "workload__pattern": pattern, "leveling__scheme": "start_gap",
                          "leveling__psi": psi, **extra})


@pytest.mark.parametrize("leveler", ["none", "start_gap"])
@pytest.mark.parametrize("hot", [False, True])
def test_lifetime_does_not_depend_on_modeled_lines(leveler: str, hot: bool) -> None:
    # A 16 GiB device; uniform traffic, or a contiguous hot region of 1/64 of
    # the device taking half the writes (fixed in device terms because its
    # share of the footprint is).  16x more modeled lines: within 5%
    # (DESIGN.md: a result must not change with array.lines).
    extra = ({"workload__pattern": "hotspot", "workload__hot_fraction": 1 / 64, "workload__hot_share": 0.5,
              "workload__hot_layout": "contiguous"} if hot else {"workload__pattern": "uniform"})
    years = [lifetime(None, write_rate_gbps=1.0, method="extrapolated", array__lines=n,
                      workload__read_fraction=0.0, leveling__scheme=leveler,
                      lifetime__window_writes=n * 400, **extra).summary["lifetime_years"]
             for n in (1024, 16384)]
    assert years[1] == pytest.approx(years[0], rel=0.05)


def test_contiguous_layout_puts_the_hot_lines_in_one_run() -> None:
    from memsim.workload.synthetic import AddressPattern

    p = AddressPattern("hotspot", 1000, np.random.default_rng(0), hot_fraction=0.05,
                       hot_layout="contiguous")
    run = np.sort(p.hot_lines[:p.n_hot])
    assert np.all(np.diff(run) == 1) and run.size == 50
    assert np.array_equal(np.sort(p.hot_lines), np.arange(1000))


@pytest.mark.parametrize("kind", ["uniform", "zipf", "hotspot", "strided", "sequential"])
def test_expected_shares_match_drawn_addresses(kind: str) -> None:
    # The shares the device-scale evaluation uses, against the generator's
    # own draws: every line within 5 binomial standard deviations.
    from memsim.workload.synthetic import AddressPattern

    p = AddressPattern(kind, 1000, np.random.default_rng(0), hot_fraction=0.05, stride_lines=8,
                       hot_layout="contiguous")
    s = p.expected_shares()
    n = 1_000_000
    c = np.bincount(p.draw(np.random.default_rng(1), n), minlength=1000) / n
    assert s.sum() == pytest.approx(1.0)
    assert np.all(np.abs(c - s) <= 5 * np.sqrt(s * (1 - s) / n) + 1e-12)


SMALL = {"write_rate_gbps": 1.0, "method": "both", "array__lines": 512, "array__capacity_gib": 512 * 64 / GIB,
         "workload__read_fraction": 0.0, "write__scheme": "full_line",
         "leveling__scheme": "randomized_start_gap", "cell__endurance_cov": 0.1, "cell__endurance_mean": 1e4,
         "lifetime__ecp_entries": 0, "lifetime__capacity_loss": 0.03, "lifetime__endurance_scale": 1.0,
         "lifetime__window_writes": 512 * 2000}
HOT = {"workload__pattern": "hotspot", "workload__hot_fraction": 0.05, "workload__hot_share": 0.5,
       "workload__hot_layout": "contiguous"}


def assert_replay_agrees(kw: dict, seeds: range = range(1, 5), tol: float = 0.03) -> None:
    """The device-scale figure against replaying every write to failure.

    One replay is one draw of a random end of life (its spread between seeds
    is a few percent, about 9% under Zipf), so the mean ratio over seeds is
    compared: within 3%, or within 2.5 standard errors of that mean where
    the replays scatter more (common practice for comparing a sampled mean).
    """
    ratios = []
    for seed in seeds:
        s = lifetime(None, **kw, run__seed=seed).summary
        assert s["lifetime_leveling_scale"] == "device"
        assert s["lifetime_replay_reached_end"]
        ratios.append(s["lifetime_replay_over_extrapolated"])
    r = np.asarray(ratios)
    se = r.std(ddof=1) / np.sqrt(r.size)
    assert abs(r.mean() - 1.0) <= max(tol, 2.5 * se), (r, se)


@pytest.mark.parametrize(("extra", "psi"), [
    ({"workload__pattern": "uniform"}, 20), ({"workload__pattern": "uniform"}, 100), (HOT, 20),
    ({"workload__pattern": "zipf"}, 20)])
def test_randomized_start_gap_approximation_against_direct_replay(extra, psi) -> None:
    # Measured error of the normal approximation against replaying every
    # write to failure with the real leveler (one modeled line per device
    # line, so the replay is the device).
    assert_replay_agrees({**SMALL, "leveling__psi": psi, **extra})


def test_randomized_start_gap_gives_no_estimate_where_the_approximation_fails() -> None:
    # Few hot lines per window (skewed sums): the normal law would overstate
    # lifetime (by ~20% against the replay in the SMALL set-up with psi 100),
    # so the approximation gives none.  On a device of one modeled line per
    # device line the modeled leveler is exact and is used instead.
    from memsim.metrics.death_law import DeathLaw
    from memsim.policy.leveling.device_wear import randomized_start_gap_device_lifetime
    from memsim.tech.endurance import EnduranceModel

    law = DeathLaw(EnduranceModel(1e4, 0.1), 512, 0, 1.0)
    rates = _hot_top(512, 26, 0.5)
    assert np.isnan(randomized_start_gap_device_lifetime(rates, law.cdf, 16, 100, 1.0))
    assert np.isfinite(randomized_start_gap_device_lifetime(rates, law.cdf, 16, 20, 1.0))
    s = lifetime(None, **SMALL, leveling__psi=100, **HOT).summary
    assert s["lifetime_leveling_scale"] == "modeled" and s["lifetime_years"] > 0
    # At 1 TiB with Zipf traffic the approximation does not hold: null, with a note.
    z = lifetime(None, write_rate_gbps=1.0, method="extrapolated", array__capacity_gib=1024.0,
                 workload__pattern="zipf", workload__read_fraction=0.0,
                 leveling__scheme="randomized_start_gap", lifetime__window_writes=100_000).summary
    assert z["lifetime_years"] is None and "no device-scale estimate" in z["lifetime_note"]


def test_randomization_removes_the_contiguous_region_effect() -> None:
    # 16 GiB, a contiguous region of 1/256 of the device taking half the
    # writes: plain Start-Gap cannot move it in the device's life (closed
    # form above: ~E H / f writes); behind the randomizer every window holds
    # thousands of hot lines and wear is nearly even (Qureshi et al., MICRO
    # 2009: randomized Start-Gap within a few percent of ideal).
    hot = {"workload__pattern": "hotspot", "workload__hot_fraction": 1 / 256, "workload__hot_share": 0.5,
           "workload__hot_layout": "contiguous"}
    kw = {"write_rate_gbps": 1.0, "method": "extrapolated", "workload__read_fraction": 0.0,
          "lifetime__window_writes": 200_000}
    plain = lifetime(None, leveling__scheme="start_gap", **kw, **hot).summary
    rnd = lifetime(None, leveling__scheme="randomized_start_gap", **kw, **hot).summary
    assert plain["lifetime_vs_even_wear"] < 0.05
    assert rnd["lifetime_vs_even_wear"] > 0.95


@pytest.mark.parametrize("hot", [False, True])
def test_randomized_lifetime_does_not_depend_on_modeled_lines(hot: bool) -> None:
    extra = ({"workload__pattern": "hotspot", "workload__hot_fraction": 1 / 64, "workload__hot_share": 0.5,
              "workload__hot_layout": "contiguous"} if hot else {"workload__pattern": "uniform"})
    years = [lifetime(None, write_rate_gbps=1.0, method="extrapolated", array__lines=n,
                      workload__read_fraction=0.0, leveling__scheme="randomized_start_gap",
                      lifetime__window_writes=n * 20, **extra).summary["lifetime_years"]
             for n in (1024, 16384)]
    assert years[1] == pytest.approx(years[0], rel=0.05)


@pytest.mark.parametrize(("extra", "interval"), [
    ({"workload__pattern": "uniform"}, 4), ({"workload__pattern": "uniform"}, 20), (HOT, 2), (HOT, 4)])
def test_security_refresh_steady_state_against_direct_replay(extra, interval) -> None:
    # Steady state over many key rounds (Seong et al., ISCA 2010: every
    # line of a region visits every physical line) against replaying every
    # write to failure with the real leveler.
    assert_replay_agrees({**SMALL, "leveling__scheme": "security_refresh", "leveling__interval": interval,
                          **extra})


@pytest.mark.parametrize("pattern", ["uniform", "zipf", "hot"])
def test_security_refresh_lifetime_does_not_depend_on_modeled_lines(pattern: str) -> None:
    extra = ({"workload__pattern": "hotspot", "workload__hot_fraction": 1 / 64, "workload__hot_share": 0.5,
              "workload__hot_layout": "contiguous"} if pattern == "hot" else {"workload__pattern": pattern})
    years = [lifetime(None, write_rate_gbps=1.0, method="extrapolated", array__lines=n,
                      workload__read_fraction=0.0, leveling__scheme="security_refresh",
                      lifetime__window_writes=n * 20, **extra).summary["lifetime_years"]
             for n in (1024, 16384)]
    assert years[1] == pytest.approx(years[0], rel=0.05)


def test_security_refresh_round_load_closed_form() -> None:
    from memsim.policy.leveling.device_wear import security_refresh_device_rates, security_refresh_round_load

    # Two regions of 4 blocks; block 0 takes 0.4, the rest 0.6 evenly.
    r = np.array([0.4, 0.1, 0.1, 0.1, 0.075, 0.075, 0.075, 0.075])
    steady = security_refresh_device_rates(r, 4, 10)
    np.testing.assert_allclose(steady, np.r_[[0.7 / 4] * 4, [0.3 / 4] * 4] * 1.1)
    # Hottest line: r_i * blocks * interval / phi = 0.4 * 4 * 10 / 0.7.
    assert security_refresh_round_load(r, 4, 10) == pytest.approx(0.4 * 4 * 10 / 0.7)


@pytest.mark.parametrize("extra", [{"workload__pattern": "uniform"}, HOT])
def test_region_start_gap_against_direct_replay(extra) -> None:
    # Each region a Start-Gap of its own at device size; first death against
    # a replay of every write with the real leveler (Qureshi et al., MICRO
    # 2009).  A region's line is the gap psi of every (n + 1) psi writes, so
    # it hosts user lines n / (n + 1) of the time (1.5% on 64 lines; once
    # left out, it made the figure conservative).  The first death on a hot
    # region is the weakest of a few dozen lines, drawn apart for the two
    # figures: single places scatter by ~3%, hence eight of them.  Measured
    # mean ratio 1.006 over 12 places (standard error 0.007).
    assert_replay_agrees({**SMALL, "leveling__scheme": "region_start_gap", "leveling__psi": 20,
                          "lifetime__capacity_loss": 0.0, **extra}, seeds=range(1, 9), tol=0.03)


@pytest.mark.parametrize("hot", [False, True])
def test_region_start_gap_lifetime_does_not_depend_on_modeled_lines(hot: bool) -> None:
    extra = ({"workload__pattern": "hotspot", "workload__hot_fraction": 1 / 64, "workload__hot_share": 0.5,
              "workload__hot_layout": "contiguous"} if hot else {"workload__pattern": "uniform"})
    years = [lifetime(None, write_rate_gbps=1.0, method="extrapolated", array__lines=n,
                      workload__read_fraction=0.0, leveling__scheme="region_start_gap",
                      lifetime__window_writes=n * 20, **extra).summary["lifetime_years"]
             for n in (1024, 16384)]
    assert years[1] == pytest.approx(years[0], rel=0.05)


def test_no_replay_of_a_remapping_leveler_on_fewer_lines_than_the_device() -> None:
    s = lifetime(None, write_rate_gbps=1.0, method="both", array__lines=1024, workload__read_fraction=0.0,
                 leveling__scheme="start_gap", lifetime__window_writes=20_000).summary
    assert "lifetime_replay_years" not in s and "no replay" in s["lifetime_replay_note"]
    assert s["lifetime_years"] > 0
    r = lifetime(None, write_rate_gbps=1.0, method="run_to_failure", array__lines=1024,
                 workload__read_fraction=0.0, leveling__scheme="start_gap",
                 lifetime__window_writes=20_000).summary
    assert r["lifetime_years"] is None and "no replay" in r["lifetime_note"]


HCS = {**SMALL, "leveling__scheme": "hot_cold_swap", "leveling__region_lines": 8}


@pytest.mark.parametrize(("pattern", "period"), [("uniform", 100), pytest.param("zipf", 20, marks=pytest.mark.slow)])
def test_hot_cold_swap_approximation_against_direct_replay(pattern: str, period: int) -> None:
    # Mixed steady state (memsim.policy.leveling.hot_cold_device) against
    # replaying every write to failure with the real leveler (Zhou et al.,
    # ISCA 2009 segment swapping), one modeled line per device line.
    # Measured: within 1% on uniform traffic, 2% under Zipf (period 20,
    # where every region of above-mean heat wins epochs often enough).
    assert_replay_agrees({**HCS, "leveling__period": period, "workload__pattern": pattern})


@pytest.mark.parametrize("period", [100, 500])
def test_hot_cold_swap_approximation_against_direct_replay_hot_region(period: int) -> None:
    # A contiguous hot region (5% of the lines, half the writes) at eight
    # places (seeds).  Where the approximation gives a number it must agree
    # with the replay (measured: within 2% each); where a region is neither
    # leveled nor left in place (a region at the hot run's edge that wins
    # the epoch now and then) it gives none -- there the mixed figure would
    # have been up to 36% long (measured, period 500) -- and the modeled
    # leveler, which is the device here, is used.
    given = []
    for seed in range(1, 9):
        s = lifetime(None, **HCS, leveling__period=period, **HOT, run__seed=seed).summary
        assert s["lifetime_replay_reached_end"]
        if s["lifetime_leveling_scale"] == "device":
            given.append(s["lifetime_replay_over_extrapolated"])
    r = np.asarray(given)
    assert r.size >= 3, r
    assert np.all(np.abs(r - 1.0) <= 0.05), r
    assert abs(r.mean() - 1.0) <= 0.03, r


@pytest.mark.parametrize("hot", [False, True])
def test_hot_cold_swap_lifetime_does_not_depend_on_modeled_lines(hot: bool) -> None:
    # 16 GiB, default regions (64 lines) and period (10,000 writes): the
    # device's regions do not change with array.lines, nor does the lifetime.
    extra = ({"workload__pattern": "hotspot", "workload__hot_fraction": 1 / 64, "workload__hot_share": 0.5,
              "workload__hot_layout": "contiguous"} if hot else {"workload__pattern": "uniform"})
    years = [lifetime(None, write_rate_gbps=1.0, method="extrapolated", array__lines=n,
                      workload__read_fraction=0.0, leveling__scheme="hot_cold_swap",
                      lifetime__window_writes=n * 20, **extra).summary["lifetime_years"]
             for n in (1024, 16384)]
    assert years[0] is not None
    assert years[1] == pytest.approx(years[0], rel=0.05)


def test_hot_cold_swap_uniform_overhead_closed_form() -> None:
    # Uniform traffic, no endurance variation: every line takes 1 / D of the
    # user writes and its part of one 2 G-line swap per period, so lifetime
    # is 1 / (1 + 2 G / P) of no leveling (Zhou et al., ISCA 2009: a swap
    # copies both regions; derived here).
    kw = dict(write_rate_gbps=1.0, method="extrapolated", array__lines=1024, array__capacity_gib=1.0,
              workload__pattern="uniform", workload__read_fraction=0.0, write__scheme="full_line",
              cell__endurance_cov=0.0, lifetime__window_writes=10_000)
    none = lifetime(None, leveling__scheme="none", **kw).summary["lifetime_years"]
    hcs = lifetime(None, leveling__scheme="hot_cold_swap", leveling__region_lines=64, leveling__period=10_000,
                   **kw).summary["lifetime_years"]
    assert hcs / none == pytest.approx(1 / (1 + 2 * 64 / 10_000), rel=1e-3)


def test_hot_cold_swap_gives_no_estimate_under_zipf_at_device_size() -> None:
    # Zipf over 16 GiB: the first region wins every epoch, the next ones
    # neither win often enough to be leveled nor never: null with a note.
    s = lifetime(None, write_rate_gbps=1.0, method="extrapolated", workload__pattern="zipf",
                 workload__read_fraction=0.0, leveling__scheme="hot_cold_swap",
                 lifetime__window_writes=20_000).summary
    assert s["lifetime_years"] is None and "no device-scale estimate for hot_cold_swap" in s["lifetime_note"]


def test_security_refresh_regions_against_direct_replay() -> None:
    # Regions of 64 lines (region_lines in device lines), the hot region
    # spanning one or two of them: each region's steady state (Seong et al.,
    # ISCA 2010) against a replay of every write with the real leveler.
    assert_replay_agrees({**SMALL, "leveling__scheme": "security_refresh", "leveling__interval": 4,
                          "leveling__region_lines": 64, **HOT})


@pytest.mark.parametrize("hot", [False, True])
def test_bit_rotation_over_no_remapping_does_not_depend_on_modeled_lines(hot: bool) -> None:
    # Rotating bits within a line moves no line, so the modeled lines'
    # wear holds for the device (each stands for its device lines): 16x more
    # modeled lines, within 5% (DESIGN.md).
    extra = ({"workload__pattern": "hotspot", "workload__hot_fraction": 1 / 64, "workload__hot_share": 0.5,
              "workload__hot_layout": "contiguous"} if hot else {"workload__pattern": "uniform"})
    years = [lifetime(None, write_rate_gbps=1.0, method="extrapolated", array__lines=n,
                      workload__read_fraction=0.0, leveling__scheme="bit_rotation", leveling__inner="none",
                      lifetime__window_writes=n * 100, **extra).summary["lifetime_years"]
             for n in (1024, 16384)]
    assert years[0] is not None
    assert years[1] == pytest.approx(years[0], rel=0.05)
