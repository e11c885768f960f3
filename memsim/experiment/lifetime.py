"""Lifetime of a run's memory, in years, at the scale of the whole device.

Two entry points:

* :func:`lifetime_fields` turns the wear counters of a timing run's
  :class:`~memsim.policy.writepath.WritePath` into summary fields;
* :func:`lifetime` runs the wear engine alone over the workload's write
  stream (no timing) and estimates lifetime by extrapolation, by replaying
  the stream to failure with scaled-down endurance, or both.

Device scale.  The ``array.lines`` modeled lines stand for the device's
``capacity_gib * 2**30 / line_bytes`` lines, ``S`` device lines per modeled
line.  How the workload's traffic maps onto the device depends on the
pattern ("traffic" in the summary):

* ``spread`` (ordinary patterns): each modeled line stands for S device
  lines that see the same traffic share and have their own cells, and each
  modeled user write stands for S device line writes.  A modeled line dies
  when the weakest of its S device lines does; that weakest one is drawn
  directly from the distribution of the minimum (and the next ones when
  ``capacity_loss`` needs more deaths), so no per-device-line array is built.
* ``focused`` (``repeated_address``, ``birthday_attack``, ``hot_set``): an
  attacker aims its whole write rate at the lines it hammers, it does not
  spread it over S copies.  The modeled memory is one region of the device
  that receives the entire stream; each modeled line is one device line and
  each modeled write one device write.  The rest of the device is not worn,
  so an end of life that needs more dead lines than the region holds
  (``capacity_loss``) is never reached (``inf``).

Leveling at device scale.  Running a leveler on the modeled lines moves its
registers ``S`` times too fast in device terms (Start-Gap's Start advances one
line per ``(N + 1) psi`` writes), so a hot region a real device cannot move
across in its lifetime would look leveled.  Each leveler therefore
evaluates itself at device size (:meth:`~memsim.policy.leveling.base.Leveler.device_model`,
:mod:`memsim.policy.leveling.device_models`): the workload's share of
writes per modeled line is counted over the window (or is the pattern's
expected share), each modeled line stands for ``S`` adjacent device lines,
and the leveler's model gives the device writes to end of life.  Plain
Start-Gap sums the wear of every device line under the device's own Start
and Gap registers exactly (bisection on the device writes, cost O(lines)
per step, independent of the device size); region Start-Gap does so per
region; randomized Start-Gap takes each line's window sum as normal (null
where the sum is too skewed); Security Refresh is its steady state over many
key rounds; hot/cold swap its mixed steady state with stuck regions (null
in between).  With one modeled line per device line each agrees with a
replay to failure of the real leveler (tests/test_device_wear.py, errors
stated there and in each model).  ``lifetime_leveling_scale`` says which way
a run went: ``device`` (a leveler with a device model, spread traffic) or
``modeled`` (the attack patterns; bit rotation and the block-erase pool,
which do not depend on the line count; randomized region Start-Gap, which
gives no estimate when a modeled line stands for more than one device line;
a model that gives none on a device of one modeled line per device line,
where the modeled leveler is the device).

The ideal lifetime is perfect leveling of full-line writes over the whole
device, ``endurance_mean * capacity / write_rate``; schemes that program
fewer cells per write can exceed it (``lifetime_vs_ideal`` > 1).

Cell model.  Wear is counted in line-write equivalents per physical line
(user writes plus leveler moves); one write programs cell ``b`` with
probability ``q[b]`` (the measured per-cell profile).  A line dies under
ECP-k at its (k+1)-th failed cell (:mod:`memsim.tech.endurance`).

References
----------
M. K. Qureshi et al., "Enhancing lifetime and security of PCM-based main
memory with Start-Gap wear leveling", MICRO 2009 (lifetime normalized to
perfect wear leveling; the repeated address attack).
S. Schechter, G. H. Loh, K. Strauss and D. Burger, "Use ECP, not ECC, for hard
failures in resistive memories", ISCA 2010 (line death under ECP-k).
A. Renyi, "On the theory of order statistics", Acta Math. Acad. Sci. Hung.
4, 1953 (order statistics of uniforms as cumulative sums of exponentials).
"""
from __future__ import annotations

import time
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np

from memsim import __version__
from memsim.config import RunConfig
from memsim.engine.wear import PoolLeveler, run_wear
from memsim.errors import ConfigError
from memsim.experiment.build import build_leveler
from memsim.experiment.progress import track
from memsim.experiment.run import resolve, simulate
from memsim.experiment.wear_life import (
    METHODS,
    RATE_PROBE_REQUESTS,
    DeviceScale,
    device_scale_life,
    endurance_model,
    even_writes,
    ideal_years,
    leveling_cycle_writes,
    wear_tables,
    write_stream,
    years_fields,
)
from memsim.experiment.wear_profile import (
    PROFILE_WRITES,
    path_profile,
    pool_write_cells,
    profile_cells,
    rotated_profile,
    sample_profile,
)
from memsim.metrics.death_law import DeathLaw, capacity_share, device_deaths, extrapolate
from memsim.metrics.lifetime import lifetime_to_failure
from memsim.metrics.result import RunResult
from memsim.policy.erase import BlockPool
from memsim.policy.leveling.base import Leveler
from memsim.policy.write import SCHEMES
from memsim.seeds import stream as named_stream


def _write_rate(cfg: RunConfig, write_rate_gbps: float | None) -> tuple[float, str]:
    """Write rate in bytes/s and where it came from."""
    if write_rate_gbps is not None:
        if not (np.isfinite(write_rate_gbps) and write_rate_gbps > 0):
            raise ConfigError("write rate (--write-rate)", repr(write_rate_gbps), "a rate > 0 GB/s")
        return float(write_rate_gbps) * 1e9, "argument"
    if cfg.lifetime.write_rate_gbps > 0:
        return cfg.lifetime.write_rate_gbps * 1e9, "config"
    n = min(cfg.workload.requests, RATE_PROBE_REQUESTS)
    s = simulate(cfg, workload__requests=n).summary
    if s["writes"] == 0 or s["simulated_ns"] <= 0:
        raise ConfigError("lifetime.write_rate_gbps", "0 and a timing run without writes",
                          "a rate > 0 GB/s, or a workload with writes")
    rate = s["writes"] * cfg.array.line_bytes / s["simulated_ns"] * 1e9
    return rate, f"timing run ({n} requests)"


def lifetime(config: str | Path | Mapping | RunConfig | None = None,
             write_rate_gbps: float | None = None, method: str | None = None,
             **overrides: Any) -> RunResult:
    """Estimate the device's lifetime with the wear engine (no timing).

    Parameters
    ----------
    config:
        A TOML path, dict, RunConfig or None (defaults).
    write_rate_gbps:
        User write rate, GB/s.  Default: ``lifetime.write_rate_gbps``, or if
        that is 0, the rate a short timing run of the same config reaches
        (``write_rate_source`` says which).
    method:
        ``both``, ``extrapolated`` or ``run_to_failure``; default
        ``lifetime.method``.
    **overrides:
        ``section__key=value`` (or ``overrides={"section.key": value}``).

    Returns
    -------
    RunResult
        Summary (see the module docstring and the README), tables
        ``wear_histogram`` and ``wear_cdf`` (per-line wear of the window).

    Notes
    -----
    The measuring window is ``lifetime.window_writes`` user writes
    (0 = ``workload.requests``).  (a) extrapolates each line's wear rate
    over it; (b) replays the stream from the start, with every endurance
    divided by ``lifetime.endurance_scale``, until end of life, and scales
    the time back.  (b) is only as good as its scaled endurance allows: it
    must span many leveler cycles (``lifetime_replay_cycles``), and a line
    must not be able to die between two moves of the leveler, which real
    endurance would never allow (a hammered line under Start-Gap or
    Security Refresh); otherwise (b) understates the lifetime and (a) is
    the figure to use.  (a) in turn needs a window in which the leveler has
    spread the hot lines over every line many times; a ``wear_max_over_mean``
    well above 1 under a leveler means the window is too short and (a)
    understates the lifetime too.  ``lifetime_years`` is (a), or (b) if only (b) ran.
    What a write programs is measured by a short pass of the write scheme
    over the data model (:func:`sample_profile`).
    """
    extra = overrides.pop("overrides", None) or {}
    cfg = resolve(config, {**extra, **overrides})
    method = method or cfg.lifetime.method
    if method not in METHODS:
        raise ConfigError("lifetime.method", repr(method), ", ".join(METHODS))
    if cfg.workload.read_fraction >= 1:
        raise ConfigError("workload.read_fraction", repr(cfg.workload.read_fraction),
                          "less than 1: lifetime needs writes")
    t0 = time.perf_counter()
    rate, source = _write_rate(cfg, write_rate_gbps)
    window = cfg.lifetime.window_writes or cfg.workload.requests
    if cfg.workload.pattern == "trace" and not cfg.lifetime.window_writes:
        from memsim.experiment.build import write_stream as trace_writes

        # One pass over the trace's writes.
        window = sum(int(w.size) for w in trace_writes(cfg, endless=False))
    scale = DeviceScale.of(cfg)
    lt = cfg.lifetime

    def stream() -> Iterator[np.ndarray]:
        return write_stream(cfg)

    def new_leveler() -> Leveler:
        if SCHEMES[cfg.write.scheme].out_of_place:
            e = cfg.erase
            pool = BlockPool(cfg.footprint, e.block_lines, e.spare_fraction, e.init_state, e.victim,
                             e.low_watermark, e.fallback)
            return PoolLeveler(pool, cfg.array.line_bytes * 8)     # bulk init drives every data cell
        return build_leveler(cfg, named_stream(cfg.run.seed, "leveler"))

    sample = sample_profile(cfg, named_stream(cfg.run.seed, "profile"), min(window, PROFILE_WRITES))
    lv = new_leveler()
    profile = rotated_profile(path_profile(sample), sample.line_bits, lv)
    n_cells = profile_cells(sample)
    # The ledger counts cells; the death law's write equivalent is one write of `profile`.
    per_write = float(np.sum(np.broadcast_to(profile, (n_cells,))))
    cells_per_write = pool_write_cells(cfg, sample) if isinstance(lv, PoolLeveler) else per_write
    counting = {"cells_per_write": cells_per_write, "wear_unit": per_write}
    wear = run_wear(track(stream(), window, "writes", "wear window"), lv, max_user_writes=window, **counting)
    law = DeathLaw(endurance_model(cfg), n_cells, lt.ecp_entries, profile)
    dd = device_deaths(law, named_stream(cfg.run.seed, "endurance"), wear.line_wear / wear.user_writes,
                       scale.copies, scale.device_lines, lt.capacity_loss)
    ideal = ideal_years(cfg, scale, rate)
    line_wear = wear.line_wear
    s: dict[str, Any] = {"lifetime_method": method, "write_rate_gbps": rate / 1e9,
                         "write_rate_source": source, "lifetime_traffic": scale.traffic,
                         "lifetime_line_scale": scale.line_scale, "device_lines": scale.device_lines,
                         "lifetime_ideal_years": ideal}
    even = even_writes(law, line_wear, wear.user_writes, scale, lt.capacity_loss)
    args = (scale, cfg.array.line_bytes, rate, ideal, dd.weight, even)
    model = lv.device_model() if scale.traffic == "spread" else None
    device_scale = model is not None and model.modeled_applies(lt.capacity_loss)
    s["lifetime_leveling_scale"] = "device" if device_scale else "modeled"
    if not device_scale and not lv.scale_free() and scale.traffic == "spread" and scale.copies > 1:
        # The leveler ran on the modeled lines: its cycle is far shorter than
        # on the device, so its figure would look better than the device's.
        s.update({k: None for k in ("lifetime_years", "lifetime_first_failure_years", "lifetime_vs_ideal",
                                    "lifetime_vs_even_wear")})
        s["lifetime_note"] = (f"no estimate: {lv.name} is evaluated on the modeled lines only, whose cycle is "
                              f"{scale.copies:.0f}x shorter than the device's; set array.lines to the device's "
                              f"line count ({scale.device_lines:.0f}) for a direct evaluation")
        method = "none"
    if cfg.workload.sizing == "device_lines":
        from memsim.experiment.fixed_lifetime import device_lines_fields

        s.update(device_lines_fields(cfg, lv, law, rate))
        s["lifetime_ideal_years"] = ideal
        method = "none"      # the modeled wear below is kept for its statistics only
    if method in ("both", "extrapolated"):
        note = ""
        if device_scale:
            a, note = device_scale_life(cfg, model, law, stream(), window, scale)
            if np.isnan(a.end_writes) and scale.copies == 1:
                # One modeled line per device line: the modeled leveler is the device.
                a = extrapolate(wear, dd)
                s["lifetime_leveling_scale"] = "modeled"
        else:
            a = extrapolate(wear, dd)
        s.update(years_fields("lifetime", a, *args))
        if np.isnan(a.end_writes):
            for k in ("lifetime_years", "lifetime_first_failure_years", "lifetime_vs_ideal",
                      "lifetime_vs_even_wear"):
                s[k] = None
            s["lifetime_note"] = f"no device-scale estimate for {lv.name}: {note}"
    replay_ok = lv.scale_free() or scale.copies == 1 or scale.traffic != "spread"
    if method in ("both", "run_to_failure") and not replay_ok:
        # The replay runs the leveler on the modeled lines: a cycle far too
        # short in device terms, so its figure would mislead.
        s["lifetime_replay_note"] = (f"no replay: {lv.name} would run on {cfg.array.lines} modeled lines standing "
                                     f"for {scale.device_lines:.0f} device lines; set array.lines to the "
                                     f"device's line count to replay it")
        if method == "run_to_failure":
            s.update({k: None for k in ("lifetime_years", "lifetime_first_failure_years", "lifetime_vs_ideal",
                                        "lifetime_vs_even_wear")})
            s["lifetime_note"] = s["lifetime_replay_note"]
        method = "extrapolated" if method == "both" else "none"
    if method in ("both", "run_to_failure"):
        cl, reachable = capacity_share(dd)
        def replay_stream() -> Iterator[np.ndarray]:
            return track(stream(), None, "writes", "replay to failure")

        b = lifetime_to_failure(replay_stream, new_leveler(), dd.death, endurance_scale=lt.endurance_scale,
                                capacity_loss=cl, **counting)
        if not reachable:
            b.end_writes, b.reached_end = float("inf"), False
        if not dd.exact:           # strata do not hold the weakest copies
            b.first_failure_writes = float("nan")
        rep = years_fields("lifetime_replay", b, *args)
        if method == "run_to_failure":
            s.update({k.replace("lifetime_replay", "lifetime"): v for k, v in rep.items()})
        s.update(rep)
        s["lifetime_replay_reached_end"] = b.reached_end
        s["lifetime_replay_endurance_scale"] = lt.endurance_scale
        # Writes actually replayed, in leveler cycles: a replay that ends
        # within a few cycles sees wear that has not evened out yet.
        s["lifetime_replay_cycles"] = b.end_writes / lt.endurance_scale / leveling_cycle_writes(lv)
        if method == "both":
            s["lifetime_replay_over_extrapolated"] = (
                rep["lifetime_replay_years"] / s["lifetime_years"] if (s["lifetime_years"] or 0) > 0 else None)
    mean = float(line_wear.mean())
    s.update({
        "leveling_write_overhead": wear.leveling_write_overhead,
        "wear_max_over_mean": wear.wear_max_over_mean,
        "wear_cov": wear.wear_cov,
        "lifetime_cells_per_write": per_write,
        **wear.ledger.summary(),
        "lifetime_death_sampling": "exact" if dd.exact else "strata",
        "lifetime_window_writes": wear.user_writes,
        "lifetime_window_line_writes_mean": mean,
        "lifetime_window_cycles": wear.user_writes / leveling_cycle_writes(lv),
    })
    return RunResult(s, wear_tables(line_wear), cfg.model_dump(), cfg.run.seed, __version__,
                     time.perf_counter() - t0)
