"""Write traffic of a synthetic workload whose sizes are fixed in device lines.

With ``workload.sizing = "device_lines"`` the pattern is laid out on the
device's own lines (``array.capacity_gib * 2**30 / array.line_bytes`` of
them), not on the modeled ones: a hot region of ``workload.hot_lines``
lines is that many device lines whatever ``array.lines`` is, a Zipf rank
``k`` is one device line.  The device has far too many lines to hold one
rate each, so the traffic is a list of runs of adjacent device lines that
share one rate (piecewise constant over the device):

* ``uniform``: one run, every line ``1 / D``;
* ``hotspot``: ``hot_lines`` hot lines sharing ``hot_share`` of the writes,
  the rest sharing the remainder; contiguous = one run at a place drawn
  from the stream's seed, scattered = that many single-line runs at
  distinct places drawn from it (at most ``_MAX_SCATTERED`` lines);
* ``zipf``: rank ``k`` has share ``k^-s / H``; the first ``_ZIPF_EXACT``
  ranks are single-line runs, the rest are grouped in runs whose rates
  differ by at most ``_ZIPF_STEP`` relative (each run holds its mean; the
  group sums are midpoint-rule integrals of ``x^-s``, whose relative error
  is below ``s (s + 1) / (24 k^2)`` for ranks beyond ``k``, derived here).
  Contiguous: rank ``k`` on device line ``k - 1``.  Scattered: the ranks'
  places are random and not kept (``layout_known`` is false), which only a
  scheme that does not depend on line adjacency can use.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from memsim.seeds import stream

_ZIPF_EXACT = 1024
_ZIPF_STEP = 0.01
_MAX_SCATTERED = 1 << 16
DEVICE_SIZED = ("uniform", "zipf", "hotspot")


@dataclass(frozen=True)
class DeviceTraffic:
    """Runs of device lines with one write share per line each.

    ``bounds`` (``m + 1`` increasing device line indices from 0 to ``D``)
    delimit the runs, ``rate[j]`` is the share of device writes of every
    line of run ``j`` (``sum(rate * diff(bounds)) == 1``).
    """

    bounds: np.ndarray
    rate: np.ndarray
    layout_known: bool

    @property
    def lines(self) -> int:
        return int(self.bounds[-1])

    @property
    def counts(self) -> np.ndarray:
        return np.diff(self.bounds).astype(np.float64)

    def cumulative(self, x: np.ndarray) -> np.ndarray:
        """Share of writes of the device lines below ``x`` (real, wraps around the device)."""
        x = np.asarray(x, dtype=np.float64)
        d = float(self.lines)
        wraps = np.floor(x / d)
        xm = x - wraps * d
        b = self.bounds.astype(np.float64)
        prefix = np.concatenate([[0.0], np.cumsum(self.rate * self.counts)])
        j = np.clip(np.searchsorted(b, xm, side="right") - 1, 0, self.rate.size - 1)
        return wraps * prefix[-1] + prefix[j] + (xm - b[j]) * self.rate[j]

    def sample(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """``n`` device line indices drawn with the runs' shares (uniform within a run)."""
        share = self.rate * self.counts
        j = rng.choice(share.size, size=n, p=share / share.sum())
        lo = self.bounds[j]
        return lo + np.floor(rng.random(n) * (self.bounds[j + 1] - lo)).astype(np.int64)


def runs_of(starts: np.ndarray, lengths: np.ndarray, rates: np.ndarray, d: int,
          fill: float) -> tuple[np.ndarray, np.ndarray]:
    """Runs from sorted, disjoint (start, length, rate) pieces; gaps get ``fill``."""
    bounds, rate, at = [0], [], 0
    for s, n, r in zip(starts.tolist(), lengths.tolist(), rates.tolist()):
        if s > at:
            bounds.append(s)
            rate.append(fill)
        bounds.append(s + n)
        rate.append(r)
        at = s + n
    if at < d:
        bounds.append(d)
        rate.append(fill)
    return np.asarray(bounds, dtype=np.int64), np.asarray(rate, dtype=np.float64)


def zipf_runs(d: int, s: float) -> tuple[np.ndarray, np.ndarray]:
    """Runs of ranks 1..d (rank k on line k - 1) and their shares."""
    exact = min(d, _ZIPF_EXACT)
    bounds = list(range(exact + 1))
    k = exact
    while k < d:
        # Rates within a run differ by at most _ZIPF_STEP: (hi / lo)^s <= 1 + step.
        nxt = min(d, max(k + 1, int(np.floor(k * (1.0 + _ZIPF_STEP) ** (1.0 / s)))))
        bounds.append(nxt)
        k = nxt
    b = np.asarray(bounds, dtype=np.int64)
    sums = np.empty(b.size - 1)
    ranks = np.arange(1, exact + 1, dtype=np.float64)
    sums[:exact] = ranks**-s
    lo, hi = b[exact:-1] + 0.5, b[exact + 1:] + 0.5      # ranks lo+0.5 .. hi+0.5 (rank = line + 1)
    if s == 1.0:
        sums[exact:] = np.log(hi / lo)
    else:
        sums[exact:] = (hi ** (1 - s) - lo ** (1 - s)) / (1 - s)
    sums /= sums.sum()
    return b, sums / np.diff(b)


def device_traffic(wl, device_lines: int, rng: np.random.Generator) -> DeviceTraffic:
    """The workload's write shares over the device's lines (``wl`` a workload section)."""
    d = int(device_lines)
    if wl.pattern == "uniform":
        return DeviceTraffic(np.array([0, d], dtype=np.int64), np.array([1.0 / d]), True)
    if wl.pattern == "zipf":
        b, r = zipf_runs(d, wl.zipf_exponent)
        return DeviceTraffic(b, r, wl.hot_layout == "contiguous")
    h = int(wl.hot_lines)
    hot, cold = wl.hot_share / h, (1.0 - wl.hot_share) / (d - h)
    if wl.hot_layout == "contiguous":
        lo = int(rng.integers(0, d - h + 1))
        b, r = runs_of(np.array([lo]), np.array([h]), np.array([hot]), d, cold)
        return DeviceTraffic(b, r, True)
    if h > _MAX_SCATTERED:
        # Places not kept: only the multiset of rates.
        return DeviceTraffic(np.array([0, h, d], dtype=np.int64), np.array([hot, cold]), False)
    places = np.sort(rng.choice(d, size=h, replace=False)) if d <= 1 << 24 else _distinct(rng, d, h)
    b, r = runs_of(places, np.ones(h, dtype=np.int64), np.full(h, hot), d, cold)
    return DeviceTraffic(b, r, True)


def _distinct(rng: np.random.Generator, d: int, h: int) -> np.ndarray:
    out = np.unique(rng.integers(0, d, size=h))
    while out.size < h:
        out = np.unique(np.concatenate([out, rng.integers(0, d, size=h - out.size)]))
    return out


def trace_traffic(lines: np.ndarray, d: int) -> DeviceTraffic:
    """Write shares of a trace's device lines (``lines``: the device line of every write)."""
    q, n = np.unique(np.asarray(lines, dtype=np.int64), return_counts=True)
    b, r = runs_of(q, np.ones(q.size, dtype=np.int64), n / n.sum(), d, 0.0)
    return DeviceTraffic(b, r, True)


def layout_rng(seed: int) -> np.random.Generator:
    """Generator that places the hot region on the device: the timing run's
    folded stream and the lifetime evaluation see the same place."""
    return stream(seed, "hot_layout")


class FoldedAddress:
    """Device-line traffic folded onto ``modeled`` lines for the timing run.

    Device line ``q`` of ``D`` is modeled line ``floor(q N / D)``: each
    modeled line stands for a run of about ``D / N`` adjacent device lines
    and takes their summed traffic, so a hot region of a few device lines
    lands on one or two modeled lines.  Same interface as
    :class:`memsim.workload.synthetic.AddressPattern` (``draw``,
    ``expected_shares``).
    """

    def __init__(self, traffic: DeviceTraffic, modeled: int) -> None:
        self.traffic, self.footprint = traffic, int(modeled)

    def draw(self, rng: np.random.Generator, n: int) -> np.ndarray:
        q = self.traffic.sample(rng, n)
        return (q * self.footprint // self.traffic.lines).astype(np.int64)

    def expected_shares(self) -> np.ndarray:
        d, n = self.traffic.lines, self.footprint
        # Modeled line i holds device lines ceil(i D / N) .. ceil((i + 1) D / N) - 1.
        edges = -(-(np.arange(n + 1, dtype=np.int64) * d) // n)
        return np.diff(self.traffic.cumulative(edges.astype(np.float64)))


def folded_address(cfg, modeled: int) -> FoldedAddress | None:
    """The folded device traffic of ``cfg`` (a RunConfig), or None unless sized in device lines.

    With ``modeled`` equal to ``cfg.device_lines`` nothing is folded: the
    addresses are the device lines themselves (what a trace holds).
    """
    if cfg.workload.sizing != "device_lines":
        return None
    d = cfg.device_lines
    return FoldedAddress(device_traffic(cfg.workload, d, layout_rng(cfg.run.seed)), modeled)
