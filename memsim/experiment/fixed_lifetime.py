"""Lifetime fields for workloads sized in device lines (``workload.sizing = "device_lines"``).

The traffic is laid out on the device's own lines
(:mod:`memsim.workload.device_traffic`) and the leveler evaluated on them
(:mod:`memsim.policy.leveling.fixed_wear`), so ``array.lines`` does not enter the
lifetime at all.  Estimates are medians of the end-of-life wear (no cell
draws).  A trace's lines are device lines here; its traffic is each written
device line's counted share over one pass of the trace (the timing run
folds device line ``q`` onto modeled line ``floor(q N / D)``, see
:func:`memsim.experiment.build.fold_chunks`).  The leveler evaluates itself
(its device model's ``device_lines``); a leveler without one, or whose
approximation does not hold for the traffic, gives null with a note.
"""
from __future__ import annotations

from typing import Any

import numpy as np
from scipy.special import betaincinv

from memsim.config import RunConfig
from memsim.metrics.lifetime import writes_to_years
from memsim.policy.leveling.base import Leveler
from memsim.policy.leveling.device_model import DeviceLinesInput
from memsim.units import GIB
from memsim.workload.device_traffic import device_traffic, layout_rng, trace_traffic

_KEYS = ("lifetime_years", "lifetime_first_failure_years", "lifetime_vs_ideal", "lifetime_vs_even_wear")


def device_line_count(cfg: RunConfig) -> int:
    return int(cfg.array.capacity_gib * GIB // cfg.array.line_bytes)


def _trace_writes(cfg: RunConfig, d: int) -> np.ndarray:
    """Device lines of every write of the trace, one pass (addresses are device lines)."""
    from memsim.workload.chunk import WRITE
    from memsim.workload.trace_reader import read_trace

    w = cfg.workload
    reader = read_trace(w.trace, chunk_size=cfg.run.chunk_requests, skip_bad=w.skip_bad,
                        line_bytes=cfg.array.line_bytes, footprint=d)
    parts = [ch.line[ch.op == WRITE] for ch in reader]
    return np.concatenate(parts) if parts else np.zeros(0, dtype=np.int64)


def device_lines_fields(cfg: RunConfig, lv: Leveler, law, rate_bytes_per_s: float) -> dict[str, Any]:
    """``lifetime_*`` summary fields for a device-lines-sized workload.

    ``lv`` is the run's leveler (its :meth:`~memsim.policy.leveling.base.Leveler.device_model`
    evaluates it on the device lines); ``law`` the line death law
    (:class:`memsim.metrics.death_law.DeathLaw`).
    """
    d = device_line_count(cfg)
    needed = int(np.floor(cfg.lifetime.capacity_loss * d)) + 1
    if cfg.workload.pattern == "trace":
        traffic = trace_traffic(_trace_writes(cfg, d), d)
    else:
        traffic = device_traffic(cfg.workload, d, layout_rng(cfg.run.seed))
    out: dict[str, Any] = {"lifetime_leveling_scale": "device", "lifetime_traffic": "device_lines",
                           "device_lines": float(d), "lifetime_note": None}
    model = lv.device_model()
    if model is None:
        out.update({k: None for k in _KEYS})
        out["lifetime_note"] = f"no estimate: {lv.name} is not evaluated for workloads sized in device lines"
        return out
    weak = float(law.ppf(np.array([1.0 / d]))[0])
    life = model.device_lines(DeviceLinesInput(traffic, law.cdf, needed, weak))
    end, first = life.end_writes, life.first_writes
    if np.isnan(end):
        out.update({k: None for k in _KEYS})
        out["lifetime_note"] = f"no device-scale estimate for {lv.name}: {life.note}"
        return out
    per_line = 1.0 + model.overhead

    def years(w: float) -> float:
        return writes_to_years(w, line_bytes=cfg.array.line_bytes, write_bytes_per_s=rate_bytes_per_s)

    ideal = years(cfg.cell.endurance_mean * d)
    u = float(betaincinv(needed, d - needed + 1, 0.5))
    even = float(law.ppf(np.array([u]))[0]) / (per_line / d)
    y = years(end)
    out.update({"lifetime_years": y, "lifetime_first_failure_years": years(first),
                "lifetime_vs_ideal": y / ideal, "lifetime_vs_even_wear": end / even if np.isfinite(end) else None,
                "lifetime_device_writes": end})
    return out
