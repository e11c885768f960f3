"""Block erase-ahead state model: mapping invariants and cleaning write amplification."""
from __future__ import annotations

import functools
import math

import numpy as np
import pytest
from scipy.optimize import brentq

from memsim.errors import ConfigError
from memsim.policy.erase import (
    ACTIVE,
    ERASING,
    FREE,
    IN_PLACE,
    OUT_OF_PLACE,
    SEALED,
    WAIT,
    BlockPool,
    analytic_write_amplification,
)


# ---------------------------------------------------------------- helpers
def _measured_wa(pool: BlockPool, writes: np.ndarray, chunk: int = 500) -> tuple[float, float]:
    """Write amplification over ``writes`` and the spare fraction the cleaning
    model sees: 1 - n_logical / (mean lines holding data).  Free, initializing
    and unfilled frontier lines are outside the model's log, so they are taken
    out of its capacity instead of widening the tolerance."""
    u0, m0 = pool.user_writes, pool.move_writes
    in_use = []
    for i in range(0, writes.size, chunk):
        pool.apply_instant(writes[i:i + chunk])
        in_use.append(pool.lines_in_use)
    wa = 1.0 + (pool.move_writes - m0) / (pool.user_writes - u0)
    return wa, 1.0 - pool.n_logical / float(np.mean(in_use))


@functools.cache
def _uniform_run(victim: str, n_blocks: int, B: int, spare: float, seed: int,
                 warm: int = 3, meas: int = 6) -> tuple[float, float]:
    n_logical = int(n_blocks * B * (1.0 - spare))
    pool = BlockPool(n_logical, B, spare, victim=victim)
    rng = np.random.default_rng(seed)
    pool.apply_instant(rng.integers(0, n_logical, warm * n_logical))
    return _measured_wa(pool, rng.integers(0, n_logical, meas * n_logical))


def _hot_cold(rng: np.random.Generator, n_logical: int, n: int,
              hot_frac: float, hot_share: float) -> np.ndarray:
    """``hot_share`` of writes go to a ``hot_frac`` part of the lines (demo data)."""
    n_hot = int(n_logical * hot_frac)
    hot = rng.random(n) < hot_share
    return np.where(hot, rng.integers(0, n_hot, n), rng.integers(n_hot, n_logical, n))


@functools.cache
def _skewed_wa(victim: str, hot_frac: float, hot_share: float, spare: float = 0.2,
               seed: int = 3) -> float:
    n_logical = int(512 * 16 * (1.0 - spare))
    pool = BlockPool(n_logical, 16, spare, victim=victim)
    rng = np.random.default_rng(seed)
    perm = rng.permutation(n_logical)         # scatter hot lines over the blocks
    pool.apply_instant(perm[_hot_cold(rng, n_logical, 4 * n_logical, hot_frac, hot_share)])
    return _measured_wa(pool, perm[_hot_cold(rng, n_logical, 5 * n_logical,
                                             hot_frac, hot_share)])[0]


# ----------------------------------------------------- construction, errors
def test_initial_state() -> None:
    pool = BlockPool(100, 8, spare_fraction=0.4, init_state="set")
    assert pool.init_bit == 1 and BlockPool(100, 8, 0.4).init_bit == 0
    assert pool.n_physical == pool.n_blocks * 8 >= 100 / 0.6
    assert np.array_equal(pool.l2p, np.arange(100))
    data_blocks = math.ceil(100 / 8)
    state = pool.block_state
    assert np.all(state[:data_blocks] == SEALED) and np.all(state[data_blocks:] == FREE)
    assert pool.free_blocks == pool.n_blocks - data_blocks
    assert np.array_equal(pool.live, np.bincount(np.arange(100) // 8, minlength=pool.n_blocks))
    assert pool.lines_in_use == data_blocks * 8
    assert pool.is_initialized(data_blocks * 8) and not pool.is_initialized(99)
    assert math.isnan(pool.write_amplification)
    assert pool.erase_count.sum() == 0


@pytest.mark.parametrize("kwargs", [
    {"victim": "oldest"}, {"fallback": "drop"}, {"init_state": "zero"},
    {"spare_fraction": 0.01}, {"spare_fraction": 1.0}, {"low_watermark": 1},
    {"block_lines": 0},
])
def test_bad_settings_raise_config_error(kwargs: dict) -> None:
    args = {"n_logical": 1000, "block_lines": 8, "spare_fraction": 0.2} | kwargs
    with pytest.raises(ConfigError):
        BlockPool(**args)


def test_fallbacks_when_no_initialized_line() -> None:
    for fallback in ("in_place", "wait"):
        pool = BlockPool(64, 4, spare_fraction=0.3, fallback=fallback)
        rng = np.random.default_rng(1)
        # No cleaning at all: user writes use up all free blocks but the reserve.
        modes = []
        for lg in rng.integers(0, 64, 200).tolist():
            before = pool.lookup(lg)
            phys, mode = pool.place(lg)
            modes.append(mode)
            if mode == IN_PLACE:
                assert phys == before == pool.lookup(lg)
            if mode == WAIT:
                assert phys == -1 and pool.lookup(lg) == before
        assert modes[0] == OUT_OF_PLACE
        assert pool.free_blocks == 1                 # the cleaner's reserve
        other = IN_PLACE if fallback == "in_place" else WAIT
        assert set(modes) == {OUT_OF_PLACE, other}
        n_other = modes.count(other)
        assert (pool.fallbacks_in_place, pool.waits) == (
            (n_other, 0) if fallback == "in_place" else (0, n_other))
        assert pool.user_writes == 200 - pool.waits


def test_mark_initialized_only_after_clean() -> None:
    pool = BlockPool(64, 4, spare_fraction=0.3)
    with pytest.raises(RuntimeError):
        pool.mark_initialized(pool.n_blocks - 1)     # free, not being erased


# ---------------------------------------------------- mapping consistency
class _SlowEraser:
    """A stand-in for the timing engine: bulk inits finish after a random
    number of later user writes, so placements meet both fallbacks."""

    def __init__(self, pool: BlockPool, rng: np.random.Generator) -> None:
        self.pool, self.rng = pool, rng
        self.pending: list[tuple[int, int]] = []   # (ready at step, block)
        B = pool.block_lines
        # Shadow: which logical write each physical line holds, and whether it
        # was written since its block was last initialized.
        self.holds = np.full((pool.n_physical, 2), -1, dtype=np.int64)
        self.holds[:pool.n_logical, 0] = np.arange(pool.n_logical)
        self.dirty = np.zeros(pool.n_physical, dtype=bool)
        self.dirty[: math.ceil(pool.n_logical / B) * B] = True

    def step(self, t: int) -> None:
        pool = self.pool
        for item in [p for p in self.pending if p[0] <= t]:
            self.pending.remove(item)
            blk = item[1]
            pool.mark_initialized(blk)
            B = pool.block_lines
            self.dirty[blk * B:(blk + 1) * B] = False
        while pool.need_erase():
            job = pool.clean()
            assert job is not None
            assert pool.block_state[job.block] == ERASING and pool.live[job.block] == 0
            for s, d in zip(job.src, job.dst):
                assert s // pool.block_lines == job.block and self.holds[s, 0] >= 0
                assert not self.dirty[d], "a move landed on a line that is not initialized"
                self.holds[d] = self.holds[s]
                self.holds[s] = -1
                self.dirty[d] = True
            self.pending.append((t + int(self.rng.integers(0, 40)), job.block))


@pytest.mark.parametrize("victim,fallback", [
    ("greedy", "wait"), ("cost_benefit", "in_place"), ("fifo", "wait"), ("greedy", "in_place"),
])
def test_mapping_consistent_after_long_random_run(victim: str, fallback: str) -> None:
    rng = np.random.default_rng(11)
    n_logical, B = 600, 8
    pool = BlockPool(n_logical, B, 0.15, victim=victim, low_watermark=3, fallback=fallback)
    eng = _SlowEraser(pool, rng)
    latest = np.full(n_logical, -1)             # latest write id per logical line
    writes = rng.integers(0, n_logical, 15_000)
    hot = rng.random(writes.size) < 0.5          # half the writes hit 30 lines
    writes[hot] = writes[hot] % 30
    placed_count = np.zeros(writes.size, dtype=np.int64)
    t = 0
    for wid, lg in enumerate(writes.tolist()):
        while True:
            t += 1
            eng.step(t)
            before = pool.lookup(lg)
            phys, mode = pool.place(lg)
            if mode != WAIT:
                break
            assert eng.pending, "waiting with no initialization under way"
        placed_count[wid] += 1
        if mode == OUT_OF_PLACE:
            assert not eng.dirty[phys], "an out-of-place write hit a line not initialized"
            assert eng.holds[before, 0] == lg
            eng.holds[before] = -1
        else:
            assert phys == before and eng.holds[phys, 0] == lg
        eng.holds[phys] = (lg, wid)
        eng.dirty[phys] = True
        latest[lg] = wid

    # Every user write was placed exactly once.
    assert np.all(placed_count == 1)
    assert pool.user_writes == writes.size
    # lookup() returns where the latest write of each line sits.
    l2p = pool.l2p
    for lg in range(n_logical):
        assert pool.lookup(lg) == l2p[lg]
        if latest[lg] >= 0:
            assert tuple(eng.holds[l2p[lg]]) == (lg, latest[lg])
    # No physical line holds two live logical lines; the maps agree.
    assert np.unique(l2p).size == n_logical
    p2l = pool.p2l
    assert np.array_equal(p2l[l2p], np.arange(n_logical))
    assert np.count_nonzero(p2l >= 0) == n_logical
    assert np.array_equal(np.flatnonzero(eng.holds[:, 0] >= 0), np.sort(l2p))
    # Live counts per block match the map; erasing and free blocks hold nothing.
    assert np.array_equal(pool.live, np.bincount(l2p // B, minlength=pool.n_blocks))
    state = pool.block_state
    assert np.all(pool.live[(state == FREE) | (state == ERASING)] == 0)
    assert np.count_nonzero(state == ACTIVE) <= 2
    # Counters.
    assert pool.write_amplification == pytest.approx(
        (pool.user_writes + pool.move_writes) / pool.user_writes)
    assert pool.erase_count.sum() == pool.cleans - pool.erasing_blocks
    if fallback == "wait":
        assert pool.waits > 0 and pool.fallbacks_in_place == 0
    else:
        assert pool.fallbacks_in_place > 0 and pool.waits == 0


def test_apply_instant_moves_replay_to_the_map() -> None:
    rng = np.random.default_rng(5)
    pool = BlockPool(500, 8, 0.2, victim="greedy")
    writes = rng.integers(0, 500, 8000)
    res = pool.apply_instant(writes)
    assert not res.in_place.any()
    # Replay: user writes and moves in order rebuild the final map.
    where = np.arange(500)
    k = 0
    owner = {p: lg for lg, p in enumerate(where)}
    for i, (lg, p) in enumerate(zip(writes.tolist(), res.phys.tolist())):
        owner.pop(int(where[lg]), None)
        where[lg] = p
        owner[p] = lg
        while k < len(res.moves) and res.moves.after[k] == i:
            s, d = int(res.moves.src[k]), int(res.moves.dst[k])
            lg2 = owner.pop(s)
            where[lg2] = d
            owner[d] = lg2
            k += 1
    assert k == len(res.moves) == pool.move_writes
    assert np.array_equal(where, pool.l2p)
    assert np.array_equal(np.bincount(res.erased, minlength=pool.n_blocks), pool.erase_count)


# -------------------------------------------------------- victim choices
def test_victim_choices_follow_their_rules() -> None:
    rng = np.random.default_rng(2)
    for victim in ("greedy", "cost_benefit", "fifo"):
        pool = BlockPool(800, 8, 0.2, victim=victim)
        pool.apply_instant(rng.integers(0, 800, 3000))
        for lg in rng.integers(0, 800, 300).tolist():     # leave the pool mid-way
            pool.place(lg)
        v = pool.pick_victim()
        state, live = pool.block_state, pool.live.astype(float)
        sealed = state == SEALED
        if victim == "greedy":
            assert live[v] == live[sealed].min()
        elif victim == "cost_benefit":
            # (1 - u) * age / (1 + u): Rosenblum & Ousterhout, SOSP 1991.
            u = live / 8
            age = pool.clock - pool.block_mtime
            score = np.where(sealed & (live < 8), (1 - u) * age / (1 + u), -np.inf)
            assert score[v] == score.max()
        assert sealed[v]
        job = pool.clean()
        assert job.block == v and len(job.src) == live[v]


def test_fifo_cleans_in_seal_order() -> None:
    pool = BlockPool(800, 8, 0.2, victim="fifo")
    order = []
    rng = np.random.default_rng(4)
    for lg in rng.integers(0, 800, 4000).tolist():
        pool.place(lg)
        while pool.need_erase():
            job = pool.clean()
            order.append(job.block)
            pool.mark_initialized(job.block)
    # The first victims are the initial data blocks, oldest first.
    assert order[:100] == list(range(100))


# ------------------------------------------------------- analytic model
def test_analytic_fifo_solves_its_defining_equation() -> None:
    for spare in (0.05, 0.1, 0.2, 0.4):
        alpha = 1 / (1 - spare)
        # Root of u = exp(-alpha (1 - u)) in (0, 1), found without Lambert W.
        u = brentq(lambda x, a=alpha: x - math.exp(-a * (1 - x)), 1e-12, 1 - 1e-9)
        assert analytic_write_amplification(spare, "fifo") == pytest.approx(1 / (1 - u), rel=1e-9)


def test_analytic_greedy_below_fifo_and_tends_to_it() -> None:
    for spare in (0.1, 0.2, 0.3):
        fifo = analytic_write_amplification(spare, "fifo")
        values = [analytic_write_amplification(spare, "greedy", B) for B in (4, 16, 64, 256)]
        assert all(a < b for a, b in zip(values, values[1:]))
        assert values[-1] < fifo
        assert analytic_write_amplification(spare, "greedy", 10**6) == pytest.approx(fifo, rel=2e-3)
    with pytest.raises(ValueError):
        analytic_write_amplification(0.2, "cost_benefit")


# ------------------------------- simulated write amplification vs models
@pytest.mark.parametrize("spare", [0.1, 0.25])
def test_fifo_write_amplification_matches_closed_form(spare: float) -> None:
    # FIFO (LRU) cleaning under uniform random single-line writes, many blocks,
    # steady state: u = exp(-alpha (1 - u)), WA = 1 / (1 - u); Desnoyers,
    # "Analytic modeling of SSD write performance", SYSTOR 2012.  The model is
    # exact as the number of blocks grows; with 1024 blocks and ~6 log passes
    # measured, the error over seeds is within 0.3 %; 1 % leaves room for it.
    wa, spare_seen = _uniform_run("fifo", 1024, 16, spare, seed=7)
    assert wa == pytest.approx(analytic_write_amplification(spare_seen, "fifo"), rel=0.01)


@pytest.mark.parametrize("B", [16, 32])
def test_greedy_write_amplification_matches_mean_field(B: int) -> None:
    # Greedy under uniform traffic, many-blocks (mean-field) limit: threshold
    # cleaning of a pure-death process, alpha = B (H_B - H_j)/(B - j),
    # WA = B/(B - j) (see analytic_write_amplification; Van Houdt,
    # SIGMETRICS 2013, from memory).  Finite block count and the smoothed
    # threshold leave <= 0.5 % over seeds here (up to 5 % at B = 8, hence
    # B >= 16); 1.5 %.
    wa, spare_seen = _uniform_run("greedy", 1024 * 16 // B, B, 0.25, seed=7)
    assert wa == pytest.approx(analytic_write_amplification(spare_seen, "greedy", B), rel=0.015)
    # Greedy does no worse than FIFO: the closed form, and (B = 16) the FIFO
    # run of the test above on the same write stream.
    assert wa < analytic_write_amplification(spare_seen, "fifo")
    if B == 16:
        assert wa < _uniform_run("fifo", 1024, 16, 0.25, seed=7)[0]


# ------------------------------------------------- skewed traffic
def test_cost_benefit_beats_greedy_on_hot_cold_traffic() -> None:
    # Rosenblum & Ousterhout (TOCS 1992) report that under hot-and-cold
    # traffic (90 % of writes to 10 % of the data) cost-benefit cleaning
    # lowers the write cost well below greedy, and that greedy does *worse*
    # with this locality than with uniform traffic.  Both hold here by wide
    # margins over seeds (~35 % and ~15 %), so plain inequalities are robust.
    greedy = _skewed_wa("greedy", 0.1, 0.9)
    cost_benefit = _skewed_wa("cost_benefit", 0.1, 0.9)
    assert cost_benefit < 0.85 * greedy
    assert greedy > _skewed_wa("greedy", 0.5, 0.5)      # same lines, uniform traffic
    # Milder skew (80/20): cost-benefit still no worse than greedy (~10 % better).
    assert _skewed_wa("cost_benefit", 0.2, 0.8) <= _skewed_wa("greedy", 0.2, 0.8)


def test_greedy_beats_cost_benefit_on_uniform_traffic() -> None:
    # Under uniform traffic greedy is optimal among cleaning policies that
    # see only live counts (Yang & Zhu, "On the optimality of greedy garbage
    # collection for SSDs", SIGMETRICS PER 2015 -- from memory); age carries
    # no information here, so cost-benefit can only match or lose (~10 % here).
    greedy = _skewed_wa("greedy", 0.5, 0.5)
    assert greedy <= _skewed_wa("cost_benefit", 0.5, 0.5)
