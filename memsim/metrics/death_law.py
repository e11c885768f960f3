"""Death law of lines: when lines die under cell endurance, ECP and their wear rates.

A line dies when more of its cells have failed than ECP corrects (Schechter
et al., "Use ECP, not ECC, for hard failures in resistive memories", ISCA
2010).  :class:`DeathLaw` gives that law for a line whose cells wear by a
profile of programs per line write; :func:`device_deaths` draws the death
wear of the device's lines (exactly, or by strata where the device is large);
:func:`extrapolate` turns per-line wear rates into a lifetime.  Pure
statistics: no run, no config.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import betainc, betaincinv, expit, gammaln, xlog1py, xlogy

from memsim.engine.wear import WearResult
from memsim.errors import ConfigError
from memsim.metrics.lifetime import Lifetime, lifetime_extrapolated
from memsim.tech.endurance import EnduranceModel

# Entries of a (lines x kept copies) death-wear matrix sampled at most; above
# it the device lines of a modeled line are represented by strata.
_DEATH_ENTRIES = 1 << 22
_Q_STEP = 2e-3                     # relative step cell-failure probabilities are grouped by


def cell_cdf(model: EnduranceModel, y: np.ndarray) -> np.ndarray:
    """CDF of one cell's endurance at ``y`` (inverse of ``model.ppf``)."""
    return model.cdf(y)


def _binom_pmf(j: np.ndarray, n: int, p: np.ndarray) -> np.ndarray:
    """Binomial pmf, computed in logs (exact 0/1 at p = 0)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        logc = gammaln(n + 1) - gammaln(j + 1) - gammaln(n - j + 1)
        out = np.exp(logc + xlogy(j, p) + xlog1py(n - j, -p))
    return np.where(j <= n, out, 0.0)


def _binom_at_least(s: np.ndarray, n: int, p: np.ndarray) -> np.ndarray:
    """P(Binomial(n, p) >= s) = I_p(s, n - s + 1) (regularized incomplete beta)."""
    s = np.broadcast_to(s, np.broadcast_shapes(np.shape(s), np.shape(p)))
    safe = np.clip(s, 1, n)
    out = betainc(safe, n - safe + 1, p)
    return np.where(s <= 0, 1.0, np.where(s > n, 0.0, out))


class DeathLaw:
    """Distribution of the line-write equivalents at which one line dies.

    A line of ``cells`` cells, each programmed with probability ``profile``
    per write (a scalar, which may exceed 1 for multi-level cells counted in
    pulses, or one value per cell), dies at its (k+1)-th cell failure.

    Quantiles come from a table of (logit probability, log death wear) that
    is interpolated linearly: for a uniform profile the table holds exact
    values ``F^-1(B^-1(u)) / q`` with ``B`` the Beta(k+1, cells-k) law of the
    (k+1)-th smallest of ``cells`` uniforms; for a non-uniform profile the
    CDF is computed on a grid of death wear by convolving the binomial
    failure counts of groups of equal ``q`` (a Poisson-binomial tail).

    References
    ----------
    H. A. David and H. N. Nagaraja, *Order Statistics*, 3rd ed., Wiley 2003
    (U_(j) ~ Beta(j, n - j + 1)); S. Schechter et al., ISCA 2010 (ECP-k).
    """

    def __init__(self, endurance: EnduranceModel, cells: int, k: int,
                 profile: float | np.ndarray) -> None:
        if k < 0:
            raise ConfigError("lifetime.ecp_entries", repr(k), "an integer >= 0")
        self.endurance, self.cells, self.k = endurance, int(cells), int(k)
        q = np.asarray(profile, dtype=np.float64)
        if q.ndim == 0:
            q = np.full(self.cells, float(q))
        if q.shape != (self.cells,) or np.any(q < 0) or not np.all(np.isfinite(q)):
            raise ValueError(f"profile must be {self.cells} finite values >= 0")
        self.q = q
        # Cells whose q agree to 0.2% share one group: the Poisson-binomial
        # tail costs O(groups) and 0.2% in q is 0.2% in death wear at most.
        pos = q[q > 0]
        key = np.round(np.log(pos) / _Q_STEP) if pos.size else pos
        _, inv, counts = np.unique(key, return_inverse=True, return_counts=True)
        values = np.bincount(inv, weights=pos) / counts if pos.size else pos
        self.groups = list(zip(values.tolist(), counts.tolist()))
        self.uniform = len(self.groups) == 1 and counts[0] == self.cells
        top = np.sort(q)[::-1]
        # The line dies once its k+1 most-programmed cells are dead.
        self.q_kth = float(top[self.k]) if self.k < self.cells else 0.0
        self._t = self._lx = None
        if self.q_kth > 0 and endurance.cov > 0:
            self._table()

    @property
    def never_dies(self) -> bool:
        return self.q_kth <= 0

    def cdf(self, x: np.ndarray) -> np.ndarray:
        """P(line dead after ``x`` write equivalents)."""
        x = np.asarray(x, dtype=np.float64)
        k, F = self.k, self.endurance
        if self.uniform:
            q = self.groups[0][0]
            return betainc(k + 1, self.cells - k, cell_cdf(F, x * q))
        dist = np.zeros((k + 1,) + x.shape)      # P(exactly j failed) for j <= k
        dist[0] = 1.0
        tail = np.zeros(x.shape)                  # P(more than k failed)
        j = np.arange(k + 1).reshape((-1,) + (1,) * x.ndim)
        for q, c in self.groups:
            p = cell_cdf(F, x * q)
            pmf = _binom_pmf(j, c, p)
            # Summing non-negative terms keeps precision in the far lower tail.
            tail = tail + (dist * _binom_at_least(k + 1 - j, c, p)).sum(axis=0)
            new = np.zeros_like(dist)
            for i in range(k + 1):
                new[i:] += dist[: k + 1 - i] * pmf[i]
            dist = new
        return tail

    def _table(self) -> None:
        F = self.endurance
        if self.uniform:
            t = np.linspace(-70.0, 37.0, 8193)            # logit u, u from 4e-31 to 1 - 8e-17
            beta = betaincinv(self.k + 1, self.cells - self.k, expit(t))
            x = F.ppf(beta) / self.groups[0][0]
        else:
            lo = F.mean * 1e-12 / self.q.max()
            hi = float(F.ppf(np.array([1 - 1e-15]))[0]) / self.q_kth
            x = np.geomspace(lo, hi, 8193)
            g = np.clip(self.cdf(x), 0.0, 1.0)
            with np.errstate(divide="ignore"):
                t = np.log(g) - np.log1p(-g)
            keep = np.isfinite(t) & (t > np.maximum.accumulate(np.r_[-np.inf, t[:-1]]))
            t, x = t[keep], x[keep]
        self._t, self._lx = t, np.log(np.maximum(x, 1e-300))

    def ppf(self, u: np.ndarray) -> np.ndarray:
        """Death wear at probabilities ``u`` (inf if the line cannot die)."""
        u = np.asarray(u, dtype=np.float64)
        if self.never_dies:
            return np.full(u.shape, np.inf)
        if self._t is None:                   # no endurance spread
            return np.full(u.shape, self.endurance.mean / self.q_kth)
        with np.errstate(divide="ignore"):
            t = np.log(u) - np.log1p(-u)
        return np.exp(np.interp(t, self._t, self._lx))


@dataclass
class DeviceDeaths:
    """Death wear of device lines, grouped by modeled physical line.

    ``death[i]`` (sorted) holds entries for the device lines modeled line
    ``i`` stands for; each entry stands for ``weight`` device lines and end
    of life comes at the ``needed``-th entry death.  ``exact``: the entries
    are the smallest death wears of the line's copies (else strata).
    ``first[i]`` is the smallest death wear of line ``i``'s copies (always
    exact), for the first failure.
    """

    death: np.ndarray
    weight: float
    needed: int
    exact: bool
    first: np.ndarray


def device_deaths(law: DeathLaw, rng: np.random.Generator, rates: np.ndarray, copies: float,
                  device_lines: float, capacity_loss: float) -> DeviceDeaths:
    """Sample death wear for modeled lines of ``copies`` device lines each.

    End of life is the ``floor(capacity_loss * device_lines) + 1``-th dead
    device line.  The smallest death wears of each line's copies are drawn
    exactly, in order (Renyi's representation of uniform order statistics,
    pushed through :meth:`DeathLaw.ppf`).  How many per line are needed
    depends on where the deaths fall, so the kept count doubles until no
    line has all its kept copies dead before end of life at the wear
    ``rates`` (line-write equivalents per user write), then once more as a
    margin for the replay.  If that would not fit in memory, each line's
    copies are represented by ``K`` strata of ``copies / K`` device lines
    each instead, which is accurate when many deaths are needed (the weakest
    copy is still drawn exactly, for the first failure).
    """
    rates = np.asarray(rates, dtype=np.float64)
    n = rates.size
    needed = int(np.floor(capacity_loss * device_lines)) + 1
    copies = max(float(copies), 1.0)
    top = min(needed, max(1, int(np.floor(copies))))     # a line never needs more
    keep = min(top, 4)
    e = rng.standard_exponential((n, keep))

    def draw() -> np.ndarray:
        return law.ppf(-np.expm1(-np.cumsum(e / (copies - np.arange(e.shape[1])), axis=1)))

    death = draw()
    saturated = keep < top
    while saturated:
        with np.errstate(divide="ignore", invalid="ignore"):
            t = np.where(rates[:, None] > 0, death / rates[:, None], np.inf)
        end = np.partition(t.ravel(), needed - 1)[needed - 1] if needed <= t.size else np.inf
        saturated = bool(np.any(t[:, -1] < end))
        grow = min(top, 2 * keep) if saturated else min(top, 2 * keep, _DEATH_ENTRIES // n)
        if n * grow > _DEATH_ENTRIES:
            return _strata(law, rng, n, copies, needed, death[:, 0])
        if grow > keep:
            e = np.concatenate([e, rng.standard_exponential((n, grow - keep))], axis=1)
            keep = grow
            death = draw()
        saturated = saturated and keep < top
    return DeviceDeaths(death, 1.0, needed, True, death[:, 0].copy())


def _strata(law: DeathLaw, rng: np.random.Generator, n: int, copies: float, needed: int,
            first: np.ndarray) -> DeviceDeaths:
    keep = max(1, min(int(np.floor(copies)), _DEATH_ENTRIES // n))
    u = (np.arange(keep) + rng.random((n, keep))) / keep
    weight = copies / keep
    return DeviceDeaths(law.ppf(u), weight, int(np.ceil(needed / weight)), False, first)


def even_wear_writes(law: DeathLaw, rate: float, lines: float, needed: int) -> float:
    """User writes to end of life if ``lines`` lines all wore at the mean ``rate``.

    The same cells and the same programs per write, spread perfectly: every
    line then wears at ``rate`` write equivalents per user write and end of
    life is the ``needed``-th smallest death wear among ``lines`` i.i.d.
    lines.  Its median, ``ppf(B^-1(1/2))`` with ``B`` the Beta(needed,
    lines - needed + 1) law of the ``needed``-th smallest of ``lines``
    uniforms (David and Nagaraja, *Order Statistics*, Wiley 2003), stands
    for it.  Lifetime over this separates leveler quality (how unevenly the
    writes fall) from cell variation (which both share).
    """
    if not rate > 0 or law.never_dies:
        return float("inf")
    n = max(float(lines), 1.0)
    needed = int(min(max(needed, 1), n))
    u = float(betaincinv(needed, n - needed + 1, 0.5))
    return float(law.ppf(np.array([u]))[0]) / rate


def capacity_share(dd: DeviceDeaths) -> tuple[float, bool]:
    """``capacity_loss`` that makes the metrics functions stop at ``dd.needed``."""
    entries = dd.death.size
    if dd.needed > entries:
        return 0.0, False
    return (dd.needed - 0.5) / entries, True


def extrapolate(wear: WearResult, dd: DeviceDeaths) -> Lifetime:
    """Estimate (a) at device scale; ``inf`` if end of life cannot be reached."""
    cl, reachable = capacity_share(dd)
    life = lifetime_extrapolated(wear, dd.death, capacity_loss=cl)
    if not dd.exact:
        life.first_failure_writes = lifetime_extrapolated(wear, dd.first[:, None]).first_failure_writes
    if not reachable:
        life.end_writes = float("inf")
    return life


