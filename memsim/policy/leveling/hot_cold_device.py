"""Hot/cold region swapping at device size: a steady-state approximation.

The scheme (:mod:`memsim.policy.leveling.hot_cold_swap`) cuts the ``D``
device lines into ``M = ceil(D / G)`` regions of ``G`` lines and, every
``P`` user writes, moves the logical region written most in that epoch into
the least-worn physical region (a swap, ``2 G`` line writes).  The device
has millions of regions, too many to simulate over a lifetime, so lifetime
uses this approximation instead:

* *Mixing.*  Taking the least-worn physical region as destination is
  water-filling: the regions' total wear stays level.  A swap keeps each
  line's offset in its region, so a physical line at offset ``o`` wears at
  the mean over the logical regions of their offset-``o`` rates,
  ``a_o = (1 / M) sum_l v(l G + o)`` per device write, plus its part of the
  swaps, ``2 G / P`` line writes per user write spread over the mixed lines
  (one swap per epoch assumed: an upper bound on the overhead).
* *Which regions move.*  Only the epoch's hottest region moves.  Epoch
  counts are taken as independent Poisson(``P s_l``) (``s_l`` a region's
  share); the probability ``p_l`` that region ``l`` is the epoch's argmax is
  bounded below by a strict win and above by a win or tie (numpy's argmax
  takes the first of a tie).  A region with above-mean share is *mixed* if
  the excess wear its hottest line gathers in a stay on one host (``P /
  p_l`` writes, times the log of the number of stays for the longest one)
  is below 20% of a weak line's death wear (the limit measured below);
  *stuck* if it expects fewer than 0.01 moves before its hottest line dies
  unleveled (its lines then wear at their own rates and leave the mixing);
  otherwise the approximation gives no estimate (NaN with a note).  Zipf traffic on the device, whose second
  region never beats the first, is the typical case of no estimate.

End of life is the device write count at which the expected number of dead
lines reaches ``needed - 1 + ln 2`` (the median of a Poisson count, as in
:mod:`memsim.policy.leveling.fixed_wear`).

Measured error against replaying every write to failure with the real
leveler on a small device (512 lines, regions of 8, endurance 1e4, one
modeled line per device line; tests/test_device_wear.py, bound 5% per
place and 3% on the mean): within 1% on uniform traffic; on a contiguous
hot region (5% of the lines taking half the writes, eight places) within
2% wherever it gives a number.  The places it refuses are those where a
region at the edge of the hot run wins an epoch now and then: there the
mixed figure would have been up to 36% too long.  On a real device
(endurance ~1e8) a stay's excess is far below the limit, so the refusals
left are the stuck-or-not cases such as Zipf traffic.

References
----------
P. Zhou, B. Zhao, J. Yang and Y. Zhang, "A durable and energy efficient
main memory using phase change memory technology", ISCA 2009 (segment
swapping).
"""
from __future__ import annotations

import numpy as np
from scipy import special

from memsim.policy.leveling.device_model import DeathCdf
from memsim.policy.leveling.device_wear import first_crossing

_MAX_CELLS = 1 << 24          # offsets x runs evaluated at once
_TYPES_BLOCK = 256
_MIX_LIMIT = 0.2              # longest stay's excess wear over a weak line's death wear (measured)
_STUCK_LIMIT = 0.01           # expected moves before an unleveled death


def _merge(bounds: np.ndarray, rate: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Runs with adjacent equal rates merged."""
    keep = np.concatenate([[True], rate[1:] != rate[:-1]])
    return np.concatenate([bounds[:-1][keep], bounds[-1:]]), rate[keep]


def _offset_rates(b: np.ndarray, v: np.ndarray, g: int) -> np.ndarray:
    """``sum_l v(l G + o)`` for each offset ``o`` (lines beyond the device have rate 0)."""
    o = np.arange(g, dtype=np.int64)[:, None]
    hits = -((o - b[None, 1:]) // g) - (-((o - b[None, :-1]) // g))   # ceil((z - o)/G) - ceil((a - o)/G)
    return (np.maximum(hits, 0) * v[None, :]).sum(axis=1)


def _region_profile(b: np.ndarray, v: np.ndarray, region: int, g: int) -> np.ndarray:
    q = region * g + np.arange(g)
    j = np.clip(np.searchsorted(b, q, side="right") - 1, 0, v.size - 1)
    return np.where(q < b[-1], v[j], 0.0)


def _log_cdf(n: np.ndarray, lam: np.ndarray) -> np.ndarray:
    """log P(Poisson(lam) <= n), accurate in both tails (-inf where it underflows)."""
    upper = special.pdtrc(n, lam)
    with np.errstate(divide="ignore"):
        return np.where(upper < 0.5, np.log1p(-upper), np.log(special.pdtr(n, lam)))


def _win_bounds(lam: np.ndarray, count: np.ndarray, ask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lower (strict win) and upper (win or tie) bounds of each asked type being the epoch's argmax."""
    top = float(lam.max())
    n = np.arange(int(top + 12 * np.sqrt(top) + 30), dtype=np.float64)
    total = np.zeros(n.size)
    # By blocks of similar rates, each over the counts where its log-cdf is
    # neither 0 (far above the rate) nor below -800 (far below: -inf).
    order = np.argsort(lam)
    for lo in range(0, lam.size, _TYPES_BLOCK):
        idx = order[lo:lo + _TYPES_BLOCK]
        c, blk = count[idx], lam[idx]
        a = int(max(0.0, blk.min() - 40 * np.sqrt(blk.min()) - 40))
        z = int(min(n.size, blk.max() + 40 * np.sqrt(blk.max()) + 40))
        if a > 0:
            total[:a] = np.where(c.sum() > 0, -np.inf, total[:a])
        if z > a:
            logf = _log_cdf(n[None, a:z], blk[:, None])
            total[a:z] += (c[:, None] * np.where(c[:, None] > 0, logf, 0.0)).sum(axis=0)
    lower = np.zeros(ask.size)
    upper = np.zeros(ask.size)
    sub = np.argsort(lam[ask])
    for lo in range(0, ask.size, _TYPES_BLOCK):
        k = sub[lo:lo + _TYPES_BLOCK]
        la = lam[ask[k]][:, None]
        a = int(max(0.0, la.min() - 40 * np.sqrt(la.min()) - 40))
        z = int(min(n.size, la.max() + 40 * np.sqrt(la.max()) + 40))
        m = n[None, a:z]
        logf = _log_cdf(m, la)
        with np.errstate(divide="ignore"):
            pmf = np.exp(m * np.log(la) - la - special.gammaln(m + 1.0))
        # Every other region at most n (where its own log-cdf underflows, its pmf is 0 too).
        with np.errstate(invalid="ignore"):
            others = np.where(np.isfinite(logf), total[None, a:z] - logf, -np.inf)
            prev = np.concatenate([[-np.inf] if a == 0 else total[a - 1:a], total[a:z - 1]])
            logf_prev = _log_cdf(m - 1.0, la) if a > 0 else np.concatenate(
                [np.full((la.size, 1), -np.inf), logf[:, :-1]], axis=1)
            below = np.where(np.isfinite(logf_prev), prev[None, :] - logf_prev, -np.inf)
        upper[k] = (pmf * np.exp(np.minimum(others, 0.0))).sum(axis=1)
        lower[k] = (pmf * np.exp(np.minimum(below, 0.0))).sum(axis=1)
    return lower, upper


def hot_cold_swap_writes(bounds: np.ndarray, rate: np.ndarray, cdf: DeathCdf, needed: int, region_lines: int,
                         period: int, weak_death: float) -> tuple[float, str]:
    """Device writes to end of life (NaN: no estimate) and why there is none.

    ``bounds``/``rate``: runs of device lines with one per-line share each
    (:class:`memsim.workload.device_traffic.DeviceTraffic`).
    """
    b, v = _merge(np.asarray(bounds, dtype=np.int64), np.asarray(rate, dtype=np.float64))
    d, g, p = int(b[-1]), int(region_lines), float(period)
    m = -(-d // g)
    if g * v.size > _MAX_CELLS:
        return float("nan"), f"too many runs of traffic ({v.size}) for regions of {g} lines"
    cum = np.concatenate([[0.0], np.cumsum(v * np.diff(b))])

    def share(x: np.ndarray) -> np.ndarray:
        j = np.clip(np.searchsorted(b, x, side="right") - 1, 0, v.size - 1)
        return np.where(x >= d, cum[-1], cum[j] + (x - b[j]) * v[j])

    # Region types: the whole regions inside each run, and each region holding a run boundary.
    inside = np.maximum(b[1:] // g - (-(-b[:-1] // g)), 0)
    inner = b[1:-1]
    cut = np.unique(np.concatenate([inner[inner % g != 0] // g, [d // g] if d % g else []])).astype(np.int64)
    cut_share = share(np.minimum((cut + 1) * g, d).astype(np.float64)) - share((cut * g).astype(np.float64))
    cut_hot = np.array([_region_profile(b, v, int(c), g).max() for c in cut]) if cut.size else np.zeros(0)
    lam = p * np.concatenate([v * g, cut_share])
    count = np.concatenate([inside, np.ones(cut.size, dtype=np.int64)]).astype(np.float64)
    hottest = np.concatenate([v, cut_hot])
    mixed_sum = _offset_rates(b, v, g)                    # per offset, over all M regions
    a_min = float(mixed_sum.min()) / m
    excess = np.flatnonzero((count > 0) & (lam / p > (1.0 + 1e-9) / m))
    stuck = np.zeros(lam.size, dtype=bool)
    if excess.size:
        lower, upper = _win_bounds(lam, count, excess)
        h = hottest[excess]
        alone = weak_death / h                            # writes its hottest line lives unleveled
        longest = np.log(np.maximum(lower * weak_death / max(a_min, 1e-300) / p, np.e))
        with np.errstate(divide="ignore"):
            gather = np.where(lower > 0, (h - a_min) * p / lower * longest, np.inf)
        is_stuck = upper * alone / p <= _STUCK_LIMIT
        is_mixed = gather <= _MIX_LIMIT * weak_death
        if np.any(~is_mixed & ~is_stuck):
            return float("nan"), ("a region of above-mean heat is neither moved often enough to be "
                                  "leveled nor never moved (only the epoch's hottest region moves)")
        stuck[excess[is_stuck]] = True
    # Stuck regions keep their host and their own rates; the rest mix.
    stuck_runs = stuck[:v.size]
    stuck_cut = cut[stuck[v.size:]]
    m_mix = m - int(inside[stuck_runs].sum()) - stuck_cut.size
    removed = (inside[stuck_runs] * v[stuck_runs]).sum() + sum(_region_profile(b, v, int(c), g) for c in stuck_cut)
    a = (mixed_sum - removed) / max(m_mix, 1)
    swap = 2.0 / (p * max(m_mix, 1))                     # 2 G line writes per epoch over m_mix G lines
    stuck_lines = np.concatenate([np.repeat(v[stuck_runs], 1), *(_region_profile(b, v, int(c), g)
                                                                for c in stuck_cut)]) if stuck.any() else np.zeros(0)
    stuck_weight = np.concatenate([inside[stuck_runs] * g, np.ones(stuck_lines.size - int(stuck_runs.sum()))]) \
        if stuck.any() else np.zeros(0)

    def expected_dead(w: float) -> float:
        dead = m_mix * float(cdf(w * (a + swap)).sum())
        if stuck_lines.size:
            dead += float(np.dot(stuck_weight, cdf(w * stuck_lines)))
        return dead

    return first_crossing(expected_dead, needed - 1.0 + np.log(2.0), d, rel_tol=1e-9), ""
