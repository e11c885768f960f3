"""One interface for the cell technologies a run can model.

Every technology is described to the rest of memsim by the same few facts,
so the write path, drift and refresh code never ask which technology it is:

``verify_writes``
    Every write is a pulse followed by a verify read, repeated until the cell
    verifies (or the iteration cap); the program-and-verify machinery of
    :mod:`memsim.tech.mlc_write` then gives the per-write service time,
    energy and current.  Multi-level PCM always verifies.
``drifts`` / ``crystallizes``
    Whether the resistance-drift law and the crystallization of the amorphous
    state (:mod:`memsim.tech.retention`) apply.
``iterations(cfg)``
    Uncapped mean iterations per level (the success probability of one
    attempt is its inverse under the geometric model).

Technologies:

``pcm``
    Phase-change memory: SET/RESET pulses, drift, crystallization.
``reram``
    Filamentary resistive RAM: asymmetric SET (forming the filament: short,
    low current) and RESET (rupturing it: longer, higher current) and a wide
    cell-to-cell spread of resistance, handled by write-verify; no drift law,
    no crystallization (its own retention loss is not modeled).
``stt_mram``
    Spin-transfer-torque magnetic RAM: switching is stochastic.  In the
    thermally activated regime the probability that a pulse of width ``t`` at
    current ``I`` below the critical current ``Ic0`` fails to switch is
    (Koch, Katine, Sun, Phys. Rev. Lett. 92, 088302, 2004; from memory)::

        WER(t, I) = exp(-(t / tau0) exp(-Delta (1 - I / Ic0)))

    with thermal stability factor ``Delta`` and attempt time ``tau0``.  Writes
    are verified and retried, each attempt independent, so iterations are
    geometric with success probability ``1 - WER``.  No drift, no
    crystallization.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from memsim.errors import ConfigError


def stt_write_error_rate(pulse_ns: np.ndarray | float, current_ua: np.ndarray | float, delta: float,
                         ic0_ua: float, attempt_ns: float = 1.0) -> np.ndarray:
    """Probability that one STT-MRAM write pulse fails to switch the cell
    (thermally activated regime, ``I < Ic0``; see the module docstring)."""
    i = np.asarray(current_ua, dtype=np.float64) / ic0_ua
    if np.any(i >= 1.0) or np.any(i <= 0.0):
        raise ConfigError("cell.stt_ic0_ua", f"write current / Ic0 = {np.max(i):.3g}",
                          "a write current between 0 and stt_ic0_ua (thermally activated regime)")
    rate = np.exp(-delta * (1.0 - i)) / attempt_ns
    return np.exp(-np.asarray(pulse_ns, dtype=np.float64) * rate)


def stt_pulse_for_error_rate(target: float, current_ua: float, delta: float, ic0_ua: float,
                             attempt_ns: float = 1.0) -> float:
    """Pulse width, ns, at which one STT-MRAM write attempt fails with probability ``target``:
    the inverse of :func:`stt_write_error_rate` in the pulse width."""
    if not 0.0 < target < 1.0:
        raise ValueError(f"target error rate {target} not in (0, 1)")
    i = current_ua / ic0_ua
    return -math.log(target) * attempt_ns * math.exp(delta * (1.0 - i))


def stt_error_table(cfg, pulses_ns: np.ndarray | None = None):
    """Write error rate of one attempt against pulse width, both write directions.

    Columns ``pulse_ns``, ``wer_set_side``, ``wer_reset_side`` (one attempt
    fails) and ``attempts_set_side``, ``attempts_reset_side`` (mean attempts
    of a verified write, geometric: 1 / (1 - WER)).  The default pulses span
    a decade either side of the preset's pulse.
    """
    import pandas as pd

    c = cfg.cell
    if pulses_ns is None:
        mid = max(c.set_ns, c.reset_ns)
        pulses_ns = np.logspace(np.log10(mid / 10), np.log10(mid * 10), 21)
    pulses = np.asarray(pulses_ns, dtype=np.float64)
    cols: dict[str, np.ndarray] = {"pulse_ns": pulses}
    for side, cur in (("set_side", c.set_ua), ("reset_side", c.reset_ua)):
        wer = stt_write_error_rate(pulses, cur, c.stt_delta, c.stt_ic0_ua, c.stt_attempt_ns)
        cols[f"wer_{side}"] = wer
        cols[f"attempts_{side}"] = 1.0 / -np.expm1(np.log(np.maximum(wer, 1e-300)))
    return pd.DataFrame(cols)


@dataclass(frozen=True)
class Technology:
    name: str
    verify_writes: bool
    drifts: bool
    crystallizes: bool

    def iterations(self, cfg) -> float | list[float]:
        """Uncapped mean program-and-verify iterations per level."""
        return cfg.cell.pv_mean_iterations


@dataclass(frozen=True)
class SttMram(Technology):
    def write_error_rates(self, cfg) -> list[float]:
        """Failure probability of one attempt per level (level 0: the SET-side
        pulse, level 1: the RESET-side pulse)."""
        c = cfg.cell
        wer = stt_write_error_rate([c.set_ns, c.reset_ns], [c.set_ua, c.reset_ua], c.stt_delta,
                                   c.stt_ic0_ua, c.stt_attempt_ns)
        return [float(w) for w in wer]

    def iterations(self, cfg) -> list[float]:
        # Geometric attempts: mean 1 / (1 - WER).
        return [1.0 / -math.expm1(math.log(w)) if w > 0 else 1.0 for w in self.write_error_rates(cfg)]


TECHNOLOGIES: dict[str, Technology] = {
    "pcm": Technology("pcm", verify_writes=False, drifts=True, crystallizes=True),
    "reram": Technology("reram", verify_writes=True, drifts=False, crystallizes=False),
    "stt_mram": SttMram("stt_mram", verify_writes=True, drifts=False, crystallizes=False),
}


def technology(cfg) -> Technology:
    return TECHNOLOGIES[cfg.cell.technology]


def summary_fields(cfg) -> dict[str, float]:
    """Technology keys of a run summary: the STT-MRAM write error rate per attempt."""
    tech = technology(cfg)
    if isinstance(tech, SttMram):
        wer = tech.write_error_rates(cfg)
        return {"write_error_rate_set_side": wer[0], "write_error_rate_reset_side": wer[1]}
    return {}


def uses_verify(cfg) -> bool:
    """Writes go through program-and-verify: multi-level or tri-level cells, or a technology that verifies."""
    return cfg.cell.bits_per_cell > 1 or cfg.cell.tri_level or technology(cfg).verify_writes
