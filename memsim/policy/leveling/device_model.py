"""Contract of a leveler's device-scale evaluation (for lifetime).

A leveler run on the ``array.lines`` modeled lines moves its registers far
too fast in device terms, so lifetime asks each leveler for a
:class:`DeviceModel` (:meth:`memsim.policy.leveling.base.Leveler.device_model`):
arithmetic that evaluates the scheme on the device's own lines.  Two
layouts of the traffic reach it:

* :class:`ModeledInput`: shares of the modeled lines, each standing for
  ``copies`` adjacent device lines (ordinary patterns, spread traffic);
* :class:`DeviceLinesInput`: runs of device lines with one share each
  (``workload.sizing = "device_lines"``).

Both answers are :class:`DeviceLife` in *device* writes; ``end_writes`` NaN
means no estimate, and ``note`` says why.  The inputs carry plain arrays and
callables only (the death law and the death sampling live in an outer
layer), so this module imports nothing but numpy.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

DeathCdf = Callable[[np.ndarray], np.ndarray]


@dataclass(frozen=True)
class DeviceLife:
    """Device writes to end of life and to the first dead line (NaN: no estimate)."""

    end_writes: float
    first_writes: float
    dead_lines: int = 0
    note: str = ""

    @staticmethod
    def none(note: str) -> DeviceLife:
        nan = float("nan")
        return DeviceLife(nan, nan, 0, note)


@dataclass(frozen=True)
class ModeledInput:
    """Traffic as shares of the modeled lines, each ``copies`` adjacent device lines.

    ``deaths(rates, capacity_loss)`` samples the device lines' death wear
    grouped by modeled line (:func:`memsim.metrics.death_law.device_deaths`:
    ``death``, ``weight``, ``needed``, ``exact``, ``first``);
    ``extrapolate(rates, deaths)`` gives the :class:`DeviceLife` of lines
    wearing at the steady ``rates`` (line-write equivalents per modeled user
    write).  ``cdf`` is the line death law, ``weak_death`` its ``1 / D``
    quantile (about the weakest device line), for the guards of the
    steady-state approximations.
    """

    rates: np.ndarray
    copies: float
    device_lines: float
    capacity_loss: float
    cdf: DeathCdf
    deaths: Callable[[np.ndarray, float], Any]
    extrapolate: Callable[[np.ndarray, Any], DeviceLife]
    weak_death: float

    @property
    def needed(self) -> int:
        """Dead device lines at end of life."""
        return int(np.floor(self.capacity_loss * self.device_lines)) + 1


@dataclass(frozen=True)
class DeviceLinesInput:
    """Traffic as runs of device lines (:class:`memsim.workload.device_traffic.DeviceTraffic`).

    ``weak_death`` is the death wear of about the weakest of the device's
    lines (the law's ``1 / D`` quantile), for the guards of the steady-state
    approximations.
    """

    traffic: Any
    cdf: DeathCdf
    needed: int
    weak_death: float


class DeviceModel:
    """A leveler evaluated at device size.  Subclasses override the two evaluations.

    ``overhead`` is the scheme's own line writes per user write at device
    size (gap moves, swaps), which the even-wear reference includes.
    """

    overhead: float = 0.0

    def modeled_applies(self, capacity_loss: float) -> bool:
        """Whether :meth:`modeled` evaluates this configuration (else the modeled leveler is used)."""
        return True

    def modeled(self, inp: ModeledInput) -> DeviceLife:
        return DeviceLife.none("not evaluated at device scale for modeled-line traffic")

    def device_lines(self, inp: DeviceLinesInput) -> DeviceLife:
        return DeviceLife.none("not evaluated for workloads sized in device lines")


def modeled_as_runs(rates: np.ndarray, copies: float) -> tuple[np.ndarray, np.ndarray]:
    """Runs of device lines (``bounds``, per-line ``rate``) of modeled shares, ``copies`` lines each."""
    r = np.asarray(rates, dtype=np.float64)
    bounds = np.round(np.arange(r.size + 1) * float(copies)).astype(np.int64)
    return bounds, r / np.diff(bounds)      # copies >= 1: every run holds a line
