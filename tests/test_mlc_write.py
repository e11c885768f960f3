"""Lock-step program-and-verify of multi-level lines, and the cells it leaves unconverged."""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from memsim import simulate
from memsim.config import load_config
from memsim.seeds import keyed_uniforms
from memsim.tech.drift import DriftParams, line_rber, rber_mc, refresh_age
from memsim.tech.mlc import MlcCell, bit_distance_matrix
from memsim.tech.mlc_write import MlcProgrammer, cell_levels


def make_cell(model: str = "geometric", cap: int = 16, band: float | None = 2.75) -> MlcCell:
    return MlcCell(bits_per_cell=2, level_log10_ohm=(3.0, 4.0, 5.0, 6.0), program_sigma_decades=1 / 6,
                   pv_mean_iterations=(1.0, 4.0, 4.0, 1.0), pulse_ns=(150.0, 100.0, 80.0, 40.0),
                   pulse_pj=(13.5, 16.0, 18.0, 19.2), verify_ns=48.0, verify_pj=2.0,
                   verify_band_sigma=band, pv_model=model, pv_max_iterations=cap)


def test_lock_step_latency_matches_iteration_by_iteration_sum() -> None:
    # Lock step: iteration k lasts ceil(active_k / per_round) x (longest active
    # pulse) + one verify; recomputed here cell by cell with plain loops.
    cell = make_cell()
    rng = np.random.default_rng(3)
    old = rng.integers(0, 256, size=(40, 16), dtype=np.uint8)
    new = rng.integers(0, 256, size=(40, 16), dtype=np.uint8)
    prog = MlcProgrammer(cell, budget_ua=3000.0, pulse_ua=300.0, rng=np.random.default_rng(9))
    cost = prog.cost(old, new)
    lv_old, lv_new = cell_levels(old, 2), cell_levels(new, 2)
    ref = np.random.default_rng(9)
    for i in range(40):
        changed = np.flatnonzero(lv_old[i] != lv_new[i])
        iters, _ = cell.sample_attempts(lv_new[i][changed], ref) if changed.size else (np.zeros(0, int), None)
        if changed.size == 0:
            iters = np.zeros(0, int)
        total = 0.0
        for k in range(1, int(iters.max(initial=0)) + 1):
            act = changed[iters >= k]
            longest = max(cell.pulse_ns[lv_new[i][c]] for c in act)
            total += math.ceil(act.size / 10) * longest + 48.0
        assert cost.program_ns[i] == pytest.approx(total, rel=1e-12)
        assert cost.pulses[i] == iters.sum()


def test_lock_step_current_falls_as_cells_converge() -> None:
    cell = make_cell()
    rng = np.random.default_rng(4)
    prog = MlcProgrammer(cell, budget_ua=38400.0, pulse_ua=300.0, rng=rng)
    prog.cost(np.zeros((200, 64), np.uint8), rng.integers(0, 256, (200, 64), dtype=np.uint8))
    s = prog.summary()
    # The first iteration drives every programmed cell; later ones fewer, so the
    # mean current is well below the peak the engine holds.
    assert s["verify_current_mean_ua"] < 0.5 * s["verify_current_peak_ua"]
    assert s["verify_iterations_per_line_mean"] <= cell.pv_max_iterations


def test_unconverged_share_of_a_run_matches_the_cap_formula() -> None:
    # Geometric attempts with mean m leave (1 - 1/m)^cap unconverged; random data
    # programs every level equally often (data-comparison write).
    cfg = load_config({"cell": {"preset": "pcm_mlc2", "pv_model": "geometric"},
                       "workload": {"requests": 4000, "read_fraction": 0.0, "interval_ns": 3000.0}})
    s = simulate(cfg).summary
    u = np.mean((1 - 1 / np.array([1.0, 4.0, 4.0, 1.0])) ** 16)
    n = s["verify_cells_programmed"]
    assert s["verify_unconverged_share"] == pytest.approx(u, abs=4 * math.sqrt(u * (1 - u) / n))


def _rber_t0_closed_form(cell: MlcCell) -> float:
    # Unconverged cells are N(mu, sigma) conditioned on |z| > k; every threshold
    # lies outside the band, so each landing interval's mass is a normal
    # difference divided by q = 2 Phi(-k) (scipy.stats.norm).  Gray-coded bits
    # flipped per misread from the distance matrix.
    k = cell.verify_band_sigma
    q = 2 * stats.norm.sf(k)
    edges = np.concatenate([[-np.inf], cell.thresholds, [np.inf]])
    D = bit_distance_matrix(cell.bits_per_cell)
    u = cell.p_unconverged()
    total = 0.0
    for lv in range(cell.n_levels):
        cdf = stats.norm.cdf(edges, cell.level_mu[lv], cell.level_sigma[lv])
        land = np.diff(cdf) / q
        land[lv] = 0.0  # the interval holding the target keeps only out-of-band mass, which reads right
        total += u[lv] * (land @ D[lv]) / cell.bits_per_cell
    return total / cell.n_levels


def test_error_rate_at_write_time_counts_unconverged_cells() -> None:
    cell = make_cell()
    still = DriftParams((0.0,) * 4, (0.0,) * 4)
    got = float(line_rber(cell, still, [1.0])[0])
    assert got == pytest.approx(_rber_t0_closed_form(cell), rel=1e-6)
    assert got > 1e-4  # ~1% of middle-level cells unconverged: visible
    est, se = rber_mc(cell, still, [1.0], 400_000, np.random.default_rng(11))
    assert abs(est[0] - got) <= 4 * se[0]
    # With a staircase (Poisson) model almost every cell converges.
    assert float(line_rber(make_cell("poisson"), still, [1.0])[0]) < 1e-7


def test_refresh_age_with_unconverged_cells_against_binomial() -> None:
    # The line fails from time 0 when Bin(512, RBER_0) > 8 exceeds the target
    # (scipy.stats.binom): the refresh age is then at the start of the window.
    cell = make_cell()
    still = DriftParams((0.0,) * 4, (0.0,) * 4)
    r0 = _rber_t0_closed_form(cell)
    p0 = stats.binom.sf(8, 512, r0)
    ra = refresh_age(cell, still, 256, 8, 1e-9)
    assert p0 > 1e-9 and ra.status == "at_start"
    assert ra.p_fail == pytest.approx(p0, rel=1e-5)


def test_converged_cells_stay_inside_the_verify_band() -> None:
    cell = make_cell()
    lv = np.repeat(np.arange(4), 50_000)
    r0, out = cell.sample_written_log10_r(lv, np.random.default_rng(2))
    z = (r0 - cell.level_mu[lv]) / cell.level_sigma[lv]
    assert np.all(np.abs(z[~out]) <= 2.75) and np.all(np.abs(z[out]) > 2.75)
    # Converged: the truncated normal (scipy.stats.truncnorm), Kolmogorov-Smirnov.
    assert stats.kstest(z[~out], stats.truncnorm(-2.75, 2.75).cdf).pvalue > 1e-3
    u = cell.p_unconverged()[lv]
    assert out.mean() == pytest.approx(u.mean(), abs=4 * math.sqrt(u.mean() / lv.size))


# ------------------------------------------------------------- tri-level cells
def test_tri_level_pair_code() -> None:
    from memsim.tech.mlc import TRI_PAIR_USED, TRI_PAIR_WORD, TRI_WORD_LEVELS

    # Eight words on eight of the nine level pairs, a bijection onto them.
    assert sorted(TRI_PAIR_WORD[a, b] for a, b in TRI_WORD_LEVELS) == list(range(8))
    assert TRI_PAIR_USED.sum() == 8
    # Neighbouring used pairs (one cell one level apart) differ in exactly one
    # bit, the Gray property for pairs (as in Gray, US patent 2,632,058, 1953).
    for a in range(3):
        for b in range(3):
            for da, db in ((1, 0), (0, 1)):
                a2, b2 = a + da, b + db
                if a2 < 3 and b2 < 3 and TRI_PAIR_USED[a, b] and TRI_PAIR_USED[a2, b2]:
                    assert int(TRI_PAIR_WORD[a, b] ^ TRI_PAIR_WORD[a2, b2]).bit_count() == 1


def test_tri_levels_round_trip_and_occupancy() -> None:
    from memsim.tech.mlc import TRI_PAIR_WORD
    from memsim.tech.mlc_write import tri_levels

    rng = np.random.default_rng(8)
    lines = rng.integers(0, 256, size=(300, 64), dtype=np.uint8)
    lv = tri_levels(lines)
    assert lv.shape == (300, 342)
    words = TRI_PAIR_WORD[lv[:, 0::2], lv[:, 1::2]]
    bits = ((words[..., None] >> np.array([2, 1, 0])) & 1).reshape(300, -1)[:, :512]
    assert np.array_equal(bits, np.unpackbits(lines, axis=1))
    # Random words: levels 0, 1, 2 in 3/8, 2/8, 3/8 of cells (counted over the 8 words).
    cell = MlcCell(bits_per_cell=1, tri_level=True, level_log10_ohm=(3.0, 4.5, 6.0), program_sigma_decades=1 / 6,
                   pv_mean_iterations=1.0, pulse_ns=100.0, pulse_pj=15.0, verify_ns=48.0, verify_pj=2.0)
    freq = np.bincount(lv[:, :340].ravel(), minlength=3) / lv[:, :340].size
    n = lv[:, :340].size
    for f, p in zip(freq, cell.level_probs()):
        assert abs(f - p) <= 5 * math.sqrt(p * (1 - p) / n * 2)  # pairs are correlated: 2x variance margin
    assert cell.cells_per_line(512) == 342 and cell.bits_stored == 1.5


def test_tri_level_rber_matches_monte_carlo_and_beats_two_bit_cells() -> None:
    cfg3 = load_config({"cell": {"preset": "pcm_tri"}})
    from memsim.tech.models import drift_params, mlc_cell

    cell, drift = mlc_cell(cfg3), drift_params(cfg3)
    ages = np.array([1e6, 1e8])
    ref = line_rber(cell, drift, ages)
    est, se = rber_mc(cell, drift, ages, 400_000, np.random.default_rng(21))
    assert np.all(ref > 1e-4)
    assert np.all(np.abs(est - ref) <= 4 * se)
    # Wider margins: the tri-level line needs refresh far later than the 2-bit one.
    cfg2 = load_config({"cell": {"preset": "pcm_mlc2"}})
    a3 = refresh_age(cell, drift, 342, 8, 1e-9).age_s
    a2 = refresh_age(mlc_cell(cfg2), drift_params(cfg2), 256, 8, 1e-9).age_s
    assert a3 > 1000 * a2


def test_tri_level_runs_and_is_rejected_where_slc_is_required() -> None:
    from memsim.errors import ConfigError
    from memsim.experiment.build import check_names

    s = simulate(load_config({"cell": {"preset": "pcm_tri"}, "workload": {"requests": 2000}})).summary
    # Full cells per 64-byte line: 342; data comparison programs only the changed ones.
    assert 0 < s["verify_cells_programmed"] <= 342 * s["writes"]
    with pytest.raises(ConfigError) as err:
        check_names(load_config({"cell": {"preset": "pcm_tri"}, "controller": {"hint_preset": True}}))
    assert err.value.where == "cell.tri_level"


@pytest.mark.parametrize("model", ["geometric", "poisson"])
def test_keyed_attempts_follow_the_attempt_law(model: str) -> None:
    # Attempts drawn by inverting keyed uniforms (memsim.seeds.keyed_uniforms)
    # against the law's pmf (scipy.stats.geom, scipy.stats.poisson shifted by
    # one): chi-square over 64,000 cells of one level.
    cell = make_cell(model, cap=64)
    level = 1
    m = cell.pv_mean_iterations[level]
    u = keyed_uniforms(77, np.arange(4000)[:, None], np.arange(16)[None, :]).ravel()
    att, ok = cell.attempts_from_uniforms(np.full(u.size, level), u)
    law = stats.geom(1.0 / m) if model == "geometric" else stats.poisson(m - 1.0, loc=1)
    k = np.arange(1, 13)
    obs = np.array([(att == j).sum() for j in k] + [(att > 12).sum()])
    exp = np.concatenate([law.pmf(k), [law.sf(12)]]) * att.size
    keep = exp > 5
    chi2 = stats.chisquare(obs[keep], exp[keep] * obs[keep].sum() / exp[keep].sum())
    assert chi2.pvalue > 1e-3
    assert ok.all()
    # Through the programmer: mean attempts per programmed cell against m.
    prog = MlcProgrammer(cell, budget_ua=3000.0, pulse_ua=300.0, rng=np.random.default_rng(5))
    new = np.full((4000, 16), 0b01010101, np.uint8)       # every 2-bit cell at one level
    cost = prog.cost(np.zeros_like(new), new, keys=np.arange(4000))
    lv = int(cell_levels(new[:1], 2)[0, 0])
    assert cost.pulses.sum() / cost.cells.sum() == pytest.approx(cell.pv_mean_iterations[lv], rel=0.03)


def test_keyed_attempts_do_not_depend_on_batching() -> None:
    # The same writes, keyed, cost the same cut into batches in any way.
    cell = make_cell()
    rng = np.random.default_rng(2)
    old = rng.integers(0, 256, size=(300, 16), dtype=np.uint8)
    new = rng.integers(0, 256, size=(300, 16), dtype=np.uint8)
    keys = np.arange(1000, 1300)
    whole = MlcProgrammer(cell, 3000.0, 300.0, np.random.default_rng(9)).cost(old, new, keys=keys)
    cut = MlcProgrammer(cell, 3000.0, 300.0, np.random.default_rng(9))
    parts = [cut.cost(old[a:b], new[a:b], keys=keys[a:b]) for a, b in ((200, 300), (0, 7), (7, 200))]
    order = np.concatenate([np.arange(200, 300), np.arange(0, 7), np.arange(7, 200)])
    got = np.empty(300)
    got[order] = np.concatenate([p.program_ns for p in parts])
    assert np.array_equal(got, whole.program_ns)


def test_refresh_estimate_stays_out_of_the_run_totals() -> None:
    # Every programmed cell takes at least one pulse, so the cells the
    # program-and-verify totals count cannot exceed the pulses in the wear
    # ledger. The pre-run estimate of a refresh's length programs a sample of
    # lines on a copy of the writer; its cells must not reach the run's totals.
    s = simulate(load_config("workloads/mlc_refresh.toml")).summary
    assert s["refreshes"] > 0
    assert 0 < s["verify_cells_programmed"] <= s["wear_cells_total"]
