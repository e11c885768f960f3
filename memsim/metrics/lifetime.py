"""Memory lifetime from wear: extrapolated, or by running to failure.

Two estimates, in *user writes of the modeled stream*:

(a) :func:`lifetime_extrapolated` takes per-line wear measured over a window
    of the stream, treats it as a steady-state rate per user write and
    extrapolates each line to its death wear (ECP-k: its (k+1)-th cell
    failure, see :func:`memsim.tech.endurance.line_death_wear`).
(b) :func:`lifetime_to_failure` divides every endurance by
    ``endurance_scale``, replays the write stream through a fresh leveler
    until the end-of-life condition, and multiplies the time by the same
    factor.

End of life: the first dead line when ``capacity_loss`` is 0, otherwise the
moment more than ``capacity_loss`` of the device lines are dead.  Dead lines
are retired: their capacity counts as lost, and their later writes are
assumed served by spares outside the model (they are not redistributed over
the surviving modeled lines), in both (a) and (b).

Scale.  The model may hold fewer lines than the device.  With
``line_scale = S`` each modeled line stands for S device lines that see the
same wear but have their own cells (sampled independently), and each
modeled user write stands for S device line writes.  Converting to time:
``seconds = user_writes * S * line_bytes / write_bytes_per_s``.

The ideal lifetime is ``endurance_mean * lines / line_write_rate``: every
line write programs every cell of one line once and writes are spread
perfectly, in modeled user writes ``endurance_mean * n_logical``.

References
----------
M. K. Qureshi et al., "Enhancing lifetime and security of PCM-based main
memory with Start-Gap wear leveling", MICRO 2009 (lifetime normalized to
perfect wear leveling).
S. Schechter et al., "Use ECP, not ECC, for hard failures in resistive
memories", ISCA 2010 (line death at the (k+1)-th cell failure).
"""
from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass

import numpy as np

from memsim.engine.wear import WearCounter, WearResult
from memsim.errors import ConfigError
from memsim.policy.leveling.base import Leveler
from memsim.units import S_PER_YEAR


@dataclass
class Lifetime:
    """End of life of one run.

    Attributes
    ----------
    method:
        ``"extrapolated"`` or ``"run_to_failure"``.
    end_writes, first_failure_writes:
        User writes (modeled stream, full endurance) until end of life and
        until the first dead line; ``inf`` if never.
    dead_lines:
        Device lines dead at end of life.
    device_lines:
        Modeled lines x line scale.
    reached_end:
        False if a run to failure stopped at its write cap first (then the
        times are lower bounds or ``inf``).
    endurance_scale:
        Factor endurance was divided by for a run to failure (1 otherwise).
    """

    method: str
    end_writes: float
    first_failure_writes: float
    dead_lines: int
    device_lines: int
    reached_end: bool = True
    endurance_scale: float = 1.0


def _deaths_needed(capacity_loss: float, device_lines: int) -> int:
    if not 0 <= capacity_loss < 1:
        raise ConfigError("lifetime.capacity_loss", repr(capacity_loss),
                          "a fraction in [0, 1)")
    return int(np.floor(capacity_loss * device_lines)) + 1


def ideal_lifetime_writes(endurance_mean: float, n_lines: int) -> float:
    """Perfectly spread full-line writes: ``endurance_mean * n_lines`` user writes."""
    return float(endurance_mean) * int(n_lines)


def writes_to_years(user_writes: float, *, line_bytes: int, write_bytes_per_s: float,
                    line_scale: int = 1) -> float:
    """Years the device takes to receive ``user_writes`` modeled user writes."""
    if not write_bytes_per_s > 0:
        raise ConfigError("lifetime.write_bytes_per_s", repr(write_bytes_per_s),
                          "a number > 0")
    return float(user_writes) * line_scale * line_bytes / write_bytes_per_s / S_PER_YEAR


def lifetime_extrapolated(wear: WearResult, death_wear: np.ndarray, *,
                          capacity_loss: float = 0.0) -> Lifetime:
    """Estimate (a): extrapolate steady-state per-line wear rates.

    Parameters
    ----------
    wear:
        Wear over a window of the stream (should span many leveling cycles,
        e.g. several Start-Gap rotations of ``N (N + 1) psi`` writes, and
        enough writes per line that sampling noise is small).
    death_wear:
        ``(n_physical, line_scale)`` write equivalents at which each device
        line dies (:func:`memsim.tech.endurance.line_death_wear`).
    capacity_loss:
        Fraction of device lines that may die before end of life.
    """
    rate = wear.line_wear / max(wear.user_writes, 1)
    death_wear = np.asarray(death_wear, dtype=np.float64)
    if death_wear.shape[0] != rate.size:
        raise ValueError(f"death_wear has {death_wear.shape[0]} rows, wear {rate.size} lines")
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(rate[:, None] > 0, death_wear / rate[:, None], np.inf)
    flat = t.ravel()
    m = _deaths_needed(capacity_loss, flat.size)
    end = float(np.partition(flat, m - 1)[m - 1]) if m <= flat.size else np.inf
    return Lifetime("extrapolated", end, float(flat.min()),
                    int(np.count_nonzero(flat <= end)) if np.isfinite(end) else 0,
                    flat.size)


def lifetime_to_failure(stream: Callable[[], Iterable[np.ndarray]], leveler: Leveler,
                        death_wear: np.ndarray, *, endurance_scale: float = 1.0,
                        capacity_loss: float = 0.0, move_weight: float = 1.0,
                        max_user_writes: float | None = None, cells_per_write: float = 1.0,
                        wear_unit: float = 1.0) -> Lifetime:
    """Estimate (b): replay the stream until end of life with scaled endurance.

    Parameters
    ----------
    stream:
        Called to get the write stream (chunks of logical lines); called
        again each time it is exhausted, so it is replayed.
    leveler:
        A fresh leveler (same construction and seed as for estimate (a)).
    death_wear:
        Full-endurance death wear per device line, as for (a).
    endurance_scale:
        Every endurance is divided by this; reported times are multiplied
        back, so they are comparable with (a).
    capacity_loss, move_weight:
        As for (a) and :class:`memsim.engine.wear.WearCounter`.
    cells_per_write, wear_unit:
        Cells a write or move programs, and cells per write equivalent of
        ``death_wear`` (:class:`memsim.engine.wear.WearCounter`).
    max_user_writes:
        Stop here if not dead yet (default: 4 x the writes the memory could
        absorb with all of it worn evenly to death).

    Notes
    -----
    A line's death time inside a chunk is interpolated linearly in its wear
    over the chunk, so the result does not depend on the chunk size much.
    """
    if not endurance_scale > 0:
        raise ConfigError("lifetime.endurance_scale", repr(endurance_scale), "a number > 0")
    theta = np.sort(np.asarray(death_wear, dtype=np.float64) / endurance_scale, axis=1)
    P, S = theta.shape
    if P != leveler.n_physical:
        raise ValueError(f"death_wear has {P} rows, leveler {leveler.n_physical} lines")
    m = _deaths_needed(capacity_loss, P * S)
    if max_user_writes is None:
        last = theta[:, -1]
        max_user_writes = 4.0 * float(last[np.isfinite(last)].sum()) + 1.0
    wc = WearCounter(leveler, line_bits=1, move_weight=move_weight,
                     cells_per_write=cells_per_write, wear_unit=wear_unit)
    dead = np.zeros(P, dtype=np.int64)
    nxt = theta[:, 0].copy()
    cols = np.arange(S)
    times: list[np.ndarray] = []
    n_dead = 0
    t0 = 0
    while n_dead < m and t0 < max_user_writes:
        fed = 0
        for chunk in stream():
            chunk = np.asarray(chunk, dtype=np.int64)
            if t0 + chunk.size > max_user_writes:
                chunk = chunk[: max(0, int(np.ceil(max_user_writes - t0)))]
            before = wc.wear()
            wc.feed(chunk)
            after = wc.wear()
            cand = np.flatnonzero(after >= nxt)
            if cand.size:
                th = theta[cand]
                wb, wa = before[cand, None], after[cand, None]
                newly = (th <= wa) & (cols >= dead[cand, None])
                frac = np.clip((th - wb) / np.maximum(wa - wb, 1e-300), 0.0, 1.0)
                times.append(t0 + chunk.size * frac[newly])
                dead[cand] = np.count_nonzero(th <= wa, axis=1)
                n_dead += int(np.count_nonzero(newly))
                nxt[cand] = np.where(dead[cand] < S, theta[cand, np.minimum(dead[cand], S - 1)],
                                     np.inf)
            t0 += chunk.size
            fed += chunk.size
            if n_dead >= m or t0 >= max_user_writes:
                break
        if fed == 0:
            raise ValueError("the write stream is empty")
    all_t = np.sort(np.concatenate(times)) if times else np.empty(0)
    reached = n_dead >= m
    end = float(all_t[m - 1]) * endurance_scale if reached else np.inf
    first = float(all_t[0]) * endurance_scale if all_t.size else np.inf
    return Lifetime("run_to_failure", end, first, int(min(n_dead, m)) if reached else n_dead,
                    P * S, reached, float(endurance_scale))
