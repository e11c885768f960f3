"""The wear ledger: every program counted once, by cause, and lifetime read from it."""
from __future__ import annotations

import numpy as np
import pytest

from memsim import simulate
from memsim.engine.wear import PoolLeveler, run_wear
from memsim.experiment.lifetime import lifetime
from memsim.policy.erase import BlockPool
from memsim.policy.ledger import CAUSES, WearLedger

PARTS = [f"wear_cells_{c}" for c in CAUSES]


def _parts_sum(s: dict) -> float:
    return sum(s[k] for k in PARTS)


def test_ledger_add_matches_a_plain_loop() -> None:
    # Both counting paths (scatter for few entries, bincount for many) against
    # a Python loop; repeats of a line must all count.
    rng = np.random.default_rng(0)
    led = WearLedger(50)
    ref = np.zeros((len(CAUSES), 50))
    for size in (3, 400):
        lines = rng.integers(0, 50, size)
        cells = rng.integers(0, 9, size).astype(float)
        led.add("move", lines, cells)
        led.add("user", lines, 2.0)
        for ln, c in zip(lines, cells):
            ref[CAUSES.index("move"), ln] += c
            ref[CAUSES.index("user"), ln] += 2.0
    led.add("refresh", 7, 5)
    ref[CAUSES.index("refresh"), 7] += 5
    led.add("meta", None, 11)
    np.testing.assert_array_equal(led.cells, ref)
    s = led.summary()
    assert s["wear_cells_meta"] == 11
    assert s["wear_cells_total"] == ref.sum() + 11 == led.total() == _parts_sum(s)


def test_timing_run_parts_sum_to_total_and_to_engine_counters() -> None:
    # A run with leveler moves and cancelled writes: the parts sum exactly
    # to the total and to the ledger; user and cancelled cells equal the
    # engine's own counters.
    s = simulate(None, array__lines=1024, workload__requests=20000, workload__interval_ns=25.0,
                 controller__write_cancel=True, controller__cancel_before=1.0, leveling__scheme="start_gap",
                 leveling__psi=10, lifetime__write_rate_gbps=1.0).summary
    assert s["wear_cells_total"] == _parts_sum(s)
    assert s["wear_cells_user"] == pytest.approx(s["cells_programmed_per_write"] * s["writes"], abs=0.5)
    assert s["wear_cells_cancelled"] == s["cancelled_cells"] > 0
    assert s["wear_cells_move"] > 0


def test_refresh_programs_reach_the_ledger() -> None:
    # 2-bit cells with drift refresh (the set-up of test_refresh.py).
    gib = 1e4 * 1024 * 64 / 2**30
    s = simulate(None, overrides={"cell.preset": "pcm_mlc2", "array.lines": 1024, "array.banks": 8,
                                  "array.capacity_gib": gib, "refresh.start": "spread",
                                  "refresh.policy": "drift", "workload.requests": 12000,
                                  "workload.read_fraction": 0.9, "workload.interval_ns": 500.0}).summary
    assert s["refreshes"] > 0 and s["wear_cells_refresh"] > 0
    assert s["wear_cells_total"] == _parts_sum(s)
    assert s["refresh_wear_share"] == pytest.approx(s["wear_cells_refresh"] / s["wear_cells_total"])


def test_hint_preprogramming_shortens_lifetime_in_proportion() -> None:
    # Pre-programming a hinted line to all-SET adds its programs to the same
    # lines the writes wear, so at a fixed write rate lifetime falls by the
    # ratio of total programs (extrapolated wear rates scale together).
    # Same seed, same lines: counting noise cancels in the ratio, so the
    # short runs may give a lifetime (timing_max_noise raised on purpose).
    base = {"array__lines": 1024, "workload__requests": 40000, "workload__read_fraction": 0.5,
                "workload__interval_ns": 40.0, "lifetime__write_rate_gbps": 1.0, "run__seed": 3,
                "lifetime__timing_max_noise": 1.0}
    a = simulate(None, **base).summary
    b = simulate(None, controller__hint_preset=True, workload__hint_lead_ns=3000.0, **base).summary
    assert b["wear_cells_preset"] > 0 and a["wear_cells_preset"] == 0
    assert b["wear_cells_total"] == _parts_sum(b)
    ratio = b["wear_cells_total"] / a["wear_cells_total"]
    assert ratio > 1.5
    assert a["lifetime_years"] / b["lifetime_years"] == pytest.approx(ratio, rel=0.1)


def test_cancelled_programs_shorten_lifetime_at_high_load() -> None:
    base = {"array__lines": 1024, "workload__requests": 40000, "workload__read_fraction": 0.7,
                "workload__interval_ns": 25.0, "lifetime__write_rate_gbps": 1.0, "run__seed": 3,
                "controller__cancel_before": 1.0, "workload__data": "random", "lifetime__timing_max_noise": 1.0}
    on = simulate(None, controller__write_cancel=True, **base).summary
    off = simulate(None, **base).summary
    ratio = on["wear_cells_total"] / off["wear_cells_total"]
    assert on["wear_cells_cancelled"] > 0 and ratio > 1.2
    assert off["lifetime_years"] / on["lifetime_years"] == pytest.approx(ratio, rel=0.15)


def test_wear_engine_counts_block_erase() -> None:
    # Bulk initialization programs every data cell of the block (erase agent
    # convention); cleaner copies program what an out-of-place write does.
    pool = BlockPool(256, 8, 0.25, "set", "greedy", 2, "in_place")
    lv = PoolLeveler(pool, 512)
    rng = np.random.default_rng(1)
    w = run_wear((rng.integers(0, 256, 4096) for _ in range(4)), lv, cells_per_write=200.0,
                 wear_unit=200.0)
    t = w.ledger.cause_totals()
    assert t["user"] == 200.0 * 4 * 4096
    assert t["erase"] == pool.erase_count.sum() * 8 * 512 + 200.0 * pool.move_writes
    assert t["move"] == 0.0
    assert w.line_wear.sum() * 200.0 == pytest.approx(w.ledger.total())


def test_block_erase_and_comparison_write_give_different_lifetimes() -> None:
    # Mostly-zero data: a comparison write programs the few changed bits, an
    # out-of-place write into all-SET lines programs every 0 bit and the
    # pool's bulk initializations add a full line per erased line.  The
    # lifetimes must differ as their programs do.
    kw = {"write_rate_gbps": 1.0, "method": "extrapolated", "array__lines": 2048, "array__banks": 2,
          "workload__read_fraction": 0.0, "workload__data": "zeros", "lifetime__window_writes": 60000}
    dcw = lifetime(None, write__scheme="data_comparison", **kw).summary
    be = lifetime(None, write__scheme="block_erase", **kw).summary
    assert dcw["wear_cells_erase"] == 0 and be["wear_cells_erase"] > 0
    for s in (dcw, be):
        assert s["wear_cells_total"] == pytest.approx(_parts_sum(s), rel=1e-12)
    cells = be["wear_cells_total"] / dcw["wear_cells_total"]
    assert cells > 3
    assert dcw["lifetime_years"] / be["lifetime_years"] > 0.5 * cells


def test_timing_block_erase_counts_bulk_init_and_cleaner() -> None:
    # Every bulk initialization programs all data cells of its block (B x 512
    # per erase); cleaner copies add their out-of-place programs on top.
    s = simulate(None, array__lines=1024, workload__requests=20000, workload__read_fraction=0.3,
                 write__scheme="block_erase", erase__block_lines=8, erase__spare_fraction=0.3,
                 array__banks=2, lifetime__write_rate_gbps=1.0).summary
    assert s["erases"] > 0
    assert s["wear_cells_total"] == _parts_sum(s)
    bulk = s["erases"] * 8 * 512
    assert bulk <= s["wear_cells_erase"] <= bulk + s["cleaner_moves"] * 512
    assert s["wear_cells_user"] == pytest.approx(s["cells_programmed_per_write"] * s["writes"], abs=0.5)


def test_short_timing_run_gives_null_lifetime_with_a_note() -> None:
    # The demo-sized run: under one write per line on average; a lifetime
    # extrapolated from it would be counting noise, so there is none.
    s = simulate(None, array__lines=4096, workload__requests=4000).summary
    assert s["lifetime_years"] is None and s["lifetime_vs_ideal"] is None
    assert s["lifetime_vs_even_wear"] is None
    assert "too short" in s["lifetime_note"]
    # A leveler whose cycle the run does not span: no estimate either.
    g = simulate(None, array__lines=256, workload__requests=60000, workload__read_fraction=0.0,
                 leveling__scheme="start_gap", lifetime__timing_max_noise=1.0).summary
    assert g["lifetime_window_cycles"] < 1 and g["lifetime_years"] is None
    assert "cycle" in g["lifetime_note"]
    # Long enough on few lines: an estimate, and no note.
    ok = simulate(None, array__lines=64, workload__requests=60000, workload__read_fraction=0.0).summary
    assert ok["lifetime_years"] > 0 and ok["lifetime_note"] is None


@pytest.mark.parametrize("size", [5, 300, 700, 5000])
def test_add_rounds_as_add_at_or_bincount(size):
    # Small batches add entry by entry (np.add.at), large ones per-line sums
    # first (row += np.bincount): the ledger must keep exactly that rounding.
    rng = np.random.default_rng(size)
    led = WearLedger(1000)
    start = rng.random(1000) * 1e6
    led.cells[0] = start
    p = rng.integers(0, 1000, size)
    w = rng.random(size) * 1e-3
    led.add(CAUSES[0], p, w)
    expect = start.copy()
    if size * 8 >= 1000:
        expect += np.bincount(p, weights=w, minlength=1000)
    else:
        np.add.at(expect, p, w)
    np.testing.assert_array_equal(led.cells[0], expect)
    with pytest.raises(IndexError):
        led.add(CAUSES[0], np.array([1000]), 1.0)
