"""Cell endurance: how many programs a PCM cell survives, and line death with ECP.

Each cell gets its own endurance, drawn from a lognormal (the default) or
from a normal distribution truncated at zero, given by its mean and
coefficient of variation (CoV).  The defaults, mean 1e8 programs and CoV 0.2,
are the values used in the wear-leveling and error-correction literature
(from memory: Qureshi et al., MICRO 2009 assume ~1e8 writes per cell;
Schechter et al., ISCA 2010 model cell lifetimes as normal with mean 1e8 and
CoV 0.2 or 0.25).

Why lognormal by default.  A device holds 1e11 and more cells, so its first
failures come from the far lower tail of the distribution, where the two
laws differ by orders of magnitude.  A normal with CoV 0.2 puts mass
``Phi(-5) ~ 2.9e-7`` below zero: over 1.4e11 cells some 39,000 draws fall
there before truncation, and the weakest cell survives only ~100 programs,
which no wear-out mechanism produces.  The lognormal is the usual law of
wear-out failure times (common practice in reliability engineering, e.g.
electromigration and dielectric wear-out lifetimes; from memory): log
endurance is normal, so endurance is never <= 0 and its lower tail thins
out geometrically.  With the same mean and CoV the weakest of 1.4e11 cells
sits near 2.6e7 programs.  ``dist = "normal"`` keeps the truncated normal
available for comparison with papers that used it.

A line protected by ECP-k (k error-correcting pointers) survives up to k
failed cells and dies at its (k+1)-th cell failure.

Wear is counted in *line-write equivalents*: cell ``b`` of a line that has
received ``W`` write equivalents has been programmed ``W * q[b]`` times on
average, where ``q[b]`` is the probability a write programs that cell
(1 for a full-line write).  A line therefore dies when ``W`` reaches the
(k+1)-th smallest of ``E[b] / q[b]``; :func:`line_death_wear` samples that
threshold for every line.

References
----------
S. Schechter, G. H. Loh, K. Strauss and D. Burger, "Use ECP, not ECC, for
hard failures in resistive memories", ISCA 2010. doi:10.1145/1815961.1815980
M. K. Qureshi et al., "Enhancing lifetime and security of PCM-based main
memory with Start-Gap wear leveling", MICRO 2009.
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy.special import ndtr, ndtri

from memsim.errors import ConfigError

DISTRIBUTIONS = ("normal", "lognormal")

# Above this many sampled cells "auto" switches to order-statistic sampling.
_CELLS_LIMIT = 1 << 24


@dataclass(frozen=True)
class EnduranceModel:
    """Distribution of per-cell endurance (programs until the cell fails).

    Parameters
    ----------
    mean:
        Mean endurance in programs.
    cov:
        Coefficient of variation (standard deviation / mean), >= 0.
    dist:
        ``"lognormal"`` (default) or ``"normal"`` (truncated at > 0).
    """

    mean: float = 1e8
    cov: float = 0.2
    dist: str = "lognormal"

    def __post_init__(self) -> None:
        if not (np.isfinite(self.mean) and self.mean > 0):
            raise ConfigError("endurance.mean", repr(self.mean), "a number > 0")
        if not (np.isfinite(self.cov) and self.cov >= 0):
            raise ConfigError("endurance.cov", repr(self.cov), "a number >= 0")
        if self.dist not in DISTRIBUTIONS:
            raise ConfigError("endurance.dist", repr(self.dist), ", ".join(DISTRIBUTIONS))

    def scaled(self, factor: float) -> EnduranceModel:
        """The same distribution with every endurance divided by ``factor``."""
        return replace(self, mean=self.mean / factor)

    def _lognormal_params(self) -> tuple[float, float]:
        s2 = np.log1p(self.cov**2)
        return float(np.log(self.mean) - s2 / 2), float(np.sqrt(s2))

    def sample(self, rng: np.random.Generator, shape: int | tuple[int, ...]) -> np.ndarray:
        """Draw endurances (float64) of the given shape."""
        if self.cov == 0:
            return np.full(shape, float(self.mean))
        if self.dist == "lognormal":
            mu, s = self._lognormal_params()
            return rng.lognormal(mu, s, size=shape)
        sd = self.cov * self.mean
        x = rng.normal(self.mean, sd, size=shape)
        bad = np.flatnonzero(x <= 0)
        flat = x.reshape(-1)
        while bad.size:                    # truncation by rejection
            flat[bad] = rng.normal(self.mean, sd, size=bad.size)
            bad = bad[flat[bad] <= 0]
        return x

    def cdf(self, y: np.ndarray) -> np.ndarray:
        """CDF of one cell's endurance at ``y`` (inverse of :meth:`ppf`)."""
        y = np.asarray(y, dtype=np.float64)
        if self.cov == 0:
            return (y >= self.mean).astype(np.float64)
        if self.dist == "lognormal":
            mu, s = self._lognormal_params()
            with np.errstate(divide="ignore"):
                return ndtr((np.log(np.maximum(y, 0.0)) - mu) / s)
        sd = self.cov * self.mean
        p0 = ndtr(-self.mean / sd)         # mass cut off below zero
        return np.clip((ndtr((y - self.mean) / sd) - p0) / (1.0 - p0), 0.0, 1.0)

    def weakest_of(self, n: float, u: float | np.ndarray = 0.5) -> np.ndarray:
        """Quantile ``u`` of the smallest endurance among ``n`` i.i.d. cells.

        The minimum of ``n`` draws has CDF ``1 - (1 - F(x))^n``, so its
        quantile is ``F^-1(1 - (1 - u)^(1/n))`` (computed with ``expm1`` and
        ``log1p`` so it stays exact for n of 1e12 and more).
        """
        u = np.asarray(u, dtype=np.float64)
        return self.ppf(-np.expm1(np.log1p(-u) / float(n)))

    def ppf(self, u: np.ndarray) -> np.ndarray:
        """Quantile function (inverse CDF) at probabilities ``u``."""
        u = np.asarray(u, dtype=np.float64)
        if self.cov == 0:
            return np.full(u.shape, float(self.mean))
        if self.dist == "lognormal":
            mu, s = self._lognormal_params()
            return np.exp(mu + s * ndtri(u))
        sd = self.cov * self.mean
        p0 = ndtr(-self.mean / sd)         # mass cut off below zero
        return self.mean + sd * ndtri(p0 + u * (1.0 - p0))


def failed_cells(wear: np.ndarray, endurance: np.ndarray) -> np.ndarray:
    """Failed cells per line: cells whose wear reached their endurance.

    ``wear`` and ``endurance`` have shape ``(lines, cells)``.
    """
    return np.count_nonzero(np.asarray(wear) >= np.asarray(endurance), axis=-1)


def dead_lines(wear: np.ndarray, endurance: np.ndarray, k: int) -> np.ndarray:
    """Lines with more than ``k`` failed cells (dead under ECP-k)."""
    return failed_cells(wear, endurance) > k


def failure_times(endurance: np.ndarray, wear_rate: np.ndarray, k: int) -> np.ndarray:
    """Time of the (k+1)-th cell failure of each line (line death under ECP-k).

    Cell ``b`` fails at ``endurance[b] / wear_rate[b]``; the line dies at the
    (k+1)-th smallest of these (the k-th order statistic, 0-based).  Time is
    in whatever unit ``wear_rate`` is per; cells with zero rate never fail.
    """
    e = np.asarray(endurance, dtype=np.float64)
    r = np.broadcast_to(np.asarray(wear_rate, dtype=np.float64), e.shape)
    with np.errstate(divide="ignore"):
        t = np.where(r > 0, e / np.where(r > 0, r, 1.0), np.inf)
    if k >= t.shape[-1]:
        return np.full(t.shape[:-1], np.inf)
    return np.partition(t, k, axis=-1)[..., k]


def _profile(profile: float | np.ndarray | None, line_bits: int) -> np.ndarray | float:
    if profile is None:
        return 1.0
    if np.ndim(profile) == 0:
        q = float(profile)
        if not 0 < q <= 1:
            raise ConfigError("wear.cells", repr(profile), "a fraction in (0, 1]")
        return q
    q = np.asarray(profile, dtype=np.float64)
    if q.shape != (line_bits,) or np.any(q < 0) or np.any(q > 1):
        raise ConfigError("wear.cells", f"array of shape {q.shape}",
                          f"{line_bits} probabilities in [0, 1]")
    return q


def line_death_wear(rng: np.random.Generator, model: EnduranceModel, n_lines: int,
                    line_bits: int, k: int, *, profile: float | np.ndarray | None = None,
                    copies: int = 1, method: str = "auto") -> np.ndarray:
    """Write equivalents at which each line dies under ECP-k.

    Parameters
    ----------
    rng:
        Generator the endurances are drawn from.
    model:
        Per-cell endurance distribution.
    n_lines:
        Modeled lines.
    line_bits:
        Cells per line.
    k:
        ECP entries per line (the line survives k failed cells).
    profile:
        Per-write program probability of each cell: None (all cells, a
        full-line write), a scalar fraction, or one value per bit position.
    copies:
        Device lines each modeled line stands for (they share its wear but
        have their own cells).
    method:
        ``"cells"`` samples every cell; ``"order_stat"`` samples the
        (k+1)-th order statistic directly as ``F^-1(Beta(k+1, L-k))`` (exact
        for i.i.d. cells with a uniform profile, O(1) per line); ``"auto"``
        uses cells when that is small enough or the profile is not uniform.

    Returns
    -------
    np.ndarray
        Shape ``(n_lines, copies)``, each row sorted ascending; ``inf`` for
        lines that cannot die.

    References
    ----------
    S. Schechter et al., ISCA 2010 (ECP-k); H. A. David and H. N. Nagaraja,
    *Order Statistics*, 3rd ed., Wiley 2003 (U_(j) ~ Beta(j, n - j + 1)).
    """
    q = _profile(profile, line_bits)
    if k < 0:
        raise ConfigError("endurance.ecp_entries", repr(k), "an integer >= 0")
    rows = n_lines * copies
    uniform = np.ndim(q) == 0
    if method == "auto":
        method = "cells" if (not uniform or rows * line_bits <= _CELLS_LIMIT) else "order_stat"
    if method not in ("cells", "order_stat") or (method == "order_stat" and not uniform):
        raise ConfigError("endurance.sampling", repr(method),
                          "cells, auto, or order_stat (uniform profile only)")
    if k >= line_bits:
        return np.full((n_lines, copies), np.inf)
    if method == "order_stat":
        u = rng.beta(k + 1, line_bits - k, size=rows)
        out = model.ppf(u) / q
    else:
        out = np.empty(rows)
        block = max(1, _CELLS_LIMIT // (4 * line_bits))
        inv_q = np.where(np.asarray(q) > 0, 1.0 / np.where(np.asarray(q) > 0, q, 1), np.inf)
        for lo in range(0, rows, block):
            hi = min(rows, lo + block)
            e = model.sample(rng, (hi - lo, line_bits)) * inv_q
            out[lo:hi] = np.partition(e, k, axis=1)[:, k]
    return np.sort(out.reshape(n_lines, copies), axis=1)
