"""Each register-based leveler's device-scale evaluation (:class:`DeviceModel` strategies).

The arithmetic is in :mod:`memsim.policy.leveling.device_wear` (traffic as
modeled lines of ``S`` device lines each) and
:mod:`memsim.policy.leveling.fixed_wear` (traffic as runs of device lines);
these classes bind it to a leveler's parameters.  A leveler returns one from
:meth:`~memsim.policy.leveling.base.Leveler.device_model`; lifetime never
asks which leveler it has.
"""
from __future__ import annotations

import numpy as np

from memsim.policy.leveling.device_model import (
    DeviceLife,
    DeviceLinesInput,
    DeviceModel,
    ModeledInput,
    modeled_as_runs,
)
from memsim.policy.leveling.device_wear import (
    randomized_start_gap_device_lifetime,
    region_start_gap_device_lifetime,
    security_refresh_device_rates,
    security_refresh_round_load,
    start_gap_device_lifetime,
)
from memsim.policy.leveling.fixed_wear import (
    none_writes,
    randomized_start_gap_writes,
    region_start_gap_writes,
    security_refresh_writes,
    start_gap_writes,
)
from memsim.policy.leveling.hot_cold_device import hot_cold_swap_writes

_MODELED_NOTE = ("its device-scale approximation does not hold for this traffic "
                 "(see memsim.policy.leveling.device_wear)")
_LINES_NOTE = ("its device-scale approximation does not hold for this traffic "
               "(see memsim.policy.leveling.fixed_wear)")


def _both(end: float, first_of: callable, needed: int) -> DeviceLife:
    """End of life and first failure from one solver (``first_of(k)``: writes to ``k`` dead lines)."""
    if np.isnan(end):
        return DeviceLife.none(_LINES_NOTE)
    first = end if needed == 1 else first_of(1)
    return DeviceLife(end, first, needed if np.isfinite(end) else 0)


class NoLevelingDevice(DeviceModel):
    """Every line wears at its own share for ever (no remapping to evaluate)."""

    def modeled(self, inp: ModeledInput) -> DeviceLife:
        return inp.extrapolate(inp.rates, inp.deaths(inp.rates, inp.capacity_loss))

    def device_lines(self, inp: DeviceLinesInput) -> DeviceLife:
        f = lambda k: none_writes(inp.traffic, inp.cdf, k)  # noqa: E731
        return _both(f(inp.needed), f, inp.needed)


class StartGapDevice(DeviceModel):
    """Plain Start-Gap over every line of the device (Qureshi et al., MICRO 2009): exact register arithmetic."""

    def __init__(self, psi: int) -> None:
        self.psi = int(psi)
        self.overhead = 1.0 / self.psi

    def modeled(self, inp: ModeledInput) -> DeviceLife:
        dd = inp.deaths(inp.rates, inp.capacity_loss)
        end, first = start_gap_device_lifetime(inp.rates, dd.death, dd.weight, dd.needed, self.psi, inp.copies)
        if not dd.exact:
            first = start_gap_device_lifetime(inp.rates, dd.first[:, None], 1.0, 1, self.psi, inp.copies)[1]
        return DeviceLife(end, first, int(min(dd.needed, dd.death.size)) if np.isfinite(end) else 0)

    def device_lines(self, inp: DeviceLinesInput) -> DeviceLife:
        if not inp.traffic.layout_known:
            return DeviceLife.none("the places of the Zipf ranks are not kept (scattered layout) and "
                                   "Start-Gap depends on them")
        f = lambda k: start_gap_writes(inp.traffic, inp.cdf, k, self.psi)  # noqa: E731
        return _both(f(inp.needed), f, inp.needed)


class RandomizedStartGapDevice(DeviceModel):
    """Start-Gap behind a static randomizer: a normal (or hypergeometric) approximation of each line's window."""

    def __init__(self, psi: int) -> None:
        self.psi = int(psi)
        self.overhead = 1.0 / self.psi

    def modeled(self, inp: ModeledInput) -> DeviceLife:
        def f(k: int) -> float:
            return randomized_start_gap_device_lifetime(inp.rates, inp.cdf, k, self.psi, inp.copies)

        end = f(inp.needed)
        if np.isnan(end):
            return DeviceLife.none(_MODELED_NOTE)
        first = end if inp.needed == 1 else f(1)
        return DeviceLife(end, first, inp.needed if np.isfinite(end) else 0)

    def device_lines(self, inp: DeviceLinesInput) -> DeviceLife:
        f = lambda k: randomized_start_gap_writes(inp.traffic, inp.cdf, k, self.psi)  # noqa: E731
        return _both(f(inp.needed), f, inp.needed)


class RegionStartGapDevice(DeviceModel):
    """Region Start-Gap without a randomizer: each region its own Start-Gap (first death only)."""

    def __init__(self, regions: int, psi: int) -> None:
        self.regions, self.psi = int(regions), int(psi)
        self.overhead = 1.0 / self.psi

    def modeled_applies(self, capacity_loss: float) -> bool:
        return capacity_loss == 0

    def modeled(self, inp: ModeledInput) -> DeviceLife:
        n = inp.rates.size
        q, rem = divmod(n, self.regions)          # the device's regions span every line
        sizes = np.where(np.arange(self.regions) < rem, q + 1, q)
        first = inp.deaths(inp.rates, 0.0).first
        w = region_start_gap_device_lifetime(inp.rates, sizes, first[:, None], self.psi, inp.copies)
        return DeviceLife(w, w, 1 if np.isfinite(w) else 0)

    def device_lines(self, inp: DeviceLinesInput) -> DeviceLife:
        if not inp.traffic.layout_known:
            return DeviceLife.none("the places of the Zipf ranks are not kept (scattered layout) and "
                                   "Start-Gap depends on them")
        f = lambda k: region_start_gap_writes(inp.traffic, inp.cdf, k, self.regions, self.psi)  # noqa: E731
        return _both(f(inp.needed), f, inp.needed)


class SecurityRefreshDevice(DeviceModel):
    """Security Refresh (Seong et al., ISCA 2010): steady state over many key rounds.

    ``region_lines`` is in device lines (None: one region over the device).
    """

    def __init__(self, region_lines: int | None, interval: int) -> None:
        self.region_lines = region_lines
        self.interval = int(interval)
        self.overhead = 1.0 / self.interval

    def _blocks(self, inp: ModeledInput) -> int:
        n = inp.rates.size
        if self.region_lines is None:
            return n
        # A region of R device lines spans R / S modeled lines; one narrower
        # than a modeled line sees that line's even traffic, like a region of one.
        return int(min(n, max(1, round(self.region_lines / inp.copies))))

    def modeled(self, inp: ModeledInput) -> DeviceLife:
        blocks = self._blocks(inp)
        steady = security_refresh_device_rates(inp.rates, blocks, self.interval)
        dd = inp.deaths(steady, inp.capacity_loss)
        if security_refresh_round_load(inp.rates, blocks, self.interval) > 0.01 * float(dd.first.min()):
            return DeviceLife.none(_MODELED_NOTE)
        return inp.extrapolate(steady, dd)

    def device_lines(self, inp: DeviceLinesInput) -> DeviceLife:
        d = inp.traffic.lines
        r = 1 << (d - 1).bit_length() if self.region_lines is None else int(self.region_lines)

        def f(k: int) -> float:
            return security_refresh_writes(inp.traffic, inp.cdf, k, self.interval, inp.weak_death, r)

        return _both(f(inp.needed), f, inp.needed)


class HotColdSwapDevice(DeviceModel):
    """Hot/cold region swapping: mixed steady state with stuck regions
    (:mod:`memsim.policy.leveling.hot_cold_device`); ``region_lines`` and
    ``period`` in device lines and device user writes."""

    def __init__(self, region_lines: int, period: int) -> None:
        self.region_lines, self.period = int(region_lines), int(period)
        self.overhead = 2.0 * self.region_lines / self.period

    def _life(self, bounds: np.ndarray, rate: np.ndarray, cdf, needed: int, weak: float) -> DeviceLife:
        def f(k: int) -> tuple[float, str]:
            return hot_cold_swap_writes(bounds, rate, cdf, k, self.region_lines, self.period, weak)

        end, note = f(needed)
        if np.isnan(end):
            return DeviceLife.none(note)
        first = end if needed == 1 else f(1)[0]
        return DeviceLife(end, first, needed if np.isfinite(end) else 0)

    def modeled(self, inp: ModeledInput) -> DeviceLife:
        bounds, rate = modeled_as_runs(inp.rates, inp.copies)
        return self._life(bounds, rate, inp.cdf, inp.needed, inp.weak_death)

    def device_lines(self, inp: DeviceLinesInput) -> DeviceLife:
        t = inp.traffic
        return self._life(t.bounds, t.rate, inp.cdf, inp.needed, inp.weak_death)
