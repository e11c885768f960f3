"""Run one config: build the parts from the config, run the engines, summarize."""
from __future__ import annotations

import copy
import gc
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from memsim import __version__
from memsim.config import RunConfig, load_config
from memsim.config.load import locate, source_name
from memsim.engine.fast import make_engine
from memsim.engine.refresh_agent import RefreshAgent
from memsim.engine.timing import TimingEngine, TimingTotals
from memsim.errors import ConfigError
from memsim.experiment.build import build_path, build_source, source_fields
from memsim.experiment.checks import check_parts
from memsim.experiment.front import cache_energy_pj, front_fields, host_counts, stream_fields
from memsim.experiment.progress import track
from memsim.experiment.wear_life import lifetime_fields
from memsim.metrics.energy import periphery_energy
from memsim.metrics.result import RunResult
from memsim.policy.refresh import check_refresh_load, plan_refresh
from memsim.policy.write.bits import popcount_rows
from memsim.policy.writepath import WritePath
from memsim.seeds import stream
from memsim.tech.technology import summary_fields as technology_summary
from memsim.workload.chunk import READ, WRITE


def resolve(config: str | Path | Mapping | RunConfig | None, overrides: Mapping[str, Any] | None = None,
            ) -> RunConfig:
    """Config plus overrides -> validated RunConfig, with names checked against registries.

    Keyword overrides may use ``__`` for the dot (``write__scheme``).
    """
    ov = {k.replace("__", "."): v for k, v in (overrides or {}).items()}
    cfg = load_config(config, ov)
    try:
        check_parts(cfg)
    except ConfigError as exc:
        raise locate(exc, source_name(config), set(ov)) from None
    return cfg


def summarize(cfg: RunConfig, tot: TimingTotals, path: WritePath, cache=None,
              refreshes: int = 0) -> dict[str, Any]:
    """The flat summary dict of a run (units in the names).

    Request, latency and cell keys describe the PCM side (with a DRAM cache
    in front: its fills and write-backs); ``energy_pj`` and
    ``energy_per_bit_pj`` are of the whole memory per bit the host moved.
    """
    line_bytes = cfg.array.line_bytes
    sim = tot.simulated_ns
    n = tot.requests
    s: dict[str, Any] = {
        "requests": n,
        "reads": tot.reads,
        "writes": tot.writes,
        "simulated_ns": sim,
        "throughput_gbps": n * line_bytes / sim if sim > 0 else 0.0,
        "requests_per_s": n / sim * 1e9 if sim > 0 else 0.0,
    }
    # Percentiles from the streamed histogram (relative error <= stream.REL_ERROR).
    s.update(tot.stream.stats(READ, "read_latency"))
    s.update(tot.stream.stats(WRITE, "write_latency"))
    cache_pj = cache_energy_pj(cfg, cache)
    span = sim if cache is None else max(sim, cache.last_hit_finish_ns)
    # Reads answered from the write queue and writes replaced in it never reach a bank or the bus.
    more = periphery_energy(cfg, read_pj=tot.read_pj, read_bits=tot.read_bits, row_hits=tot.row_hits,
                            user_reads=tot.reads - tot.reads_forwarded,
                            user_writes=tot.writes - tot.writes_coalesced, moves=tot.move_writes,
                            refreshes=refreshes, span_ns=span)
    # The cells' parts in their old order first: with the new terms zero the
    # total is bit for bit what it was before they existed.
    energy = (more["energy_read_pj"] + tot.set_pj + tot.reset_pj + tot.mlc_pj + tot.cancelled_pj
              + tot.preset_pj + tot.refresh_pj + tot.erase_pj + more["energy_row_hit_pj"]
              + more["energy_background_pj"] + more["energy_peripheral_pj"] + more["energy_io_pj"]
              + cache_pj)
    bits = sum(host_counts(tot, cache)) * line_bytes * 8
    rows_for_writes = cfg.controller.scheduler == "fr_fcfs" and cfg.array.row_lines > 0
    s.update({
        "energy_pj": energy,
        "energy_read_pj": more["energy_read_pj"],
        "energy_set_pj": tot.set_pj,
        "energy_reset_pj": tot.reset_pj,
        "energy_mlc_program_pj": tot.mlc_pj,
        "energy_cancelled_pj": tot.cancelled_pj,
        "energy_preset_pj": tot.preset_pj,
        "energy_refresh_pj": tot.refresh_pj,
        "energy_row_hit_pj": more["energy_row_hit_pj"],
        "energy_background_pj": more["energy_background_pj"],
        "energy_peripheral_pj": more["energy_peripheral_pj"],
        "energy_io_pj": more["energy_io_pj"],
        "energy_cache_pj": cache_pj,
        "row_hits": more["row_hits"],
        "row_hit_rate": more["row_hit_rate"],
        # Queue policies (engine/sched.py); write row hits exist only where writes use
        # rows (fr_fcfs with a row buffer), per served user write.
        "write_row_hits": tot.write_row_hits if rows_for_writes else None,
        "write_row_hit_rate": tot.write_row_hits / (tot.writes - tot.writes_coalesced)
        if rows_for_writes and tot.writes > tot.writes_coalesced else None,
        "requests_passed": tot.requests_passed,
        "max_times_passed": tot.max_times_passed,
        "writes_coalesced": tot.writes_coalesced,
        "reads_forwarded": tot.reads_forwarded,
        "energy_per_bit_pj": energy / bits if bits else 0.0,
        "cells_programmed_per_write": (tot.user_set_cells + tot.user_reset_cells) / tot.writes
        if tot.writes else 0.0,
        "set_cells_per_write": tot.user_set_cells / tot.writes if tot.writes else 0.0,
        "reset_cells_per_write": tot.user_reset_cells / tot.writes if tot.writes else 0.0,
        "bank_utilization": float(tot.bank_busy_ns.mean() / sim) if sim > 0 else 0.0,
        "mean_in_system": tot.stream.mean_in_system(sim),
        "leveling_move_writes": tot.move_writes,
        "write_cancellations": tot.cancellations,
        "cancelled_cells": tot.cancelled_cells,
        "write_pauses": tot.pauses,
        "hints": tot.hints,
        "presets": tot.presets,
        "hint_hits": tot.hint_hits,
        "hint_coverage": tot.hint_hits / tot.hints if tot.hints else 0.0,
        "wasted_presets": tot.presets - tot.hint_hits,
        "wasted_preset_cells": round(tot.preset_cells * (1 - tot.hint_hits / tot.presets)) if tot.presets else 0,
        "power_wait_ns": tot.power_wait_ns,
        "power_wait_per_write_ns": tot.power_wait_ns / tot.writes if tot.writes else 0.0,
        "cells_per_ns": (tot.user_set_cells + tot.user_reset_cells + tot.move_cells) / sim
        if sim > 0 else 0.0,
    })
    if path.mlc is not None:
        s.update(path.mlc.summary())
    s.update(technology_summary(cfg))
    s.update(lifetime_fields(cfg, path, tot.writes * line_bytes / sim * 1e9 if sim > 0 else 0.0))
    return s


def refresh_demand(engine: TimingEngine, sample: int = 4096) -> tuple[np.ndarray, float]:
    """Modeled lines per bank and the mean time a refresh holds a bank, ns, before the run.

    The same service time as :meth:`TimingEngine.refresh_cost` (read, then
    reprogram the drifting cells) over the lines' initial content, without
    its side effects: a sample of at most ``sample`` lines, and a copy of the
    multi-level writer with its own random stream (``refresh_demand``) so
    the run's draws stay as they are.
    """
    path, cell = engine.path, engine.cell
    n = path.n_physical
    _, bank, _ = engine.amap.locate(np.arange(n))
    lines_per_bank = np.bincount(bank, minlength=engine.amap.total_banks)
    lines = np.linspace(0, n - 1, min(n, sample)).astype(np.int64)
    stored = path.stored[lines]
    if path.mlc is not None:
        mlc = copy.copy(path.mlc)
        mlc.rng = stream(engine.cfg.run.seed, "refresh_demand")
        mlc.totals = dict(mlc.totals)       # the estimate is not part of the run's totals
        mlc.salt = None
        program = mlc.cost(np.zeros_like(stored), stored).program_ns
    else:
        n_reset = engine.line_bits - popcount_rows(stored)
        program = cell.program_ns(np.zeros_like(n_reset), n_reset, engine.round_budget_ua)
    return lines_per_bank, float(np.mean(program)) + cell.read_ns


def refresh_fields(tot: TimingTotals, agent: RefreshAgent, summary: dict[str, Any]) -> dict[str, Any]:
    """Refresh cost and error keys of the summary."""
    plan = agent.plan
    sim = tot.simulated_ns
    n = agent.refreshes
    busy = float(tot.bank_busy_ns.sum())
    all_cells = float(agent.engine.path.line_cells.sum())
    energy = summary["energy_pj"]
    return {
        "refresh_policy": plan.policy,
        "refresh_age_needed_s": plan.age_s,
        "refresh_interval_s": plan.interval_s,
        "refreshes": n,
        "refreshes_per_s": n / sim * 1e9 if sim > 0 else 0.0,
        "refresh_bandwidth_share": tot.refresh_busy_ns / busy if busy > 0 else 0.0,
        "refresh_energy_share": tot.refresh_pj / energy if energy > 0 else 0.0,
        "refresh_wear_share": agent.cells / all_cells if all_cells > 0 else 0.0,
        "rber_at_refresh": agent.rber_sum / n if n else float(
            plan.rber(plan.interval_s) if np.isfinite(plan.interval_s) else np.nan),
        "uncorrectable_lines": agent.expected_fail,
        "line_scale": plan.scale,
    }


def erase_fields(engine: TimingEngine, summary: dict[str, Any]) -> dict[str, Any]:
    """Block erase-ahead keys; for in-place schemes write amplification counts leveler moves."""
    if engine.erase is None:
        return {"write_amplification": 1.0 + summary["leveling_move_writes"] / max(1, summary["writes"])}
    e = engine.erase.summary()
    energy = summary["energy_pj"]
    return {**e, "erase_energy_share": e["energy_erase_pj"] / energy if energy > 0 else 0.0}


def simulate(config: str | Path | Mapping | RunConfig | None = None, **overrides: Any) -> RunResult:
    """Run one config and return its :class:`RunResult`.

    ``config`` is a TOML path, a dict, a RunConfig or None (defaults);
    keyword overrides use ``section__key=value`` (or pass
    ``overrides={"section.key": value}``).
    """
    extra = overrides.pop("overrides", None) or {}
    cfg = resolve(config, {**extra, **overrides})
    try:
        return _simulate(cfg)
    finally:
        # The simpy engine and its processes refer to each other, and that cycle
        # holds the write path's per-cell wear (over 100 MB for a large array)
        # until a full collection, which gc's allocation-count trigger seldom
        # runs: a process doing many runs would grow by a run's arrays per run.
        gc.collect()


def expected_span_ns(cfg: RunConfig) -> float | None:
    """Simulated time an open-loop synthetic run spans (arrivals only); None if not known up front."""
    w = cfg.workload
    if w.pattern == "trace" or w.arrival == "closed" or cfg.streams:
        return None
    span = w.requests * w.interval_ns
    if w.arrival == "onoff":
        span *= (w.on_ns + w.off_ns) / w.on_ns
    return span


def _simulate(cfg: RunConfig) -> RunResult:
    t0 = time.perf_counter()
    path = build_path(cfg)
    source = build_source(cfg)
    try:
        plan = plan_refresh(cfg)
        # With a cache in front the PCM sees fewer requests than the host sends.
        total = cfg.workload.requests if cfg.workload.pattern != "trace" and source.cache is None else None
        if cfg.streams:
            traced = any(st.pattern == "trace" for st in cfg.streams)
            total = None if traced or source.cache is not None else sum(st.requests for st in cfg.streams)
        chunks = track(source, total, "req", f"run {cfg.run.name}")
        # Per-stream keys come from each request's arrival and finish.
        run_cfg = cfg if not cfg.streams else cfg.model_copy(
            update={"run": cfg.run.model_copy(update={"keep_requests": True})})
        engine = make_engine(run_cfg, chunks, path, plan, stream(cfg.run.seed, "refresh"))
        if plan.active:
            lines_per_bank, service = refresh_demand(engine)
            check_refresh_load(plan, lines_per_bank, service, expected_span_ns(cfg))
        tot = engine.run()
    finally:
        source.close()       # stop the traces' read-ahead threads on every path
    refreshes = engine.agent.refreshes if engine.agent is not None else 0
    summary = summarize(cfg, tot, path, source.cache, refreshes)
    summary["engine"] = engine.name
    summary.update(front_fields(cfg, tot, source.cache))
    if source.mix is not None:
        summary.update(stream_fields(cfg, tot, source.mix.stream_of_requests(), source.cache))
    summary.update(refresh_fields(tot, engine.agent, summary))
    summary.update(erase_fields(engine, summary))
    summary.update(source_fields(source))
    tables = {"latency_histogram": tot.stream.table()}
    return RunResult(summary, tables, cfg.model_dump(), cfg.run.seed, __version__,
                     time.perf_counter() - t0)
