"""A run's summary as text a reviewer can read: sections, units, significant digits.

The flat summary dict stays the record (JSON and CSV keep every key); this
module only decides how it is printed.  Keys are grouped by what they
answer (requests and throughput, latency, energy, wear and lifetime), then
one section per feature that is on in the run's config.  A feature that is
off prints nothing unless ``full`` is asked for, so a plain run is not a page
of zeros.  Keys no rule knows land in a last section, so a new metric is
never hidden.
"""
from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

from memsim.units import split_unit


@dataclass(frozen=True)
class _Section:
    title: str
    match: Callable[[str], bool]
    # Whether the feature is on, from the resolved config and the summary;
    # None = a core section, always printed.
    on: Callable[[Mapping, Mapping], bool] | None = None


def _prefix(*names: str) -> Callable[[str], bool]:
    return lambda k: k.startswith(names)


def _keys(*names: str) -> Callable[[str], bool]:
    return lambda k: k in names


def _get(cfg: Mapping, dotted: str, default: Any = None) -> Any:
    cur: Any = cfg
    for part in dotted.split("."):
        if not isinstance(cur, Mapping) or part not in cur:
            return default
        cur = cur[part]
    return cur


def _num(summary: Mapping, key: str) -> float:
    v = summary.get(key)
    return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else 0.0


# Order matters: the first section whose rule matches a key takes it.
SECTIONS: list[_Section] = [
    # Without a cache the overall_* keys repeat the PCM-side ones: printed only with one.
    _Section("dram cache", lambda k: k.startswith(("cache_", "overall_")) or k in (
        "pcm_write_reduction", "energy_cache_pj"), lambda c, s: bool(_get(c, "cache.enabled"))),
    _Section("mixed streams", _prefix("stream_"), lambda c, s: bool(_get(c, "streams"))),
    _Section("power budget", _prefix("power_wait"),
             lambda c, s: (_get(c, "power.budget_ua", 0) or 0) > 0),
    _Section("write cancellation and pausing",
             _keys("write_cancellations", "cancelled_cells", "write_pauses", "energy_cancelled_pj",
                   "wear_cells_cancelled"),
             lambda c, s: bool(_get(c, "controller.write_cancel") or _get(c, "controller.write_pause"))),
    _Section("controller queues",
             _keys("write_row_hits", "write_row_hit_rate", "requests_passed", "max_times_passed",
                   "writes_coalesced", "reads_forwarded"),
             lambda c, s: _get(c, "controller.scheduler", "fcfs") != "fcfs"
             or bool(_get(c, "controller.coalesce_writes") or _get(c, "controller.forward_reads"))),
    _Section("write hints",
             lambda k: k.startswith(("hint", "preset", "wasted_preset")) or k in (
                 "hints", "presets", "wasted_presets", "energy_preset_pj", "wear_cells_preset"),
             lambda c, s: bool(_get(c, "controller.hint_preset")) or _num(s, "hints") > 0),
    _Section("block erase-ahead",
             lambda k: k.startswith(("erase", "cleaner", "fallback")) or k in (
                 "energy_erase_pj", "wear_cells_erase"),
             lambda c, s: _get(c, "write.scheme") == "block_erase"),
    _Section("refresh",
             lambda k: k.startswith("refresh") or k in (
                 "rber_at_refresh", "uncorrectable_lines", "energy_refresh_pj", "wear_cells_refresh"),
             lambda c, s: _get(c, "refresh.policy", "none") not in (None, "none")),
    _Section("multi-level cells", _keys("energy_mlc_program_pj"),
             lambda c, s: (_get(c, "cell.bits_per_cell", 1) or 1) > 1),
    _Section("trace", _prefix("trace_"),
             lambda c, s: _get(c, "workload.pattern") == "trace" or _num(s, "trace_bad_lines") > 0),
    _Section("requests and throughput",
             lambda k: k in ("engine", "requests", "reads", "writes", "simulated_ns", "throughput_gbps",
                             "requests_per_s", "bank_utilization", "mean_in_system")),
    _Section("latency", lambda k: k.startswith(("read_latency", "write_latency")) or k in (
        "row_hits", "row_hit_rate")),
    _Section("energy",
             lambda k: k.startswith("energy") or k in (
                 "cells_programmed_per_write", "set_cells_per_write", "reset_cells_per_write",
                 "cells_per_ns")),
    _Section("cells and ECC",
             lambda k: k in ("bits_per_cell", "cells_per_line", "correctable_bits", "max_fail_prob",
                             "temperature_k", "rber_limit")),
    _Section("retention and write errors",
             lambda k: k.startswith(("retention_", "drift_window", "stt_", "write_error_rate"))),
    _Section("wear and lifetime",
             lambda k: k.startswith(("lifetime", "wear", "leveling", "write_rate", "write_amplification",
                                     "line_scale"))),
]
_ALIGN_MAX = 24    # longer values (notes) are printed as they are, not right-aligned
_CORE_ORDER = ["requests and throughput", "latency", "energy", "wear and lifetime", "cells and ECC",
               "retention and write errors"]


def fmt_value(v: Any) -> str:
    """A value with four significant digits and thousands separators; null as ``-``."""
    if v is None:
        return "-"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int):
        return f"{v:,}"
    if isinstance(v, float):
        if math.isnan(v):
            return "-"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        if v == 0:
            return "0"
        a = abs(v)
        if a >= 1e6 or a < 1e-3:
            mant, exp = f"{v:.3e}".split("e")
            return f"{mant}e{int(exp)}"
        if v.is_integer():
            return f"{int(v):,}"
        decimals = max(0, 3 - math.floor(math.log10(a)))
        return f"{v:,.{decimals}f}"
    return str(v)


def unit_of(key: str) -> str:
    """The unit a reader sees beside ``key``'s value (from the key's suffix)."""
    return split_unit(key)[1] or ""


def grouped(summary: Mapping[str, Any], config: Mapping | None = None,
            full: bool = False) -> list[tuple[str, list[str]]]:
    """Summary keys by section, in print order: ``[(title, [key, ...]), ...]``.

    Sections of features that are off in ``config`` are left out unless
    ``full``; with no config every section with a key is kept.
    """
    cfg = config or {}
    taken: dict[str, list[str]] = {s.title: [] for s in SECTIONS}
    other: list[str] = []
    for k in summary:
        for sec in SECTIONS:
            if sec.match(k):
                taken[sec.title].append(k)
                break
        else:
            other.append(k)
    by_title = {s.title: s for s in SECTIONS}
    feature_titles = [s.title for s in SECTIONS if s.on is not None]
    out: list[tuple[str, list[str]]] = []
    for title in _CORE_ORDER + feature_titles:
        keys = taken[title]
        sec = by_title[title]
        if not keys:
            continue
        if sec.on is not None and not full and config is not None and not sec.on(cfg, summary):
            continue
        out.append((title, keys))
    if other:
        out.append(("other", other))
    return out


def summary_lines(summary: Mapping[str, Any], config: Mapping | None = None,
                  full: bool = False) -> list[str]:
    """The printed form of a summary: a title line per section, then ``key  value unit``."""
    groups = grouped(summary, config, full)
    if not groups:
        return []
    width = max(len(k) for _, keys in groups for k in keys)
    values = {k: fmt_value(summary[k]) for _, keys in groups for k in keys}
    # Numbers line up on the right; a long text (a note) is not allowed to push them.
    vwidth = max((len(v) for v in values.values() if len(v) <= _ALIGN_MAX), default=1)
    lines: list[str] = []
    for title, keys in groups:
        lines.append(f"  {title}")
        for k in keys:
            unit = unit_of(k) if summary[k] is not None else ""
            v = values[k]
            text = f"{v:>{vwidth}}" if len(v) <= _ALIGN_MAX else v
            lines.append(f"    {k:<{width}}  {text} {unit}".rstrip())
    hidden = len(summary) - sum(len(keys) for _, keys in groups)
    if hidden:
        lines.append(f"  ({hidden} keys of features that are off not shown; --full prints them)")
    return lines
