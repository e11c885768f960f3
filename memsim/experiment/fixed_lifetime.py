"""Lifetime fields for workloads sized in device lines (``workload.sizing = "device_lines"``).

The traffic is laid out on the device's own lines
(:mod:`memsim.workload.device_traffic`) and the leveler evaluated on them
(:mod:`memsim.engine.fixed_wear`), so ``array.lines`` does not enter the
lifetime at all.  Estimates are medians of the end-of-life wear (no cell
draws).  A trace's lines are device lines here; its traffic is each written
device line's counted share over one pass of the trace (the timing run
folds device line ``q`` onto modeled line ``floor(q N / D)``, see
:func:`memsim.experiment.build.fold_chunks`).  Levelers other than none, start_gap, randomized_start_gap and
security_refresh (one region), and start_gap under a scattered Zipf
layout (the ranks' places are not kept), give null with a note.
"""
from __future__ import annotations

from typing import Any

import numpy as np
from scipy.special import betaincinv

from memsim.config import RunConfig
from memsim.engine.fixed_wear import (
    none_writes,
    randomized_start_gap_writes,
    security_refresh_writes,
    start_gap_writes,
)
from memsim.metrics.lifetime import writes_to_years
from memsim.units import GIB
from memsim.workload.device_traffic import device_traffic, layout_rng, trace_traffic

SUPPORTED = ("none", "start_gap", "randomized_start_gap", "security_refresh")
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


def device_lines_fields(cfg: RunConfig, law, rate_bytes_per_s: float) -> dict[str, Any]:
    """``lifetime_*`` summary fields for a device-lines-sized workload.

    ``law`` is the line death law (:class:`memsim.experiment.lifetime.DeathLaw`).
    """
    d = device_line_count(cfg)
    lv = cfg.leveling
    needed = int(np.floor(cfg.lifetime.capacity_loss * d)) + 1
    if cfg.workload.pattern == "trace":
        traffic = trace_traffic(_trace_writes(cfg, d), d)
    else:
        traffic = device_traffic(cfg.workload, d, layout_rng(cfg.run.seed))
    out: dict[str, Any] = {"lifetime_leveling_scale": "device", "lifetime_traffic": "device_lines",
                           "device_lines": float(d), "lifetime_note": None}
    name = lv.scheme
    note = ""
    if name not in SUPPORTED:
        note = (f"no estimate: {name} is not evaluated for workloads sized in device lines "
                f"(supported: {', '.join(SUPPORTED)})")
    elif name == "security_refresh" and lv.region_lines:
        note = "no estimate: security_refresh with workload.sizing = device_lines needs one region (region_lines 0)"

    def writes(k: int) -> float:
        if name == "none":
            return none_writes(traffic, law.cdf, k)
        if name == "start_gap":
            return start_gap_writes(traffic, law.cdf, k, lv.psi)
        if name == "randomized_start_gap":
            return randomized_start_gap_writes(traffic, law.cdf, k, lv.psi)
        weak = float(law.ppf(np.array([1.0 / d]))[0])
        return security_refresh_writes(traffic, law.cdf, k, lv.interval, weak)

    end = first = float("nan")
    if not note:
        end = writes(needed)
        first = end if needed == 1 else writes(1)
        if np.isnan(end):
            why = ("the places of the Zipf ranks are not kept (scattered layout) and Start-Gap depends on them"
                   if name == "start_gap" else
                   "its device-scale approximation does not hold for this traffic (see memsim.engine.fixed_wear)")
            note = f"no device-scale estimate for {name}: {why}"
    if note:
        out.update({k: None for k in _KEYS})
        out["lifetime_note"] = note
        return out
    per_line = {"none": 1.0, "start_gap": 1.0 + 1.0 / lv.psi, "randomized_start_gap": 1.0 + 1.0 / lv.psi,
                "security_refresh": 1.0 + 1.0 / lv.interval}[name]

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
