"""Drift analysis of a design without running a workload.

``drift_report`` gives the error-rate table of a line against its age, the
refresh age the design needs (the age at which the probability of an
uncorrectable line reaches ``refresh.max_fail_prob``) and the raw bit error
rate the ECC tolerates at that target.
"""
from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from memsim import __version__
from memsim.config import RunConfig
from memsim.experiment.run import resolve
from memsim.metrics.result import RunResult
from memsim.tech.drift import error_table, rber_limit, refresh_age
from memsim.tech.models import drift_params, mlc_cell
from memsim.tech.technology import stt_error_table, stt_pulse_for_error_rate

YEAR_S = 365.25 * 24 * 3600.0


def drift_report(config: str | Path | Mapping | RunConfig | None = None, **overrides: Any) -> RunResult:
    """Refresh age and error-rate table of a config's cell and ECC.

    Keyword overrides use ``section__key`` (or ``overrides={"a.b": v}``).
    The result's ``tables["drift_errors"]`` holds, per line age (s), the
    crossing probability and raw bit error rate of each level, the line's raw
    bit error rate and the probability that the line is uncorrectable.
    """
    extra = overrides.pop("overrides", None) or {}
    cfg = resolve(config, {**extra, **overrides})
    r = cfg.refresh
    cell, drift = mlc_cell(cfg), drift_params(cfg)
    n_cells = cell.cells_per_line(cfg.array.line_bytes * 8)
    n_bits = round(n_cells * cell.bits_stored)
    notes: list[str] = []
    # Drift at another temperature needs its activation energy; crystallization
    # has its own, so the retention-limited age can be given either way.
    drift_known = r.temperature_k == drift.drift_reference_k or drift.drift_activation_ev is not None
    if not drift_known:
        notes.append(f"drift at {r.temperature_k} K needs cell.drift_activation_ev (no default: see "
                     "memsim/tech/drift.py); refresh_age_s is null, the table shows crystallization only")
    used = drift if drift_known else drift.without_drift()
    ra = refresh_age(cell, used, n_cells, r.correctable_bits, r.max_fail_prob, r.temperature_k,
                     method=r.fail_model)
    retention_age = None
    if drift.retention is not None:
        rr = refresh_age(cell, drift.without_drift(), n_cells, r.correctable_bits, r.max_fail_prob,
                         r.temperature_k, method=r.fail_model)
        retention_age = rr.age_s if rr.status == "found" else None
        if rr.status != "found":
            notes.append(f"without drift (crystallization, unconverged cells): {rr.status.replace('_', ' ')} "
                         f"(window {drift.drift_t0_s:g} .. {rr.window_end_s:.3g} s)")
    else:
        notes.append("crystallization of the amorphous state not modeled (cell.retention_activation_ev unset)")
    hi = math.log10(used.drift_t_max_s / used.acceleration(r.temperature_k))
    ages = list(10.0 ** np.arange(0, math.floor(hi) + 1))
    if math.isfinite(ra.age_s):
        ages.append(ra.age_s)
    ages = np.unique(np.asarray(ages))
    table = error_table(cell, used, ages, n_cells, r.correctable_bits, r.temperature_k,
                        method=r.fail_model)
    dense = error_table(cell, used, np.logspace(0, hi, 200), n_cells, r.correctable_bits,
                        r.temperature_k, method=r.fail_model)
    limit = rber_limit(n_bits, r.correctable_bits, r.max_fail_prob)
    at_age = float(table.loc[table["age_s"] == ra.age_s, "rber_line"].iloc[0]) if math.isfinite(
        ra.age_s) else float("nan")
    summary = {
        "bits_per_cell": cell.bits_stored if cell.tri_level else cfg.cell.bits_per_cell,
        "cells_per_line": n_cells,
        "correctable_bits": r.correctable_bits,
        "max_fail_prob": r.max_fail_prob,
        "temperature_k": r.temperature_k,
        "refresh_age_s": ra.age_s if drift_known else None,
        "refresh_age_years": ra.age_s / YEAR_S if drift_known else None,
        "refresh_age_status": ra.status if drift_known else "drift_unknown_at_temperature",
        "retention_refresh_age_s": retention_age,
        "retention_refresh_age_years": retention_age / YEAR_S if retention_age is not None else None,
        "retention_median_years": (drift.retention.median_s(r.temperature_k) / YEAR_S
                                   if drift.retention is not None else None),
        "rber_at_refresh": at_age,
        "rber_limit": limit,
        "drift_window_end_s": ra.window_end_s,
        "note": "; ".join(notes) if notes else "",
    }
    tables = {"drift_errors": table, "drift_errors_dense": dense}
    if cfg.cell.technology == "stt_mram":
        # Switching errors, not drift, limit an STT-MRAM write: the error rate of one
        # attempt against pulse width, and the pulse that reaches the ECC's target.
        c = cfg.cell
        tables["write_error_rate"] = stt_error_table(cfg)
        for side, cur in (("set", c.set_ua), ("reset", c.reset_ua)):
            summary[f"stt_{side}_pulse_for_target_ns"] = stt_pulse_for_error_rate(
                r.max_fail_prob, cur, c.stt_delta, c.stt_ic0_ua, c.stt_attempt_ns)
    return RunResult(summary, tables, cfg.model_dump(), cfg.run.seed, __version__)

