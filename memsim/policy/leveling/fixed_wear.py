"""Lifetime of the device under traffic laid out on its own lines.

Input: :class:`~memsim.workload.device_traffic.DeviceTraffic`, runs of
adjacent device lines with one write share each, and the death law of a
line (``cdf(x)``: probability a line is dead after ``x`` line-write
equivalents).  Nothing here depends on the number of modeled lines.

End of life is the ``needed``-th dead device line.  Wear is a function of
the device writes ``W`` that grows on every line, so the expected number
of dead lines ``E(W) = sum_q cdf(wear_q(W))`` grows too; the estimate is
the ``W`` at which it reaches ``needed - 1 + ln 2`` (the median of a
Poisson count; the dead count of many nearly independent lines is close to
Poisson), found by bisection.  Per leveler:

* ``none``: line ``q`` wears ``W v_q``;
* ``start_gap`` (Qureshi et al., MICRO 2009): over ``D`` logical lines the
  gap moves every ``psi`` writes, a gap cycle is ``G = (D + 1) psi``
  writes and Start advances ``K = W / G`` lines.  Physical line ``q`` has
  hosted the ``K`` logical lines ending at ``q``, one cycle each, so its
  wear is ``G (C(q + 1) - C(q + 1 - K)) + K`` (``C`` the cumulative share,
  ``K`` gap moves).  This is piecewise linear in ``q`` with knots where
  ``q + 1`` or ``q + 1 - K`` meets a run boundary, so the sum over the
  ``D`` lines is taken piece by piece (Gauss-Legendre over each piece).
  A contiguous hot region of ``h`` lines with share ``phi``: while ``K <
  h`` its hottest physical line takes ``W phi / h`` (no leveling at all);
  after that the region's ``phi W`` writes are spread over ``K`` lines,
  ``phi G`` each -- the region moves one line per ``G`` writes, which on a
  large device is far slower than its lines wear;
* ``region_start_gap`` (no randomizer): each region its own Start-Gap,
  its gap moving every ``psi`` writes to the region;
* ``randomized_start_gap``: the static randomizer scatters logical lines,
  so a physical line hosts ``K`` logical lines drawn without replacement
  from all ``D``.  Two share levels (a hot spot, uniform): the number of
  hot lines among them is hypergeometric and the wear follows exactly;
  otherwise the normal approximation of
  :func:`memsim.policy.leveling.device_wear.randomized_start_gap_device_lifetime`
  with its skewness guard (NaN = no estimate);
* ``security_refresh`` (Seong et al., ISCA 2010) with regions of
  ``region_lines`` device lines (default one over the device): steady
  state, every line of region ``g`` at ``(1 + 1 / interval) phi_g / R``;
  NaN when one key round can put more than 1% of a weak line's death wear
  on one physical line (then the steady state does not hold).
"""
from __future__ import annotations

from collections.abc import Callable

import numpy as np
from scipy import stats

from memsim.policy.leveling.device_wear import first_crossing
from memsim.workload.device_traffic import DeviceTraffic

DeathCdf = Callable[[np.ndarray], np.ndarray]
_NODES, _WEIGHTS = np.polynomial.legendre.leggauss(8)
_MAX_HOT = 100_000


def _bisect(expected_dead: Callable[[float], float], target: float, start: float) -> float:
    return first_crossing(expected_dead, target, start, rel_tol=1e-9)


def target_dead(needed: int) -> float:
    """Expected dead lines whose Poisson median is ``needed`` dead lines."""
    return needed - 1.0 + np.log(2.0)


def none_writes(traffic: DeviceTraffic, cdf: DeathCdf, needed: int) -> float:
    """Device writes to end of life without leveling."""
    c, v = traffic.counts, traffic.rate
    return _bisect(lambda w: float(np.dot(c, cdf(w * v))), target_dead(needed), traffic.lines)


def start_gap_wear(traffic: DeviceTraffic, q: np.ndarray, w: float, psi: int) -> np.ndarray:
    """Wear (line-write equivalents) of physical lines ``q`` after ``w`` device writes."""
    d = float(traffic.lines)
    g = (d + 1.0) * psi
    k = w / g
    q = np.asarray(q, dtype=np.float64)
    # A line hosts each logical line for D psi of a cycle's (D + 1) psi writes
    # (it is the gap for the other psi): negligible on a device, not on a region.
    return g * d / (d + 1.0) * (traffic.cumulative(q + 1.0) - traffic.cumulative(q + 1.0 - k)) + k


def start_gap_dead(traffic: DeviceTraffic, cdf: DeathCdf, w: float, psi: int) -> float:
    """Expected dead device lines after ``w`` device writes under plain Start-Gap."""
    d = traffic.lines
    k = w / ((d + 1.0) * psi)
    b = traffic.bounds[:-1].astype(np.float64) - 1.0
    knots = np.concatenate([b, b + (k % d)]) % d
    pts = np.unique(np.concatenate([np.floor(knots), np.ceil(knots), [0.0, float(d)]]))
    pts = pts[(pts >= 0) & (pts <= d)]
    a, z = pts[:-1], pts[1:]
    n = z - a                                   # lines a .. z - 1, wear linear over them
    # The end lines of a piece (where its largest wear is) exactly, the
    # n - 2 lines between them by Gauss-Legendre over the linear wear.
    ends = cdf(start_gap_wear(traffic, a, w, psi))
    last = np.where(n >= 2, cdf(start_gap_wear(traffic, z - 1.0, w, psi)), 0.0)
    inner = np.maximum(n - 2.0, 0.0)
    t = 0.5 * (_NODES + 1.0)                    # nodes on [0, 1]
    q = (a + 1.0)[:, None] + np.maximum(n - 3.0, 0.0)[:, None] * t[None, :]
    mid = cdf(start_gap_wear(traffic, q.ravel(), w, psi).reshape(q.shape)) @ (0.5 * _WEIGHTS)
    return float(ends.sum() + last.sum() + np.dot(inner, mid))


def start_gap_writes(traffic: DeviceTraffic, cdf: DeathCdf, needed: int, psi: int) -> float:
    """Device writes to end of life under plain Start-Gap (needs the layout)."""
    if not traffic.layout_known:
        return float("nan")
    return _bisect(lambda w: start_gap_dead(traffic, cdf, w, psi), target_dead(needed), traffic.lines)


def region_start_gap_writes(traffic: DeviceTraffic, cdf: DeathCdf, needed: int, regions: int, psi: int,
                            max_kinds: int = 4096) -> float:
    """Device writes to end of life under region Start-Gap (no randomizer); NaN: no estimate.

    The ``D`` device lines are cut into ``regions`` runs of adjacent lines
    (sizes differ by at most one, as in
    :class:`~memsim.policy.leveling.region_start_gap.RegionStartGap`); region
    ``g`` with share ``phi_g`` is a Start-Gap of its own whose gap moves
    every ``psi`` writes *to the region*, so after ``W`` device writes it is
    :func:`start_gap_dead` of the region's traffic after ``W phi_g`` region
    writes (Qureshi et al., MICRO 2009).  Regions inside one run of the
    traffic with the same size are alike and evaluated once.  NaN when the
    layout is not known or the regions come in more than ``max_kinds`` kinds.
    """
    if not traffic.layout_known:
        return float("nan")
    d = traffic.lines
    q, rem = divmod(d, int(regions))
    g = np.arange(int(regions), dtype=np.int64)
    lo = g * q + np.minimum(g, rem)
    hi = lo + np.where(g < rem, q + 1, q)
    b, v = traffic.bounds, traffic.rate
    j_lo = np.searchsorted(b, lo, side="right") - 1
    j_hi = np.searchsorted(b, hi - 1, side="right") - 1
    inside = j_lo == j_hi
    # One kind per (size, run) for regions inside a run, one per other region.
    key = np.where(inside, (hi - lo) * (v.size + 1) + j_lo, -1 - g)
    kinds, first, mult = np.unique(key, return_index=True, return_counts=True)
    if kinds.size > max_kinds:
        return float("nan")
    parts = []
    for i, m in zip(first.tolist(), mult.tolist()):
        a, z = int(lo[i]), int(hi[i])
        cut = np.unique(np.clip(b, a, z)) - a
        sub_rate = v[np.searchsorted(b, cut[:-1] + a, side="right") - 1]
        phi = float(np.dot(sub_rate, np.diff(cut)))
        if phi > 0:
            parts.append((DeviceTraffic(cut, sub_rate / phi, True), phi, float(m)))

    def expected_dead(w: float) -> float:
        return sum(m * start_gap_dead(t, cdf, w * phi, psi) for t, phi, m in parts)

    return _bisect(expected_dead, target_dead(needed), d)


def randomized_start_gap_writes(traffic: DeviceTraffic, cdf: DeathCdf, needed: int, psi: int,
                                max_skew: float = 0.1) -> float:
    """Device writes to end of life under randomized Start-Gap (NaN: no estimate)."""
    d = traffic.lines
    g = (d + 1.0) * psi
    levels = np.unique(traffic.rate)
    if levels.size == 1:
        rate = float(levels[0]) * (1.0 + 1.0 / psi)
        return _bisect(lambda w: d * float(cdf(np.array([w * rate]))[0]), target_dead(needed), d)
    if levels.size == 2:
        hot_v = float(levels[1])
        h = int(traffic.counts[traffic.rate == hot_v].sum())
        cold_v = float(levels[0])
        if h <= _MAX_HOT:
            m = np.arange(h + 1)

            def expected_dead(w: float) -> float:
                k = w / g
                full = np.floor(k / d)
                x = k - full * d
                xi = int(np.ceil(x))
                # Hot lines among the ceil(x) logical lines hosted in the
                # partial rotation, the last one for a part x / ceil(x) on average.
                pm = stats.hypergeom.pmf(m, d, h, xi)
                part = x / xi if xi > 0 else 0.0
                wear = g * (full + part * (m * hot_v + (xi - m) * cold_v)) + k
                return d * float(np.dot(pm, cdf(np.maximum(wear, 0.0))))

            return _bisect(expected_dead, target_dead(needed), d)
    return _randomized_normal(traffic, cdf, needed, psi, max_skew)


def _randomized_normal(traffic: DeviceTraffic, cdf: DeathCdf, needed: int, psi: int,
                       max_skew: float) -> float:
    """The normal approximation of
    :func:`memsim.policy.leveling.device_wear.randomized_start_gap_device_lifetime`,
    with the moments of the device rates taken over the runs (weighted by
    their lengths); NaN where the window sum is too skewed for it."""
    d = float(traffic.lines)
    g = (d + 1.0) * psi
    c, v = traffic.counts, traffic.rate
    mu = 1.0 / d
    var = max(float(np.dot(c, v * v)) / d - mu * mu, 0.0)
    m3 = float(np.dot(c, (v - mu) ** 3)) / d
    z, wz = np.polynomial.hermite_e.hermegauss(96)
    wz = wz / np.sqrt(2.0 * np.pi)

    def expected_dead(w: float) -> float:
        k = w / g
        x = k - np.floor(k / d) * d
        mean = g * (np.floor(k / d) + x * mu) + k
        sd = g * np.sqrt(x * var * max(0.0, 1.0 - x / d))
        return d * float(np.dot(wz, cdf(np.maximum(mean + sd * z, 0.0))))

    w = _bisect(expected_dead, target_dead(needed), d)
    k = w / g
    x = k - np.floor(k / d) * d
    if var > 0 and 0 < x < d:
        # Skewness of a sum of x draws without replacement from the d rates:
        # gamma_1 (1 - 2 f) / sqrt(x (1 - f)), f = x / d (as in device_wear).
        f = x / d
        if abs(m3 / var**1.5 * (1 - 2 * f) / np.sqrt(x * (1 - f))) > max_skew:
            return float("nan")
    return w


def security_refresh_writes(traffic: DeviceTraffic, cdf: DeathCdf, needed: int, interval: int,
                            weak_death: float, region_lines: int | None = None) -> float:
    """Device writes to end of life under Security Refresh with regions of ``region_lines`` device lines.

    Region ``g`` (lines ``g R .. g R + R - 1``; default one region over the
    device) takes the share ``phi_g`` of the writes; over many key rounds
    each of its physical lines wears at ``phi_g / R (1 + 1 / interval)``
    (Seong et al., ISCA 2010).  Regions inside one run of the traffic are
    counted per run; only the regions holding a run boundary are evaluated
    one by one, so the cost does not grow with the device.  NaN when one
    round (``R interval`` writes to the region) can put more than 1% of a
    weak line's death wear on one physical line: the hottest line of the
    region takes ``v / phi_g`` of them.
    """
    d = traffic.lines
    r = int(region_lines) if region_lines else 1 << (d - 1).bit_length()
    b = traffic.bounds
    v = traffic.rate
    step = 1.0 + 1.0 / interval
    # Whole regions inside run j: from ceil(b_j / R) to floor(b_{j+1} / R).
    inside = np.maximum(b[1:] // r - (-(-b[:-1] // r)), 0).astype(np.float64)
    # Regions holding a run boundary that is not a region boundary, and a last partial region.
    inner = b[1:-1]
    cut = np.unique(np.concatenate([inner[inner % r != 0] // r, [d // r] if d % r else []])).astype(np.int64)
    lo = (cut * r).astype(np.float64)
    hi = np.minimum((cut + 1) * r, d).astype(np.float64)
    phi = traffic.cumulative(hi) - traffic.cumulative(lo)
    # Hottest line of each cut region: the largest rate of the runs it overlaps.
    j0 = np.searchsorted(b, lo, side="right") - 1
    j1 = np.searchsorted(b, hi, side="left") - 1
    hottest = np.array([v[a:z + 1].max() for a, z in zip(j0.tolist(), j1.tolist())]) if cut.size else np.zeros(0)
    with np.errstate(divide="ignore", invalid="ignore"):
        load = np.where(phi > 0, hottest * r * interval / phi, 0.0)
    if (inside.sum() > 0 and interval > 0.01 * weak_death) or (load.size and load.max() > 0.01 * weak_death):
        return float("nan")
    lines_inside = inside * r
    rate_cut = phi / r * step

    def expected_dead(w: float) -> float:
        return float(np.dot(lines_inside, cdf(w * v * step)) + r * cdf(w * rate_cut).sum())

    return _bisect(expected_dead, target_dead(needed), d)
