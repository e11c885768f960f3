"""Lifetime arithmetic shared by timing runs and the wear engine.

The death law of lines under cell endurance and ECP, device scale, the
write-scheme profile, the device-scale evaluation of the levelers and
:func:`lifetime_fields` (a timing run's lifetime keys) live here;
:mod:`memsim.experiment.lifetime` runs the wear engine and assembles
``memsim lifetime``.  This module imports no run orchestration, so
:mod:`memsim.experiment.run` and :mod:`memsim.experiment.lifetime` can both
use it without importing each other.  The method is described in
:mod:`memsim.experiment.lifetime`.
"""
from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from memsim.config import RunConfig
from memsim.engine.device_wear import (
    randomized_start_gap_device_lifetime,
    security_refresh_device_rates,
    security_refresh_round_load,
    start_gap_device_lifetime,
)
from memsim.engine.wear import WearResult, rotate_profile, run_wear
from memsim.experiment.build import build_path
from memsim.metrics.death_law import DeathLaw, device_deaths, even_wear_writes, extrapolate
from memsim.metrics.lifetime import (
    Lifetime,
    ideal_lifetime_writes,
    writes_to_years,
)
from memsim.policy.leveling.base import Leveler
from memsim.policy.write.bits import popcount_rows
from memsim.policy.writepath import WritePath
from memsim.seeds import stream as named_stream
from memsim.tech.endurance import EnduranceModel
from memsim.units import GIB
from memsim.workload.attacks import ATTACKS
from memsim.workload.chunk import WRITE
from memsim.workload.device_traffic import folded_address
from memsim.workload.synthetic import SyntheticSource

METHODS = ("both", "extrapolated", "run_to_failure")
_RATE_PROBE_REQUESTS = 10_000      # timing run that measures the write rate
_PROFILE_LINES = 1024              # lines of the write-scheme profile pass
_PROFILE_WRITES = 1 << 15
_STREAM_CHUNK = 1 << 18
_DISPERSION = 2.0                  # variance allowance of pooled_profile


# ---------------------------------------------------------------- profile


def pooled_profile(programs: np.ndarray, writes: float, groups: list[slice]) -> float | np.ndarray:
    """Per-cell program probability from counts, pooled where spread is noise.

    Within each group of cells (data cells, flag cells) the counts are
    replaced by their mean when their spread is consistent with sampling
    noise (chi-square dispersion test, p > 0.001; common practice), so a
    short sample does not invent a most-worn cell.  The noise allowed is
    twice the binomial variance: a differential write programs a cell when
    its bit changes, and successive changes of one cell are correlated at
    lag one, which inflates the variance of the count by
    ``1 + (1 - 4s) / (1 - 2s)`` with ``s = p (1 - p)`` for independent bits
    of probability ``p`` -- at most 2 (derived here).
    """
    q = np.asarray(programs, dtype=np.float64) / max(writes, 1.0)
    for g in groups:
        part = q[g]
        if part.size == 0:
            continue
        m = part.mean()
        if 0 < m < 1:
            chi2 = ((part - m) ** 2).sum() * writes / (m * (1 - m))
            if stats.chi2.sf(chi2 / _DISPERSION, part.size - 1) <= 1e-3:
                continue
        q[g] = m
    return float(q[0]) if np.all(q == q[0]) else q


def profile_cells(path: WritePath) -> int:
    """Cells per line: data and flag cells; for multi-level cells, bits / bits per cell."""
    if path.cell_profile is not None:
        return int(path.cell_profile.size)
    if path.mlc is not None:
        return path.mlc.cell.cells_per_line(path.line_bits)
    return path.line_bits


def path_profile(path: WritePath) -> float | np.ndarray:
    """Per-cell program probability of one line write in ``path`` (moves included).

    Multi-level cells are counted in pulses per cell (may exceed 1).
    """
    writes = float(path.line_writes.sum())
    if path.cell_profile is None:
        return float(path.line_cells.sum()) / max(writes, 1.0) / profile_cells(path)
    bits = path.line_bits
    return pooled_profile(path.bit_profile(), writes, [slice(0, bits), slice(bits, None)])


def rotated_profile(profile: float | np.ndarray, line_bits: int, leveler: Leveler) -> float | np.ndarray:
    """Average the data cells' profile over the bit offsets a rotating leveler cycles through."""
    steady = getattr(leveler, "steady_offsets", None)
    if steady is None or np.ndim(profile) == 0:
        return profile
    offs = steady()
    q = np.array(profile, dtype=np.float64)
    q[:line_bits] = rotate_profile(q[:line_bits], np.bincount(offs, minlength=line_bits)) / offs.size
    return q


def _pool_write_cells(cfg: RunConfig, sample: WritePath) -> float:
    """Cells an out-of-place write into an initialized line programs, on average.

    Only the bits that differ from the initialized state: the 0 bits of
    all-SET blocks, the 1 bits of all-RESET blocks (the sample pass's stored
    lines give the data's share of 1 bits).
    """
    ones = float(popcount_rows(sample.stored).mean())
    return sample.line_bits - ones if cfg.erase.init_state == "set" else ones


def sample_profile(cfg: RunConfig, rng: np.random.Generator, writes: int) -> WritePath:
    """A short write-scheme pass: ``writes`` uniform writes over a few lines.

    What a write programs depends on the data model and the write scheme,
    not on which line it goes to, so the pass uses few lines, no leveler and
    uniform addresses (fast, and independent of the address pattern).
    """
    n = min(cfg.footprint, _PROFILE_LINES)
    small = cfg.model_copy(update={
        "leveling": cfg.leveling.model_copy(update={"scheme": "none"}),
        "workload": cfg.workload.model_copy(update={"footprint_lines": n}),
    })
    path = build_path(small, rng)
    for lo in range(0, writes, 8192):
        path.apply(rng.integers(0, n, size=min(8192, writes - lo), dtype=np.int64))
    return path


# ---------------------------------------------------------------- scale, caveats, tables


@dataclass(frozen=True)
class DeviceScale:
    """How modeled lines and writes map to the device (see module docstring)."""

    line_scale: float        # device lines per modeled line
    traffic: str             # "spread" or "focused"
    device_lines: float

    @staticmethod
    def of(cfg: RunConfig) -> DeviceScale:
        a = cfg.array
        device = a.capacity_gib * GIB / a.line_bytes
        traffic = "focused" if cfg.workload.pattern in ATTACKS else "spread"
        return DeviceScale(device / a.lines, traffic, device)

    @property
    def copies(self) -> float:
        """Device lines that share one modeled line's wear."""
        return self.line_scale if self.traffic == "spread" else 1.0

    @property
    def time_scale(self) -> float:
        """Device line writes per modeled user write."""
        return self.line_scale if self.traffic == "spread" else 1.0


def leveling_cycle_writes(leveler: Leveler) -> float:
    """User writes for the leveler to move every line once through its cycle
    (uniform traffic); each leveler reports its own (:meth:`Leveler.cycle_writes`)."""
    return leveler.cycle_writes()


def wear_tables(line_wear: np.ndarray, bins: int = 64) -> dict[str, pd.DataFrame]:
    """Histogram (``lo_writes``, ``hi_writes``, ``count`` of lines) and CDF of per-line wear."""
    w = np.asarray(line_wear, dtype=np.float64)
    lo, hi = (float(w.min()), float(w.max())) if w.size else (0.0, 0.0)
    edges = np.linspace(lo, hi if hi > lo else lo + 1.0, bins + 1)
    counts, _ = np.histogram(w, edges)
    hist = pd.DataFrame({"lo_writes": edges[:-1], "hi_writes": edges[1:], "count": counts})
    share = np.linspace(0.0, 1.0, 257)
    q = np.quantile(w, share) if w.size else np.zeros_like(share)
    mean = w.mean() if w.size else 0.0
    cdf = pd.DataFrame({"share_of_lines": share, "wear_writes": q,
                        "wear_over_mean": q / mean if mean > 0 else np.zeros_like(q)})
    return {"wear_histogram": hist, "wear_cdf": cdf}


def _endurance(cfg: RunConfig) -> EnduranceModel:
    c = cfg.cell
    return EnduranceModel(c.endurance_mean, c.endurance_cov, c.endurance_dist)


def _ideal_years(cfg: RunConfig, scale: DeviceScale, rate: float) -> float:
    """Perfectly spread full-line writes over the whole device: endurance x capacity / rate."""
    if rate <= 0:
        return float("inf")
    return writes_to_years(ideal_lifetime_writes(cfg.cell.endurance_mean, cfg.array.lines),
                           line_bytes=cfg.array.line_bytes, write_bytes_per_s=rate,
                           line_scale=scale.line_scale)


def _even_writes(law: DeathLaw, line_wear: np.ndarray, user_writes: float, scale: DeviceScale,
                 capacity_loss: float) -> float:
    """:func:`even_wear_writes` for the device lines the modeled wear falls on."""
    lines = line_wear.size * scale.copies
    needed = int(np.floor(capacity_loss * scale.device_lines)) + 1
    if needed > lines:
        return float("inf")
    return even_wear_writes(law, float(line_wear.mean()) / max(user_writes, 1), lines, needed)


def _years_fields(prefix: str, life: Lifetime, scale: DeviceScale, line_bytes: int,
                  rate: float, ideal_years: float, weight: float,
                  even_writes: float = float("nan")) -> dict[str, Any]:
    def years(w: float) -> float:
        if np.isnan(w):
            return float("nan")
        if not np.isfinite(w) or rate <= 0:
            return float("inf")
        return writes_to_years(w, line_bytes=line_bytes, write_bytes_per_s=rate,
                               line_scale=scale.time_scale)

    y = years(life.end_writes)
    return {f"{prefix}_years": y, f"{prefix}_first_failure_years": years(life.first_failure_writes),
            f"{prefix}_vs_ideal": y / ideal_years if np.isfinite(ideal_years) else float("nan"),
            f"{prefix}_vs_even_wear": (life.end_writes / even_writes
                                       if np.isfinite(even_writes) and np.isfinite(life.end_writes)
                                       else float("nan")),
            f"{prefix}_dead_lines": life.dead_lines * weight}


# ---------------------------------------------------------------- timing runs


_NULL_WHEN_SHORT = ("lifetime_years", "lifetime_first_failure_years", "lifetime_vs_ideal",
                    "lifetime_vs_even_wear")


def _too_short(wear: np.ndarray, cycles: float, max_noise: float) -> str:
    """Why a timing run's wear cannot be extrapolated to a lifetime, or "".

    Extrapolation takes each line's count as its rate.  The lines that end
    life are the most worn ones, and the largest of P counts with mean ``c``
    overshoots its rate by about ``sqrt(2 ln P / c)`` relative (the maximum of
    P Gaussian deviations, common practice); and a leveler whose cycle the
    run did not complete has not spread its writes yet.
    """
    top = float(wear.max())
    noise = float(np.sqrt(2.0 * np.log(max(wear.size, 2)) / top)) if top > 0 else float("inf")
    if noise > max_noise:
        return (f"run too short for a lifetime: the most-worn line got {top:.3g} writes, counting noise "
                f"~{noise:.0%} > lifetime.timing_max_noise {max_noise:g}; use memsim lifetime or more "
                f"requests")
    if np.isfinite(cycles) and cycles < 1:
        return (f"run too short for a lifetime: it spans {cycles:.3g} of the leveler's cycle, so wear "
                f"has not evened out; use memsim lifetime")
    return ""


def lifetime_fields(cfg: RunConfig, path: WritePath, write_bytes_per_s: float) -> dict[str, Any]:
    """Lifetime fields of a timing run, from its write path's wear counters.

    Parameters
    ----------
    cfg:
        The run's config (endurance, ECP entries, capacity loss, device size).
    path:
        The run's write path: writes per physical line (leveler moves
        included) and, for single-level cells, programs per cell.
    write_bytes_per_s:
        The run's user write rate, bytes/s; used unless
        ``lifetime.write_rate_gbps`` is set (> 0) in the config.

    Returns
    -------
    dict
        ``lifetime_years``, ``lifetime_first_failure_years``,
        ``lifetime_ideal_years``, ``lifetime_vs_ideal``,
        ``leveling_write_overhead``, ``wear_max_over_mean``, ``wear_cov``,
        ``write_rate_gbps``, ``write_rate_source`` and the caveat fields
        ``lifetime_traffic``, ``lifetime_window_writes``,
        ``lifetime_window_line_writes_mean``, ``lifetime_window_cycles``.

    Notes
    -----
    The per-line rates are measured over the run only.  They are steady-state
    rates only if the most-worn lines received many writes (their counting
    noise is about ``sqrt(2 ln lines / writes)``) and if the window spans the
    leveler's cycle (``lifetime_window_cycles`` >= 1; Start-Gap over N lines
    needs ``N (N + 1) psi`` writes, far more than a timing run holds for
    realistic N).  Otherwise the lifetime keys are null (None) and
    ``lifetime_note`` says why; :func:`lifetime` runs the wear engine over a
    long window.
    """
    scale = DeviceScale.of(cfg)
    rate, source = ((cfg.lifetime.write_rate_gbps * 1e9, "config")
                    if cfg.lifetime.write_rate_gbps > 0 else (float(write_bytes_per_s), "run"))
    lv = path.leveler
    user = path.user_writes
    # Wear from the ledger (every program, whatever issued it), in write
    # equivalents: a line's cells divided by the cells one write programs.
    profile = rotated_profile(path_profile(path), path.line_bits, lv) if path.line_writes.any() else 1.0
    n_cells = profile_cells(path)
    per_write = float(np.sum(np.broadcast_to(profile, (n_cells,))))
    cells = path.ledger.line_cells()
    wear = cells / per_write if per_write > 0 else np.zeros_like(cells)
    mean = float(wear.mean()) if wear.size else 0.0
    ideal_years = _ideal_years(cfg, scale, rate)
    out: dict[str, Any] = {
        "write_rate_gbps": rate / 1e9,
        "write_rate_source": source,
        "lifetime_traffic": scale.traffic,
        "lifetime_years": float("inf"),
        "lifetime_first_failure_years": float("inf"),
        "lifetime_ideal_years": ideal_years,
        "lifetime_vs_ideal": float("nan"),
        "lifetime_vs_even_wear": float("nan"),
        "leveling_write_overhead": (path.move_writes + path.meta_writes) / max(user, 1),
        "wear_max_over_mean": float(wear.max() / mean) if mean > 0 else 0.0,
        "wear_cov": float(wear.std() / mean) if mean > 0 else 0.0,
        "lifetime_window_writes": user,
        "lifetime_window_line_writes_mean": mean,
        "lifetime_window_cycles": user / leveling_cycle_writes(lv),
    }
    out.update(path.ledger.summary())
    out["lifetime_note"] = None
    if user == 0 or mean == 0:
        for k in _NULL_WHEN_SHORT:
            out[k] = None
        out["lifetime_note"] = "no writes reached the memory in the run: no wear to extrapolate"
        return out
    if cfg.workload.sizing == "device_lines":
        from memsim.experiment.fixed_lifetime import device_lines_fields

        law = DeathLaw(_endurance(cfg), n_cells, cfg.lifetime.ecp_entries, profile)
        out.update(device_lines_fields(cfg, law, rate))
        return out
    note = _too_short(wear, out["lifetime_window_cycles"], cfg.lifetime.timing_max_noise)
    if not note and not lv.scale_free() and scale.traffic == "spread" and scale.copies > 1:
        note = (f"no lifetime from a timing run with {lv.name}: it remaps the modeled lines only, a cycle "
                f"{scale.copies:.0f}x shorter than the device's; use memsim lifetime")
    if note:
        for k in _NULL_WHEN_SHORT:
            out[k] = None
        out["lifetime_note"] = note
        return out
    law = DeathLaw(_endurance(cfg), n_cells, cfg.lifetime.ecp_entries, profile)
    rng = named_stream(cfg.run.seed, "endurance")
    dd = device_deaths(law, rng, wear / user, scale.copies, scale.device_lines, cfg.lifetime.capacity_loss)
    result = WearResult(wear, np.zeros_like(wear), user, path.meta_writes, np.zeros(1))
    life = extrapolate(result, dd)
    even = _even_writes(law, wear, user, scale, cfg.lifetime.capacity_loss)
    f = _years_fields("lifetime", life, scale, cfg.array.line_bytes, rate, ideal_years, dd.weight, even)
    f.pop("lifetime_dead_lines")
    out.update(f)
    return out


# ---------------------------------------------------------------- wear-engine runs


def _start_gap_at_device(cfg: RunConfig, lv: Leveler, law: DeathLaw, chunks: Iterator[np.ndarray],
                         window: int, scale: DeviceScale) -> Lifetime:
    """Estimate (a) for plain Start-Gap evaluated at device size (:mod:`memsim.engine.device_wear`).

    The workload's share of writes per logical line is the synthetic
    pattern's expected share (no sampling noise), or for a trace counted
    over the window; lines outside the footprint get none (the device's
    Start-Gap spans every line of the device).
    """
    rates = _device_rates(cfg, chunks, window)
    dd = device_deaths(law, named_stream(cfg.run.seed, "endurance"), rates, scale.copies, scale.device_lines,
                       cfg.lifetime.capacity_loss)
    needed = dd.needed
    end, first = start_gap_device_lifetime(rates, dd.death, dd.weight, needed, lv.psi, scale.copies)
    if not dd.exact:
        first = start_gap_device_lifetime(rates, dd.first[:, None], 1.0, 1, lv.psi, scale.copies)[1]
    # Device writes -> modeled user writes (each stands for S device writes).
    t = scale.time_scale
    return Lifetime("device_scale", end / t, first / t, int(min(needed, dd.death.size)) if np.isfinite(end) else 0,
                    int(scale.device_lines))


def _device_rates(cfg: RunConfig, chunks: Iterator[np.ndarray], window: int,
                  ) -> np.ndarray:
    """Share of writes of every modeled logical line (expected, or counted for a trace)."""
    shares = None
    if cfg.workload.pattern != "trace":
        wl = cfg.workload.model_copy(update={"arrival": "closed", "requests": 1 << 62})
        shares = SyntheticSource(wl, cfg.footprint, named_stream(cfg.run.seed, "requests")).expected_write_shares()
    if shares is None:
        counts = run_wear(chunks, Leveler(cfg.footprint), max_user_writes=window)
        shares = counts.user_line_writes / max(counts.user_writes, 1)
    rates = np.zeros(cfg.array.lines)
    rates[: cfg.footprint] = shares
    return rates


def _security_refresh_at_device(cfg: RunConfig, lv: Leveler, law: DeathLaw, chunks: Iterator[np.ndarray],
                                window: int, scale: DeviceScale) -> Lifetime:
    """Estimate (a) for Security Refresh at device size (steady state over many key rounds).

    NaN (no estimate) when one round can put more than 1% of the weakest
    line's death wear on one physical line: then the steady state does not
    hold before the first death.
    """
    rates = _device_rates(cfg, chunks, window)
    blocks = min(lv.region_lines, cfg.array.lines)
    steady = security_refresh_device_rates(rates, blocks, lv.interval)
    dd = device_deaths(law, named_stream(cfg.run.seed, "endurance"), steady, scale.copies,
                       scale.device_lines, cfg.lifetime.capacity_loss)
    if security_refresh_round_load(rates, blocks, lv.interval) > 0.01 * float(dd.first.min()):
        nan = float("nan")
        return Lifetime("device_scale", nan, nan, 0, int(scale.device_lines))
    life = extrapolate(WearResult(steady, np.zeros_like(steady), 1, 0, np.zeros(1)), dd)
    life.method = "device_scale"
    return life


def _randomized_start_gap_at_device(cfg: RunConfig, lv: Leveler, law: DeathLaw,
                                    chunks: Iterator[np.ndarray], window: int, scale: DeviceScale,
                                    ) -> Lifetime:
    """Estimate (a) for randomized Start-Gap at device size (an approximation,
    :func:`memsim.engine.device_wear.randomized_start_gap_device_lifetime`)."""
    rates = _device_rates(cfg, chunks, window)
    needed = int(np.floor(cfg.lifetime.capacity_loss * scale.device_lines)) + 1
    psi = lv.inner.psi
    end = randomized_start_gap_device_lifetime(rates, law.cdf, needed, psi, scale.copies)
    first = end if needed == 1 else randomized_start_gap_device_lifetime(rates, law.cdf, 1, psi, scale.copies)
    t = scale.time_scale
    return Lifetime("device_scale", end / t, first / t, needed if np.isfinite(end) else 0,
                    int(scale.device_lines))


def write_stream(cfg: RunConfig, chunk: int = _STREAM_CHUNK) -> Iterator[np.ndarray]:
    """Endless logical line indices of the workload's writes, in order.

    The workload's source without arrival times (they do not change which
    lines are written); stream ``requests`` of ``run.seed``.
    """
    if cfg.workload.pattern == "trace":
        # A trace is finite: the replay (method b) calls this again to loop it.
        from memsim.experiment.build import write_stream as trace_writes

        yield from trace_writes(cfg, endless=True)
        return
    # No hints: they name no new line, and without arrival times they would be
    # held back for ever.
    wl = cfg.workload.model_copy(update={"arrival": "closed", "requests": 1 << 62, "hint_lead_ns": 0.0})
    source = SyntheticSource(wl, cfg.footprint, named_stream(cfg.run.seed, "requests"), chunk,
                             address=folded_address(cfg, cfg.footprint))
    for c in source:
        yield c.line[c.op == WRITE]


