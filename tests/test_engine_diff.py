"""The fast (compiled) timing engine against the simpy reference, request for request.

The kernel takes the same float operations in the same order as the
reference (same event order, same sums), so every comparison here is exact:
finish time of every request, every counter and sum of the totals, the
wear counters and the whole summary.  (No 1e-9 tolerance is needed anywhere;
if one is ever needed it must be named here with the sum whose order
differs.)
"""
import functools
import math
import os
import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, reject, settings
from hypothesis import strategies as st

from memsim import simulate
from memsim.config import load_config
from memsim.engine.fast import ENGINES, FastEngine, make_engine, unsupported
from memsim.engine.stream import LatencyStream
from memsim.engine.timing import TimingEngine
from memsim.errors import ConfigError
from memsim.experiment.build import build_path, build_source
from memsim.experiment.run import expected_span_ns, refresh_demand, resolve
from memsim.policy.refresh import check_refresh_load, plan_refresh


def _run(cls, ov):
    # resolve: the same checks as a real run, so the generator cannot test a config a user cannot run.
    cfg = resolve(None, {**ov, "run.keep_requests": True})
    rng = np.random.default_rng(cfg.run.seed)
    path = build_path(cfg, rng)
    plan = plan_refresh(cfg)
    eng = cls(cfg, build_source(cfg, rng), path, plan, np.random.default_rng([cfg.run.seed, 1]))
    if plan.active:
        # The run's own refresh-load check: a config it refuses (refresh
        # alone would need more than a bank's time) never ends, so skip it.
        lines_per_bank, service = refresh_demand(eng)
        try:
            check_refresh_load(plan, lines_per_bank, service, expected_span_ns(cfg))
        except ConfigError:
            reject()
    return eng.run(), path


def _same(a, b):
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return True
    return a == b


def assert_engines_agree(ov):
    ref, p_ref = _run(TimingEngine, ov)
    fast, p_fast = _run(FastEngine, ov)
    assert ref.requests == fast.requests
    np.testing.assert_array_equal(fast.arrival_ns, ref.arrival_ns)
    np.testing.assert_array_equal(fast.finish_ns, ref.finish_ns)     # NaN-aware, exact
    np.testing.assert_array_equal(fast.latency_ns, ref.latency_ns)
    np.testing.assert_array_equal(fast.op, ref.op)
    np.testing.assert_array_equal(fast.bank_busy_ns, ref.bank_busy_ns)
    for k, v in vars(ref).items():
        if not isinstance(v, np.ndarray | LatencyStream):
            assert _same(getattr(fast, k), v), k
    for part in ("counts", "fs", "grid", "gstep"):      # streamed in the same completion order
        np.testing.assert_array_equal(getattr(fast.stream, part), getattr(ref.stream, part))
    np.testing.assert_array_equal(p_fast.line_cells, p_ref.line_cells)
    # The wear ledger cause by cause (user, move, refresh, cancelled, preset, erase, meta).
    np.testing.assert_array_equal(p_fast.ledger.cells, p_ref.ledger.cells)
    np.testing.assert_array_equal(p_fast.ledger.unplaced, p_ref.ledger.unplaced)
    np.testing.assert_array_equal(p_fast.line_writes, p_ref.line_writes)
    return ref, fast


configs = st.fixed_dictionaries({
    "run.seed": st.integers(0, 10_000),
    "run.chunk_requests": st.sampled_from([1024, 65536]),
    "workload.requests": st.integers(200, 2500),
    "array.lines": st.sampled_from([256, 4096]),
    "array.channels": st.integers(1, 2),
    "array.banks": st.integers(1, 4),
    "array.row_lines": st.sampled_from([0, 4]),
    "array.mapping": st.sampled_from(["line", "row"]),
    "array.bank_hash": st.booleans(),
    "array.burst_ns": st.sampled_from([0.0, 5.0]),
    "workload.read_fraction": st.sampled_from([0.0, 0.3, 0.7, 1.0]),
    "workload.interval_ns": st.sampled_from([5.0, 20.0, 60.0, 300.0]),
    "workload.arrival": st.sampled_from(["poisson", "fixed", "onoff", "closed"]),
    "workload.outstanding": st.integers(1, 12),
    "workload.size_lines": st.sampled_from([1, 3]),
    "workload.pattern": st.sampled_from(["uniform", "zipf", "hot_set"]),
    "controller.read_queue": st.integers(1, 8),
    "controller.write_queue": st.integers(1, 8),
    "controller.drain_high": st.integers(1, 8),
    "controller.drain_low": st.integers(0, 4),
    "controller.idle_writes": st.booleans(),
    "controller.write_cancel": st.booleans(),
    "controller.cancel_before": st.sampled_from([0.3, 0.75, 1.0]),
    "controller.write_pause": st.booleans(),
    "controller.hint_preset": st.booleans(),
    "workload.hint_lead_ns": st.sampled_from([0.0, 0.0, 300.0, 2000.0]),
    "write.scheme": st.sampled_from(["full_line", "data_comparison", "flip_n_write", "block_erase"]),
    "erase.block_lines": st.sampled_from([2, 4, 8]),
    "erase.init_state": st.sampled_from(["set", "reset"]),
    "erase.victim": st.sampled_from(["greedy", "cost_benefit", "fifo"]),
    "erase.idle_blocks": st.sampled_from([0, 4]),
    "erase.fallback": st.sampled_from(["in_place", "wait"]),
    "controller.scheduler": st.sampled_from(["fcfs", "fr_fcfs"]),
    "controller.row_hit_cap": st.sampled_from([1, 4]),
    "controller.coalesce_writes": st.booleans(),
    "controller.forward_reads": st.booleans(),
    "leveling.scheme": st.sampled_from(["none", "start_gap"]),
    "leveling.psi": st.sampled_from([3, 50]),
    "power.budget_ua": st.sampled_from([0.0, 20000.0, 60000.0, 1e9]),
    "power.scope": st.sampled_from(["device", "channel"]),
    "cell.preset": st.sampled_from(["pcm_slc", "pcm_slc", "pcm_mlc2"]),
    "cache.enabled": st.booleans(),
    "cache.capacity_lines": st.sampled_from([16, 128]),
    "cache.ways": st.sampled_from([1, 4, 16]),
    "cache.replacement": st.sampled_from(["lru", "fifo"]),
    "refresh.policy": st.sampled_from(["none", "none", "periodic", "drift", "scrub"]),
    "refresh.interval_s": st.sampled_from([20.0, 600.0]),
    "refresh.start": st.sampled_from(["spread", "fresh"]),
    "refresh.scrub_errors": st.sampled_from([0, 3]),
})


def _consistent(ov):
    # Drain thresholds inside the write queue (the config's own rule).
    ov["controller.drain_high"] = min(ov["controller.drain_high"], ov["controller.write_queue"])
    ov["controller.drain_low"] = min(ov["controller.drain_low"], ov["controller.drain_high"] - 1)
    if ov["workload.arrival"] == "closed":
        ov["workload.hint_lead_ns"] = 0.0       # closed-loop arrival times are decided while running
    if ov["workload.arrival"] == "closed" or ov["controller.hint_preset"] or ov["workload.hint_lead_ns"] > 0:
        ov["cache.enabled"] = False            # the cache acts on known arrival times, without hints
    if ov["array.row_lines"] == 0:
        ov["array.mapping"] = "line"           # row interleaving needs a row
    if ov["cell.preset"] != "pcm_slc":
        # Pausing stops between SLC programming rounds; program-and-verify writes refuse it,
        # and hint pre-programming models SLC.
        ov["controller.write_pause"] = False
        ov["controller.hint_preset"] = False
        ov["controller.coalesce_writes"] = False   # replaced writes' pulses are not kept for these cells
    if ov["leveling.scheme"] != "none":
        ov["controller.hint_preset"] = False     # leveler moves would undo a pre-programmed line
    if ov["write.scheme"] == "block_erase":
        # The block pool remaps lines itself and models SLC; enough spare blocks
        # for the smallest bank of 256 lines over 8 banks.
        ov.update({"leveling.scheme": "none", "controller.hint_preset": False, "cell.preset": "pcm_slc",
                   "erase.spare_fraction": 0.6})
    if ov["refresh.policy"] != "none":
        # 1e4 device lines per modeled line: refresh ages of a few ms of
        # simulated time (with the default 16 GiB a refresh never comes).
        ov["array.capacity_gib"] = 1e4 * ov["array.lines"] * 64 / 2**30
    return ov


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(configs.map(_consistent))
def test_fast_engine_matches_reference(ov):
    cfg = load_config(None, ov)
    assert not unsupported(cfg, build_path(cfg, np.random.default_rng(0)), plan_refresh(cfg))
    assert_engines_agree(ov)


# 2-bit cells that drift, 1024 modeled lines standing for 1e4 device lines
# each (as in test_refresh.py): refresh ages of a few ms of simulated time.
DRIFTING = {"cell.preset": "pcm_mlc2", "array.lines": 1024, "array.banks": 8,
            "array.capacity_gib": 1e4 * 1024 * 64 / 2**30, "workload.interval_ns": 500.0,
            "workload.requests": 4000}

FEATURES = {
    "plain": {},
    "row buffer": {"array.row_lines": 8},
    "row interleaving": {"array.row_lines": 8, "array.mapping": "row", "array.bank_hash": True},
    "closed loop": {"workload.arrival": "closed", "workload.outstanding": 6},
    "closed, writes held": {"workload.arrival": "closed", "controller.idle_writes": False},
    "back-pressure": {"controller.read_queue": 2, "controller.write_queue": 2, "controller.drain_high": 2,
                      "controller.drain_low": 0, "workload.interval_ns": 8.0},
    "cancellation": {"controller.write_cancel": True, "workload.interval_ns": 40.0},
    "pausing": {"controller.write_pause": True, "workload.interval_ns": 40.0},
    "power budget": {"power.budget_ua": 40000.0, "array.channels": 2},
    "power per channel": {"power.budget_ua": 40000.0, "power.scope": "channel", "array.channels": 2},
    "multi-level cells": {"cell.preset": "pcm_mlc2"},
    "leveler moves": {"leveling.scheme": "start_gap", "leveling.psi": 5},
    "hint mode, no hints": {"controller.hint_preset": True},
    "dram cache": {"cache.enabled": True, "cache.capacity_lines": 512, "cache.ways": 4,
                   "workload.pattern": "zipf"},
    "dram cache, fifo, row order": {"cache.enabled": True, "cache.capacity_lines": 256,
                                    "cache.replacement": "fifo", "array.row_lines": 8,
                                    "array.mapping": "row", "controller.write_cancel": True},
    "drift refresh, multi-level cells": {**DRIFTING, "refresh.policy": "drift"},
    "periodic refresh": {**DRIFTING, "refresh.policy": "periodic", "refresh.interval_s": 20.0,
                         "cell.preset": "pcm_slc"},
    "scrub on read": {**DRIFTING, "refresh.policy": "scrub", "refresh.scrub_errors": 0},
    "refresh, closed loop, power budget": {**DRIFTING, "refresh.policy": "drift", "workload.arrival": "closed",
                                           "power.budget_ua": 100000.0, "controller.write_cancel": True},
    "block erase": {"write.scheme": "block_erase"},
    "block erase, waits, reads": {"write.scheme": "block_erase", "erase.fallback": "wait", "erase.spare_fraction": 0.3,
                                  "workload.read_fraction": 0.2, "workload.interval_ns": 30.0},
    "block erase, power per channel": {"write.scheme": "block_erase", "power.budget_ua": 40000.0,
                                       "power.scope": "channel", "array.channels": 2, "erase.spare_fraction": 0.3},
    "block erase, closed loop, cancellation": {"write.scheme": "block_erase", "workload.arrival": "closed",
                                               "controller.write_cancel": True, "erase.victim": "cost_benefit"},
    "block erase, periodic refresh": {**DRIFTING, "cell.preset": "pcm_slc", "write.scheme": "block_erase",
                                      "refresh.policy": "periodic", "refresh.interval_s": 20.0,
                                      "erase.block_lines": 4},
    "hints in the stream": {"controller.hint_preset": True, "workload.hint_lead_ns": 500.0},
    "hints, reads, writes held": {"controller.hint_preset": True, "workload.hint_lead_ns": 2000.0,
                                  "workload.read_fraction": 0.3, "workload.arrival": "onoff",
                                  "controller.idle_writes": False},
    "hints, power budget": {"controller.hint_preset": True, "workload.hint_lead_ns": 300.0,
                            "power.budget_ua": 40000.0, "array.channels": 2},
    "everything": {"controller.write_cancel": True, "controller.write_pause": True,
                   "power.budget_ua": 30000.0, "array.row_lines": 8, "leveling.scheme": "start_gap",
                   "workload.arrival": "closed", "array.channels": 2},
    # Queue policies on a small hot footprint, so rows repeat, writes meet queued
    # writes to their line and reads find them.
    "fr_fcfs": {"controller.scheduler": "fr_fcfs", "array.row_lines": 8, "workload.footprint_lines": 256},
    "fr_fcfs, cap 1, drains": {"controller.scheduler": "fr_fcfs", "controller.row_hit_cap": 1,
                               "array.row_lines": 4, "array.mapping": "row", "workload.footprint_lines": 128,
                               "workload.interval_ns": 15.0, "workload.read_fraction": 0.5},
    "coalescing": {"controller.coalesce_writes": True, "workload.footprint_lines": 64,
                   "workload.interval_ns": 20.0},
    "forwarding": {"controller.forward_reads": True, "workload.footprint_lines": 64, "workload.interval_ns": 20.0},
    "queue policies, cancellation, closed": {
        "controller.scheduler": "fr_fcfs", "controller.coalesce_writes": True, "controller.forward_reads": True,
        "controller.write_cancel": True, "array.row_lines": 8, "workload.footprint_lines": 64,
        "workload.arrival": "closed", "workload.outstanding": 12},
    "queue policies, power, pausing": {
        "controller.scheduler": "fr_fcfs", "controller.coalesce_writes": True, "controller.forward_reads": True,
        "controller.write_pause": True, "power.budget_ua": 30000.0, "array.row_lines": 8,
        "workload.footprint_lines": 64, "workload.interval_ns": 30.0},
}


@pytest.mark.parametrize("extra", FEATURES.values(), ids=FEATURES.keys())
def test_each_feature_matches_reference(extra):
    ref, _ = assert_engines_agree({"workload.requests": 6000, "array.lines": 4096, **extra})
    # The feature did something (so the comparison is not vacuous).
    if "controller.write_cancel" in extra and len(extra) == 2:
        assert ref.cancellations > 0
    if "controller.write_pause" in extra and len(extra) == 2:
        assert ref.pauses > 0
    if "power.budget_ua" in extra and len(extra) <= 3:
        assert ref.power_wait_ns > 0
    if extra.get("refresh.policy", "none") != "none":
        assert ref.refresh_busy_ns > 0
    if extra.get("write.scheme") == "block_erase":
        assert ref.erase_pj > 0
    if extra.get("workload.hint_lead_ns", 0) > 0:
        assert ref.presets > 0 and ref.hint_hits > 0
    if extra.get("controller.scheduler") == "fr_fcfs" and not extra.get("controller.coalesce_writes"):
        assert ref.requests_passed > 0 and ref.write_row_hits > 0
    if extra.get("controller.coalesce_writes"):
        assert ref.writes_coalesced > 0
    if extra.get("controller.forward_reads"):
        assert ref.reads_forwarded > 0


refresh_configs = st.fixed_dictionaries({
    "run.seed": st.integers(0, 1000),
    "refresh.policy": st.sampled_from(["periodic", "drift", "scrub"]),
    "refresh.interval_s": st.sampled_from([20.0, 60.0]),
    "refresh.start": st.sampled_from(["spread", "fresh"]),
    "workload.read_fraction": st.sampled_from([0.5, 0.9, 1.0]),
    "workload.arrival": st.sampled_from(["poisson", "closed"]),
    "controller.write_cancel": st.booleans(),
    # (Budgets or refresh intervals much tighter than these overload the
    # banks: the refresh backlog then grows for as long as the run lasts.)
    "power.budget_ua": st.sampled_from([0.0, 100000.0]),
})


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(refresh_configs)
def test_fast_engine_matches_reference_with_refresh(ov):
    ov = {**DRIFTING, **ov}
    ref, _ = assert_engines_agree(ov)
    assert_summaries_agree(ov)


def assert_summaries_agree(ov):
    fast = simulate(None, overrides={**ov, "run.engine": "fast"}).summary
    ref = simulate(None, overrides={**ov, "run.engine": "reference"}).summary
    assert fast.pop("engine") == "fast" and ref.pop("engine") == "reference"
    assert fast.keys() == ref.keys()
    for k in ref:
        assert _same(fast[k], ref[k]), k
    return ref


@pytest.mark.parametrize("extra", [
    {"refresh.policy": "drift", "workload.read_fraction": 0.9, "refresh.start": "spread"},
    {"refresh.policy": "periodic", "refresh.interval_s": 20.0, "refresh.start": "spread",
     "workload.read_fraction": 1.0},
    {"refresh.policy": "drift", "workload.arrival": "closed", "refresh.start": "spread"},
    {"refresh.policy": "scrub", "refresh.scrub_errors": 0, "workload.read_fraction": 0.9},
], ids=["drift", "periodic", "drift closed loop", "scrub"])
def test_refresh_matches_reference(extra):
    s = assert_summaries_agree({**DRIFTING, **extra})
    assert s["refreshes"] > 0


def test_summary_identical_and_names_engine():
    assert_summaries_agree({"workload.requests": 5000, "controller.write_cancel": True,
                            "power.budget_ua": 40000.0})


def test_trace_hints_match_reference(tmp_path):
    # Hints from a trace: own times (some for lines never written, some late),
    # with reads and writes around them and a chunk size that splits them.
    from memsim.workload.chunk import HINT, READ, WRITE, Chunk
    from memsim.workload.trace import write_trace
    rng = np.random.default_rng(5)
    n = 3000
    t = np.cumsum(rng.choice([0.0, 20.0, 90.0, 400.0], n))
    op = rng.choice(np.array([HINT, READ, WRITE], np.int8), n, p=[0.3, 0.4, 0.3])
    line = rng.integers(0, 256, n)
    path = tmp_path / "hinted.csv"
    write_trace(path, [Chunk(t, op, line)])
    ov = {"workload.pattern": "trace", "workload.trace": str(path), "array.lines": 1024, "array.banks": 2,
          "controller.hint_preset": True, "run.chunk_requests": 1024, "power.budget_ua": 40000.0}
    ref, _ = assert_engines_agree(ov)
    assert ref.presets > 0 and ref.hint_hits > 0
    assert_summaries_agree(ov)


def test_summary_identical_with_queue_policies():
    s = assert_summaries_agree({
        "workload.requests": 6000, "array.row_lines": 8, "workload.footprint_lines": 128,
        "workload.interval_ns": 25.0, "controller.scheduler": "fr_fcfs", "controller.coalesce_writes": True,
        "controller.forward_reads": True, "energy.peripheral_pj_per_access": 100.0, "energy.io_pj_per_bit": 1.0})
    assert s["writes_coalesced"] > 0 and s["reads_forwarded"] > 0 and s["write_row_hits"] > 0


@pytest.mark.parametrize("extra", [
    {"write.scheme": "block_erase"},
    {"controller.hint_preset": True, "workload.hint_lead_ns": 500.0},
    {"refresh.policy": "scrub"},
    {"refresh.policy": "periodic"},
], ids=["block erase", "hints", "scrub", "periodic refresh"])
def test_former_gaps_run_on_the_fast_engine(extra):
    # Nothing falls back to the reference any more; run.engine still chooses.
    cfg = load_config(None, {"workload.requests": 2000, **extra})
    rng = np.random.default_rng(cfg.run.seed)
    path = build_path(cfg, rng)
    assert unsupported(cfg, path, plan_refresh(cfg)) == []
    assert make_engine(cfg, build_source(cfg, rng), path, plan_refresh(cfg)).name == "fast"
    for engine in ENGINES:
        s = simulate(None, overrides={"workload.requests": 2000, "run.engine": engine, **extra}).summary
        assert s["engine"] == engine


INACTIVE = {
    # A shared budget far above what all banks can draw at once never binds.
    "power budget that never binds": {"power.budget_ua": 1e9},
    "hint_preset without hints": {"controller.hint_preset": True},
    # Without reads nothing can cancel or pause a write.
    "cancellation without reads": {"controller.write_cancel": True, "controller.cancel_before": 1.0,
                                   "workload.read_fraction": 0.0},
    "pausing without reads": {"controller.write_pause": True, "workload.read_fraction": 0.0},
    # Every line written once (sequential over more lines than requests): no
    # write meets a queued write to its line, no read finds one.
    "coalescing and forwarding, no repeated line": {
        "controller.coalesce_writes": True, "controller.forward_reads": True, "workload.pattern": "sequential"},
    # Without a row buffer there is no row hit to prefer: fr_fcfs is fcfs.
    "fr_fcfs without a row buffer": {"controller.scheduler": "fr_fcfs", "array.row_lines": 0},
}


@pytest.mark.parametrize("engine", ["fast", "reference"])
@pytest.mark.parametrize("extra", INACTIVE.values(), ids=INACTIVE.keys())
def test_inactive_feature_changes_nothing(extra, engine):
    base = {"workload.requests": 20000, "write.scheme": "full_line", "workload.interval_ns": 120.0,
            "run.engine": engine, **{k: v for k, v in extra.items() if k.startswith("workload.")}}
    off = simulate(None, overrides=base).summary
    on = simulate(None, overrides={**base, **extra}).summary
    assert on.keys() == off.keys()
    for k in off:
        assert _same(on[k], off[k]), k


@pytest.mark.parametrize("cls", [FastEngine, TimingEngine])
def test_refresh_policy_none_changes_nothing(cls):
    ov = {"workload.requests": 20000, "refresh.policy": "none"}
    cfg = load_config(None, ov)
    runs = []
    for plan in (None, plan_refresh(cfg)):
        rng = np.random.default_rng(cfg.run.seed)
        path = build_path(cfg, rng)
        tot = cls(cfg, build_source(cfg, rng), path, plan, np.random.default_rng(1)).run()
        runs.append((tot, path))
    (a, pa), (b, pb) = runs
    np.testing.assert_array_equal(a.stream.counts, b.stream.counts)
    np.testing.assert_array_equal(pa.line_cells, pb.line_cells)
    for k, v in vars(a).items():
        if not isinstance(v, np.ndarray | LatencyStream):
            assert _same(getattr(b, k), v), k


def test_front_end_and_energy_terms_match_reference():
    # The cache, the row order and every energy term act before or after the
    # engines; the whole summary agrees key for key.
    s = assert_summaries_agree({
        "workload.requests": 4000, "array.lines": 4096, "array.row_lines": 8, "array.mapping": "row",
        "workload.pattern": "zipf", "cache.enabled": True, "cache.capacity_lines": 256, "cache.ways": 4,
        "energy.background_mw_per_bank": 10.0, "energy.peripheral_pj_per_access": 100.0,
        "energy.io_pj_per_bit": 1.0, "energy.row_hit_pj_per_bit": 0.2})
    assert s["row_hits"] > 0 and s["cache_hit_rate"] > 0


stream_configs = st.fixed_dictionaries({
    "run.seed": st.integers(0, 1000),
    "array.lines": st.just(4096),
    "array.banks": st.integers(1, 4),
    "array.row_lines": st.sampled_from([0, 4]),
    "controller.write_cancel": st.booleans(),
    "streams": st.lists(st.fixed_dictionaries({
        "pattern": st.sampled_from(["uniform", "zipf", "sequential"]),
        "requests": st.integers(100, 1500),
        "read_fraction": st.sampled_from([0.0, 0.5, 1.0]),
        "arrival": st.sampled_from(["poisson", "fixed", "onoff"]),
        "interval_ns": st.sampled_from([20.0, 100.0, 400.0]),
        "offset_lines": st.sampled_from([0, 1024, 2048]),
        "footprint_lines": st.sampled_from([64, 1024]),
    }), min_size=1, max_size=3),
    "mode": st.sampled_from(["open", "cache", "closed"]),
    "trace": st.none() | st.tuples(st.booleans(), st.sampled_from([0.5, 1.0, 3.0]), st.sampled_from([0.0, 5000.0])),
})


@functools.cache
def _stream_trace(with_data: bool) -> str:
    """A small trace for trace streams (lines below 1024), written once per test process."""
    rng = np.random.default_rng(11 + with_data)
    n = 700
    t = np.cumsum(rng.exponential(60.0, n))
    path = Path(tempfile.gettempdir()) / f"memsim_diff_stream_{os.getpid()}_{int(with_data)}.csv"
    rows = ["time_ns,op,line" + (",data" if with_data else "")]
    for i in range(n):
        w = rng.random() < 0.4
        row = f"{t[i]:.2f},{'W' if w else 'R'},{rng.integers(0, 1024)}"
        if with_data:
            row += "," + (rng.bytes(64).hex() if w else "")
        rows.append(row)
    path.write_text("\n".join(rows) + "\n")
    return str(path)


def _named(ov):
    ov["streams"] = [{**s, "name": f"s{i}"} for i, s in enumerate(ov["streams"])]
    mode = ov.pop("mode")
    if mode == "cache":
        ov.update({"cache.enabled": True, "cache.capacity_lines": 256, "cache.ways": 4})
    elif mode == "closed":
        ov.update({"workload.arrival": "closed", "workload.outstanding": 6})
    trace = ov.pop("trace")
    if trace is not None:
        with_data, scale, start = trace
        ov["streams"].append({"name": "replay", "pattern": "trace", "trace": _stream_trace(with_data),
                              "time_scale": scale, "start_ns": start, "offset_lines": 3072,
                              "footprint_lines": 1024})
    return ov


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(stream_configs.map(_named))
def test_fast_engine_matches_reference_with_mixed_streams(ov):
    assert_engines_agree(ov)


@pytest.mark.parametrize("mode", ["cache", "closed"])
@pytest.mark.parametrize("with_data", [False, True])
def test_mixed_stream_summaries_agree(mode, with_data):
    # Per-stream keys come after the engines (and the cache before them): the
    # whole summary, per-stream keys included, agrees key for key.
    ov = _named({"run.seed": 5, "array.lines": 4096, "array.banks": 2, "mode": mode,
                 "trace": (with_data, 0.5, 1000.0),
                 "streams": [{"pattern": "zipf", "requests": 1200, "interval_ns": 100.0, "footprint_lines": 1024},
                             {"pattern": "sequential", "requests": 600, "read_fraction": 0.0,
                              "interval_ns": 200.0, "offset_lines": 1024, "footprint_lines": 1024}]})
    s = assert_summaries_agree(ov)
    assert s["stream_replay_requests"] == 700 and s["stream_s0_requests"] == 1200
    if mode == "cache":
        assert 0 < s["stream_s0_cache_hit_rate"] < 1


def test_a_cache_that_absorbs_every_request_leaves_the_pcm_idle():
    # Writes only, over fewer lines than the cache holds: nothing reaches the PCM.
    s = assert_summaries_agree({"workload.requests": 300, "workload.read_fraction": 0.0,
                                "workload.footprint_lines": 64, "cache.enabled": True,
                                "cache.capacity_lines": 256, "cache.ways": 4})
    assert s["requests"] == 0 and s["overall_requests"] == 300 and s["cache_writebacks"] == 0
