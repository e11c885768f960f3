"""Start-Gap evaluated at device size, for lifetime.

The modeled ``N`` lines stand for ``D = N S`` device lines.  Running the
leveler on the modeled lines would move its Start register ``S`` times too
fast in device terms: a hot region the real device cannot move across in its
lifetime would look leveled.  Start-Gap is arithmetic on two registers, so
its wear at device size has a closed form instead (no simulation):

* the device runs Start-Gap over ``D`` logical lines (``D + 1`` physical);
  the gap moves every ``psi`` device writes, so a gap cycle is
  ``G = (D + 1) psi`` device writes, and after ``W`` device writes Start has
  advanced ``K = W / G`` device lines;
* physical line ``q`` hosts logical line ``q - s`` during cycle ``s``, so its
  user wear is ``G`` times the sum of the rates of the ``K`` logical lines
  below it (a fraction of the last), and every physical line receives one
  gap move per cycle, ``K`` moves;
* layout: modeled line ``i`` stands for the ``S`` adjacent device lines
  ``i S .. i S + S - 1``, each with rate ``r_i / S`` (``r_i`` the modeled
  line's share of user writes).  The top line of block ``i`` then sees the
  block sums, so its wear is ``G (r_i + r_{i-1} + ...)`` over ``K / S``
  modeled lines.  That line is taken for all ``S`` lines of the block: exact
  at block boundaries, and the most-worn line of a block is at one of its
  ends whenever the window is shorter than the hot structure.

Lifetime is the smallest ``W`` at which enough device lines have reached
their death wear; wear grows with ``W`` on every line, so bisection finds
it.  With ``S = 1`` this is the exact Start-Gap of the modeled lines (checked
against a replay to failure in the tests).  Cost: ``O(N)`` per bisection
step, independent of the device size.

References
----------
M. K. Qureshi et al., "Enhancing lifetime and security of PCM-based main
memory with Start-Gap wear leveling", MICRO 2009 (the registers, the gap
cycle, the write overhead ``1 / psi``).
"""
from __future__ import annotations

from collections.abc import Callable
from itertools import pairwise

import numpy as np


def first_crossing(count: Callable[[float], float], target: float, start: float,
                   rel_tol: float = 1e-10) -> float:
    """Smallest device write count ``w`` with ``count(w) >= target`` (``count`` non-decreasing).

    Doubles from ``start`` to bracket the crossing, then bisects (on the log
    scale once the bracket is positive) to ``rel_tol``; inf if no crossing
    below 1e40 writes.
    """
    lo, hi = 0.0, max(float(start), 1.0)
    while count(hi) < target:
        hi *= 2.0
        if hi > 1e40:
            return float("inf")
    for _ in range(200):
        mid = 0.5 * (lo + hi) if lo == 0.0 else float(np.sqrt(lo * hi))
        if count(mid) >= target:
            hi = mid
        else:
            lo = mid
        if hi - lo <= rel_tol * hi:
            break
    return hi


def start_gap_device_wear(rates: np.ndarray, device_writes: float, psi: int,
                          copies: float) -> np.ndarray:
    """Wear (line-write equivalents) of each modeled block's device lines.

    The larger of the block's two end lines (the most-worn line of a block
    under a sliding window is at one of its ends when rates are constant
    within blocks).

    Parameters
    ----------
    rates:
        Share of user writes of each modeled logical line (sums to 1).
    device_writes:
        User writes the device has received, ``W``.
    psi:
        Device writes between gap moves.
    copies:
        Device lines per modeled line, ``S``.
    """
    r = np.asarray(rates, dtype=np.float64)
    n = r.size
    s = float(copies)
    d = n * s
    g = (d + 1.0) * psi
    prefix = np.concatenate([[0.0], np.cumsum(r)])
    total = prefix[n]
    w = float(device_writes)

    def cum(x: np.ndarray) -> np.ndarray:
        # Device rate summed over device lines below x (real x, circular).
        wraps = np.floor(x / d)
        xm = x - wraps * d
        b = np.minimum(np.floor(xm / s).astype(np.int64), n - 1)
        return wraps * total + prefix[b] + (xm - b * s) / s * r[b]

    def at(q: np.ndarray, blk: np.ndarray) -> np.ndarray:
        # Line q hosts logical line q until the gap first passes it,
        # a_q = (D - q) / (D + 1) of a cycle, then the lines below it, one
        # cycle each less the psi writes it is the gap itself: D psi of the
        # (D + 1) psi writes (the registers' arithmetic; the D / (D + 1) is
        # 1.5% on a region of 64 lines, nothing on a device).
        first = (d - q) / (d + 1.0) * g
        k = np.maximum(0.0, w - first) / g
        return r[blk] / s * np.minimum(w, first) + g * d / (d + 1.0) * (cum(q) - cum(q - k))

    blk = np.arange(n)
    top = at(blk * s + s - 1.0, blk)
    bottom = at(blk * s, blk)
    return np.maximum(top, bottom) + w / g


def start_gap_device_lifetime(rates: np.ndarray, death: np.ndarray, weight: float,
                              needed: int, psi: int, copies: float) -> tuple[float, float]:
    """Device writes to end of life and to the first dead line.

    ``death[i]`` holds sorted death wears of block ``i``'s device lines (the
    weakest ones, each entry standing for ``weight`` device lines); end of
    life is the ``needed``-th dead entry.  ``inf`` if it is never reached.
    """
    death = np.asarray(death, dtype=np.float64)
    if needed > death.size:
        return float("inf"), _solve(rates, death[:, :1], 1, psi, copies)
    return (_solve(rates, death, needed, psi, copies),
            _solve(rates, death[:, :1], 1, psi, copies))


def _solve(rates: np.ndarray, death: np.ndarray, needed: int, psi: int, copies: float) -> float:
    finite = death[np.isfinite(death)]
    if finite.size < needed:
        return float("inf")

    def dead(w: float) -> int:
        wear = start_gap_device_wear(rates, w, psi, copies)
        return int(np.count_nonzero(death <= wear[:, None]))

    n = np.asarray(rates).size
    # Even wear reaches the largest death wear by D * max(death); Start-Gap
    # never does worse than twice that over full rotations (bound for the
    # bracket only).
    return first_crossing(dead, needed, max(float(finite.max()), 1.0) * n * copies)


def randomized_start_gap_device_lifetime(rates: np.ndarray, death_cdf, needed: int, psi: int,
                                         copies: float, max_skew: float = 0.1) -> float:
    """Device writes to end of life under randomized Start-Gap at device size.

    Approximation (the static randomizer is a keyed permutation of all
    ``D`` device lines, too many to evaluate one by one): after ``K`` gap
    cycles a physical line has hosted ``K`` device lines drawn without
    replacement from the whole device, each for one cycle ``G``.  Its user
    wear is ``G`` times the sum of their rates, taken as normal with the
    mean and variance of sampling ``K`` of the ``D`` device rates (finite
    population correction; each full rotation, ``K >= D``, adds exactly
    ``G``), plus ``K`` gap moves.  End of life is where the expected number
    of dead device lines, ``D E[F(wear)]`` (``F`` the line death law,
    Gauss-Hermite quadrature over the normal), reaches ``needed - 1 +
    ln 2`` (the median of a Poisson count).  Its error against a replay to
    failure of the real leveler is measured in tests/test_device_wear.py.

    The normal law is trusted only where the skewness of the window sum,
    ``gamma_1 (1 - 2 f) / sqrt(K (1 - f))`` (``gamma_1`` that of one device
    line's rate, ``f = K / D``), is below ``max_skew``; otherwise NaN is returned (no estimate): few hot
    lines per window make the sum skewed, and a normal law would understate
    its upper tail, so the lifetime would come out too long.
    """
    r = np.asarray(rates, dtype=np.float64)
    n = r.size
    d = n * float(copies)
    g = (d + 1.0) * psi
    v = r / copies                                   # rate of each device line of block i
    mu = 1.0 / d
    var = max(float(np.mean(v * v)) - mu * mu, 0.0)
    z, wz = np.polynomial.hermite_e.hermegauss(96)
    wz = wz / np.sqrt(2.0 * np.pi)
    target = needed - 1.0 + np.log(2.0)

    def expected_dead(w: float) -> float:
        k = w / g
        full = np.floor(k / d)
        x = k - full * d
        mean = g * (full + x * mu) + k
        sd = g * np.sqrt(x * var * max(0.0, 1.0 - x / d))
        wear = np.maximum(mean + sd * z, 0.0)
        return d * float(np.dot(wz, death_cdf(wear)))

    hi = first_crossing(expected_dead, target, d)
    if not np.isfinite(hi):
        return hi
    k = hi / g
    x = k - np.floor(k / d) * d
    if var > 0 and 0 < x < d:
        # Skewness of a sum of x draws without replacement from d values:
        # gamma_1 (1 - 2 f) / sqrt(x (1 - f)), f = x / d (from the third
        # central moment of sampling without replacement; derived here).
        f = x / d
        skew = float(np.mean((v - mu) ** 3)) / var**1.5 * (1 - 2 * f) / np.sqrt(x * (1 - f))
        if abs(skew) > max_skew:
            return float("nan")
    return hi


def security_refresh_device_rates(rates: np.ndarray, region_blocks: int, interval: int) -> np.ndarray:
    """Steady-state wear rate of each modeled block's device lines under Security Refresh.

    A region of ``region_blocks`` modeled lines (``region_blocks * S``
    device lines; by default the whole device) re-keys its XOR map every
    round, ``region lines * interval`` region writes; over the many rounds
    of a device's life (``endurance / interval``, ~1e6) every logical line
    of a region visits every physical line alike, so each physical line of
    the region wears at the region's mean share, plus the swaps, about
    ``1 / interval`` line writes per user write (Seong et al., ISCA 2010;
    the overhead as counted by :mod:`memsim.policy.leveling.security_refresh`).
    :func:`security_refresh_round_load` says when one round is too long
    for that to hold.
    """
    r = np.asarray(rates, dtype=np.float64)
    n = r.size
    b = max(1, min(int(region_blocks), n))
    g = np.arange(n) // b
    mean = np.bincount(g, weights=r) / np.bincount(g)
    return mean[g] * (1.0 + 1.0 / interval)


def security_refresh_round_load(rates: np.ndarray, region_blocks: int, interval: int) -> float:
    """Largest write count one device line can take from one logical line in one round.

    A round is ``R * interval`` writes to the region (``R`` device lines);
    the hottest device line of a region takes ``r_i / S`` of device writes,
    the region ``phi`` of them, so within a round it receives
    ``r_i * region_blocks * interval / phi`` writes, all on one physical line.
    """
    r = np.asarray(rates, dtype=np.float64)
    n = r.size
    b = max(1, min(int(region_blocks), n))
    g = np.arange(n) // b
    phi = np.bincount(g, weights=r)
    with np.errstate(divide="ignore", invalid="ignore"):
        load = np.where(phi[g] > 0, r * b * interval / phi[g], 0.0)
    return float(load.max())


def region_start_gap_device_lifetime(rates: np.ndarray, sizes: np.ndarray, death: np.ndarray, psi: int,
                                     copies: float) -> float:
    """Device writes to the first dead line under region Start-Gap (no randomizer).

    Region ``g`` holds ``sizes[g]`` adjacent modeled lines (``sizes[g] S``
    device lines) and is its own Start-Gap, its gap moving every ``psi``
    writes *to the region*: with the region's share ``phi_g`` of writes it
    is :func:`start_gap_device_lifetime` on the region's shares
    ``r / phi_g``, in region writes, i.e. ``W_g / phi_g`` device writes.
    The device dies with its first region.  ``death`` as for
    :func:`start_gap_device_lifetime` (first column: each block's weakest
    device line).
    """
    r = np.asarray(rates, dtype=np.float64)
    bounds = np.concatenate([[0], np.cumsum(sizes)])
    best = float("inf")
    for lo, hi in pairwise(bounds.tolist()):
        phi = float(r[lo:hi].sum())
        if phi <= 0:
            continue
        w = _solve(r[lo:hi] / phi, np.asarray(death)[lo:hi, :1], 1, psi, copies)
        best = min(best, w / phi)
    return best
