"""Run one config: build the parts from the config, run the engines, summarize."""
from __future__ import annotations

import time
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from memsim import __version__
from memsim.config import RunConfig, load_config
from memsim.engine.timing import TimingEngine, TimingTotals
from memsim.errors import ConfigError
from memsim.metrics.result import RunResult, latency_histogram, latency_stats
from memsim.policy.leveling.base import Leveler
from memsim.policy.write import SCHEMES, make_scheme
from memsim.policy.writepath import WritePath
from memsim.workload.content import DataModel
from memsim.workload.synthetic import SyntheticSource


def resolve(config: str | Path | Mapping | RunConfig | None, overrides: Mapping[str, Any] | None = None,
            ) -> RunConfig:
    """Config plus overrides -> validated RunConfig, with names checked against registries.

    Keyword overrides may use ``__`` for the dot (``write__scheme``).
    """
    ov = {k.replace("__", "."): v for k, v in (overrides or {}).items()}
    cfg = load_config(config, ov)
    if cfg.write.scheme not in SCHEMES:
        where = "--set write.scheme" if "write.scheme" in ov else "write.scheme"
        raise ConfigError(where, repr(cfg.write.scheme), "one of " + ", ".join(SCHEMES))
    return cfg


def build_path(cfg: RunConfig, rng: np.random.Generator) -> WritePath:
    leveler = Leveler(cfg.footprint, rng)
    scheme = make_scheme(cfg.write.scheme, cfg.array.line_bytes, cfg.write.word_bits)
    w = cfg.workload
    data = DataModel(w.data, cfg.array.line_bytes, w.flip_fraction, w.one_fraction)
    return WritePath(leveler, scheme, data, rng)


def sampled_in_system(arrival: np.ndarray, finish: np.ndarray, horizon: float,
                      samples: int = 4096) -> float:
    """Time-average number of requests in the system, sampled on an even grid.

    An estimate from the sample path, independent of the latency average, so
    Little's law can be checked against it.
    """
    if horizon <= 0 or arrival.size == 0:
        return 0.0
    grid = (np.arange(samples) + 0.5) * horizon / samples
    a = np.searchsorted(np.sort(arrival), grid, side="right")
    f = np.searchsorted(np.sort(finish), grid, side="right")
    return float((a - f).mean())


def summarize(cfg: RunConfig, tot: TimingTotals, path: WritePath) -> dict[str, Any]:
    """The flat summary dict of a run (units in the names)."""
    line_bytes = cfg.array.line_bytes
    sim = tot.simulated_ns
    n = tot.requests
    lat, op = tot.latency_ns, tot.op
    s: dict[str, Any] = {
        "requests": n,
        "reads": tot.reads,
        "writes": tot.writes,
        "simulated_ns": sim,
        "throughput_gbps": n * line_bytes / sim if sim > 0 else 0.0,
        "requests_per_s": n / sim * 1e9 if sim > 0 else 0.0,
    }
    s.update(latency_stats(lat[op == 0], "read_latency"))
    s.update(latency_stats(lat[op == 1], "write_latency"))
    energy = tot.read_pj + tot.set_pj + tot.reset_pj
    bits = n * line_bytes * 8
    s.update({
        "energy_pj": energy,
        "energy_read_pj": tot.read_pj,
        "energy_set_pj": tot.set_pj,
        "energy_reset_pj": tot.reset_pj,
        "energy_per_bit_pj": energy / bits if bits else 0.0,
        "cells_programmed_per_write": (tot.user_set_cells + tot.user_reset_cells) / tot.writes
        if tot.writes else 0.0,
        "set_cells_per_write": tot.user_set_cells / tot.writes if tot.writes else 0.0,
        "reset_cells_per_write": tot.user_reset_cells / tot.writes if tot.writes else 0.0,
        "bank_utilization": float(tot.bank_busy_ns.mean() / sim) if sim > 0 else 0.0,
        "mean_in_system": sampled_in_system(tot.arrival_ns, tot.finish_ns, sim),
        "leveling_move_writes": tot.move_writes,
    })
    return s


def simulate(config: str | Path | Mapping | RunConfig | None = None, **overrides: Any) -> RunResult:
    """Run one config and return its :class:`RunResult`.

    ``config`` is a TOML path, a dict, a RunConfig or None (defaults);
    keyword overrides use ``section__key=value`` (or pass
    ``overrides={"section.key": value}``).
    """
    extra = overrides.pop("overrides", None) or {}
    cfg = resolve(config, {**extra, **overrides})
    t0 = time.perf_counter()
    rng = np.random.default_rng(cfg.run.seed)
    path = build_path(cfg, rng)
    source = SyntheticSource(cfg.workload, cfg.footprint, rng, cfg.run.chunk_requests)
    tot = TimingEngine(cfg, source, path).run()
    summary = summarize(cfg, tot, path)
    tables = {"latency_histogram": latency_histogram(tot.latency_ns, tot.op)}
    return RunResult(summary, tables, cfg.model_dump(), cfg.run.seed, __version__,
                     time.perf_counter() - t0)
