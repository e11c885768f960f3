"""Resistance drift, the read errors it causes in a line, and the line age at
which a refresh is due.

Drift law, per cell, for ``t0 <= t <= t_max``::

    log10 R(t) = log10 R0 + nu * log10(t / t0)

with ``log10 R0`` from programming (see :mod:`memsim.tech.mlc`) and
``nu ~ N(drift_nu[l], drift_nu_sd[l])`` drawn per cell, independent of R0.
The power law is an empirical fit that holds only inside a time window: before
``t0`` we hold R at R0 (the fit's reference point), past ``t_max`` the law is
extrapolated (or clamped on request) and every result is flagged.

Temperature speeds drift up like a thermally activated process: an age ``t``
at temperature ``T`` counts as ``t * exp(Ea/k (1/T_ref - 1/T))`` at the
reference temperature the drift parameters were measured at.

Crystallization (:mod:`memsim.tech.retention`): amorphous levels also
crystallize at temperature; a crystallized cell reads as the lowest level.
This is independent of drift and is combined with it per cell.

Unconverged cells.  A cell that still fails to verify at the iteration cap
(probability :meth:`MlcCell.p_unconverged` per level) keeps an R0 outside
its verify band: the programming normal conditioned on ``|z| > k``.  These
cells are misread from time 0 on, in either direction.

Errors.  Drift only raises resistance, so a cell programmed to level ``l`` is
misread when ``log10 R(t)`` passes the read threshold above ``l``; it may pass
several thresholds.  Reads below the target (a normal ``nu`` has a small
negative tail) are not drift and are not counted.  With R0 normal the age-``t``
value is normal, ``N(mu_R + mu_nu x, s_R^2 + s_nu^2 x^2)`` with
``x = log10(t/t0)``, so crossing probabilities are closed-form; with a verify
band (truncated R0) they are a one-dimensional integral done by adaptive
quadrature.  A misread to level ``j`` flips as many bits as the Gray-code words
of ``l`` and ``j`` differ (one bit for an adjacent level).

References
----------
.. [1] D. Ielmini, A. L. Lacaita, D. Mantegazza, "Recovery and drift dynamics of
   resistance and threshold voltages in phase-change memories", IEEE Trans.
   Electron Devices 54(2), 2007.
.. [2] M. Awasthi, M. Shevgoor, K. Sudan, B. Rajendran, R. Balasubramonian,
   V. Srinivasan, "Efficient scrub mechanisms for error-prone emerging
   memories", HPCA 2012.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import constants, integrate, optimize, special, stats

from memsim.errors import ConfigError
from memsim.tech.mlc import TRI_PAIR_WORD, TRI_WORD_LEVELS, MlcCell, level_to_bits
from memsim.tech.retention import Retention

K_B_EV_PER_K: float = constants.physical_constants["Boltzmann constant in eV/K"][0]
LINE_FAIL_METHODS = ("binomial", "exact")
# Gaussian tails below this many standard deviations underflow a double.
_UNDERFLOW_Z = 38.5


@dataclass(frozen=True)
class DriftParams:
    """Drift of each level and the window in which the power law holds.

    Attributes
    ----------
    drift_nu, drift_nu_sd:
        Mean and standard deviation of the drift exponent per level, lowest
        resistance first.
    drift_t0_s:
        Reference time of the law (R0 is the resistance at ``t0``).
    drift_t_max_s:
        Longest (reference-temperature) age for which the law is trusted.
    drift_activation_ev:
        Activation energy of drift acceleration; ``None`` = only the reference
        temperature is allowed.  There is no default: drift is structural
        relaxation with a spread of activation energies, so its speed-up with
        temperature does not follow one Arrhenius law and the drift exponent
        itself changes with temperature (Ielmini, Lacaita, Mantegazza, IEEE
        Trans. Electron Devices 54, 2007; from memory).  A single value must
        come from the user's own device data.
    drift_reference_k:
        Temperature at which the drift parameters hold.
    retention:
        Crystallization of amorphous levels at temperature
        (:class:`memsim.tech.retention.Retention`); ``None`` = not modeled.
    """

    drift_nu: tuple[float, ...]
    drift_nu_sd: tuple[float, ...]
    drift_t0_s: float = 1.0
    drift_t_max_s: float = 1e9
    drift_activation_ev: float | None = None
    drift_reference_k: float = 300.0
    retention: Retention | None = None

    def __post_init__(self) -> None:
        nu = tuple(float(v) for v in np.atleast_1d(self.drift_nu))
        sd = tuple(float(v) for v in np.atleast_1d(self.drift_nu_sd))
        if len(sd) == 1 and len(nu) > 1:
            sd = sd * len(nu)
        if len(sd) != len(nu):
            raise ConfigError("cell.drift_nu_sd", f"{len(sd)} values", f"one number or {len(nu)} values")
        if min(sd) < 0:
            raise ConfigError("cell.drift_nu_sd", repr(self.drift_nu_sd), "numbers >= 0")
        if not self.drift_t0_s > 0:
            raise ConfigError("cell.drift_t0_s", repr(self.drift_t0_s), "a number > 0")
        if not self.drift_t_max_s > self.drift_t0_s:
            raise ConfigError("cell.drift_t_max_s", repr(self.drift_t_max_s), "a number > drift_t0_s")
        if self.drift_activation_ev is not None and not self.drift_activation_ev >= 0:
            raise ConfigError(
                "cell.drift_activation_ev", repr(self.drift_activation_ev), "a number >= 0, or absent"
            )
        if not self.drift_reference_k > 0:
            raise ConfigError("cell.drift_reference_k", repr(self.drift_reference_k), "a number > 0 (kelvin)")
        object.__setattr__(self, "drift_nu", nu)
        object.__setattr__(self, "drift_nu_sd", sd)

    @classmethod
    def from_dict(cls, d: Mapping[str, Any], n_levels: int, where: str = "cell") -> DriftParams:
        """Build from a config section.  ``drift_nu`` is one number or one per
        level; the spread is ``drift_nu_sd`` (absolute) or ``drift_nu_rel_sd``
        (fraction of each level's mean), not both."""
        if "drift_nu" not in d:
            raise ConfigError(where, "missing drift_nu", f"drift_nu: one number or {n_levels} numbers")
        nu = np.asarray(d["drift_nu"], dtype=np.float64)
        if nu.ndim == 0:
            nu = np.full(n_levels, float(nu))
        if nu.shape != (n_levels,):
            raise ConfigError(f"{where}.drift_nu", f"{nu.size} values", f"one number or {n_levels} numbers")
        has_abs, has_rel = "drift_nu_sd" in d, "drift_nu_rel_sd" in d
        if has_abs == has_rel:
            raise ConfigError(where, "both or neither of drift_nu_sd, drift_nu_rel_sd", "exactly one of them")
        if has_rel:
            rel = float(d["drift_nu_rel_sd"])
            if rel < 0:
                raise ConfigError(f"{where}.drift_nu_rel_sd", repr(rel), "a number >= 0")
            sd = tuple(rel * abs(nu))
        else:
            sd = tuple(np.atleast_1d(np.asarray(d["drift_nu_sd"], dtype=np.float64)))
        kw = {
            k: d[k]
            for k in ("drift_t0_s", "drift_t_max_s", "drift_activation_ev", "drift_reference_k")
            if k in d
        }
        return cls(drift_nu=tuple(nu), drift_nu_sd=sd, retention=d.get("retention"), **kw)

    def without_drift(self) -> DriftParams:
        """The same cell with drift switched off (crystallization only)."""
        n = len(self.drift_nu)
        return DriftParams((0.0,) * n, (0.0,) * n, self.drift_t0_s, self.drift_t_max_s, 0.0,
                           self.drift_reference_k, self.retention)

    def acceleration(self, temp_k: float | None) -> float:
        """Arrhenius factor of ``temp_k`` against the reference (1 if ``None``)."""
        if temp_k is None or temp_k == self.drift_reference_k:
            return 1.0
        if self.drift_activation_ev is None:
            raise ConfigError(
                "refresh.temperature_k",
                repr(temp_k),
                f"{self.drift_reference_k} (set cell.drift_activation_ev to use another)",
            )
        return arrhenius_factor(temp_k, self.drift_reference_k, self.drift_activation_ev)


@dataclass(frozen=True)
class RefreshAge:
    """Line age at which the probability of an uncorrectable line reaches the target.

    ``status`` is ``"found"``; ``"at_start"`` (already above target at the start
    of the drift window, ``age_s`` = that start); or ``"not_in_window"`` (still
    below target at the end of the window, ``age_s`` = inf).  ``p_fail`` is the
    probability at ``age_s`` (at the window end for ``"not_in_window"``).
    """

    age_s: float
    status: str
    p_fail: float
    window_end_s: float


# ----------------------------------------------------------------- the law
def arrhenius_factor(temp_k: float, reference_k: float, activation_ev: float) -> float:
    """Time acceleration ``exp(Ea/k (1/T_ref - 1/T))`` (> 1 when hotter)."""
    if temp_k <= 0 or reference_k <= 0:
        raise ConfigError("refresh.temperature_k", f"{temp_k} / {reference_k}", "temperatures > 0 K")
    return math.exp(activation_ev / K_B_EV_PER_K * (1.0 / reference_k - 1.0 / temp_k))


def drift_log10_r(
    log10_r0: np.ndarray | float, nu: np.ndarray | float, age_s: np.ndarray | float, t0_s: float = 1.0
) -> np.ndarray:
    """``log10 R0 + nu log10(t/t0)``; ages below ``t0`` are held at ``R0``."""
    x = np.log10(np.maximum(np.asarray(age_s, dtype=np.float64), t0_s) / t0_s)
    return np.asarray(log10_r0) + np.asarray(nu) * x


def drift_decades(
    ages_s: np.ndarray | Sequence[float] | float,
    drift: DriftParams,
    temp_k: float | None = None,
    beyond: str = "extrapolate",
) -> tuple[np.ndarray, np.ndarray]:
    """Decades of drift ``x`` at each (wall-clock) age, and whether the
    reference-temperature age lies inside ``[t0, t_max]``.

    ``beyond="clamp"`` holds ``x`` at its ``t_max`` value past the window.
    """
    if beyond not in ("extrapolate", "clamp"):
        raise ConfigError("refresh.beyond_window", repr(beyond), "extrapolate or clamp")
    age = np.atleast_1d(np.asarray(ages_s, dtype=np.float64))
    if np.any(age < 0) or not np.all(np.isfinite(age)):
        raise ConfigError("ages_s", "negative or non-finite ages", "finite ages >= 0 s")
    eff = age * drift.acceleration(temp_k)
    t0, tmax = drift.drift_t0_s, drift.drift_t_max_s
    inside = (eff >= t0) & (eff <= tmax)
    if beyond == "clamp":
        eff = np.minimum(eff, tmax)
    return np.log10(np.maximum(eff, t0) / t0), inside


def _check_pair(cell: MlcCell, drift: DriftParams) -> None:
    if len(drift.drift_nu) != cell.n_levels:
        raise ConfigError(
            "cell.drift_nu", f"{len(drift.drift_nu)} values", f"{cell.n_levels} (one per level)"
        )


# ----------------------------------------------------- crossing probabilities
def _survival_truncated(mu: float, sig: float, k: float, m: float, s: float, th: float, x: float) -> float:
    """P(R0 + nu x > th), R0 ~ N(mu, sig) cut at +-k sig, nu ~ N(m, s)."""
    zs = (th - mu - m * x) / sig  # where the integrand steps up
    mass = special.ndtr(k) - special.ndtr(-k)
    w = s * x / sig  # width of the step, in units of z
    if w == 0.0:
        return float(max(special.ndtr(k) - special.ndtr(max(zs, -k)), 0.0) / mass) if zs < k else 0.0
    if (zs - k) / w > _UNDERFLOW_Z:
        return 0.0

    def f(z: float) -> float:
        return special.ndtr(-(zs - z) / w) * math.exp(-0.5 * z * z)

    pts = sorted({min(max(p, -k), k) for p in (zs - 8 * w, zs, zs + 8 * w)} - {-k, k})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", integrate.IntegrationWarning)
        val, _ = integrate.quad(f, -k, k, points=pts or None, epsabs=0.0, epsrel=1e-10, limit=400)
    return float(val / math.sqrt(2 * math.pi) / mass)


def _upward_survival(cell: MlcCell, drift: DriftParams, x: np.ndarray) -> np.ndarray:
    """``S[a, l, j] = P(log10 R_l(x_a) > th_j)`` for ``j >= l``; ``S[..., L-1] = 0``
    (no threshold above the top level); entries with ``j < l`` are 1."""
    _check_pair(cell, drift)
    L = cell.n_levels
    mu, sig, th = cell.level_mu, cell.level_sigma, cell.thresholds
    m, s = np.asarray(drift.drift_nu), np.asarray(drift.drift_nu_sd)
    S = np.ones((x.size, L, L))
    S[:, :, L - 1] = 0.0
    if cell.verify_band_sigma is None:
        mean = mu[None, :, None] + m[None, :, None] * x[:, None, None]
        sd = np.sqrt(sig[None, :, None] ** 2 + (s[None, :, None] * x[:, None, None]) ** 2)
        z = (th[None, None, :] - mean) / sd
        body = special.ndtr(-z)  # accurate far into the tail
        upper = np.triu(np.ones((L, L - 1), dtype=bool))
        S[:, :, : L - 1] = np.where(upper[None], body, 1.0)
        return S
    k = cell.verify_band_sigma
    for a, xa in enumerate(x):
        for lv in range(L - 1):
            for j in range(lv, L - 1):
                S[a, lv, j] = _survival_truncated(mu[lv], sig[lv], k, m[lv], s[lv], th[j], float(xa))
    return S


def _landing(S: np.ndarray) -> np.ndarray:
    """``P[a, l, j]``: probability a cell of level l reads as level j (j >= l)."""
    L = S.shape[1]
    P = np.zeros_like(S)
    for lv in range(L):
        above = S[:, lv, lv:]  # P(> th_j), j = l .. L-1
        P[:, lv, lv] = 1.0 - above[:, 0]
        if lv < L - 1:
            P[:, lv, lv + 1 :] = np.clip(above[:, :-1] - above[:, 1:], 0.0, 1.0)
    return P


def _unconverged_landing(cell: MlcCell, drift: DriftParams, x: np.ndarray) -> np.ndarray:
    """``P[a, l, j]`` for cells left outside their verify band at the iteration cap.

    Their R0 is the programming normal conditioned on ``|z| > k``; since the
    full normal is the mixture of the in-band and out-of-band parts,
    ``S_out = (S_full - (1 - q) S_band) / q`` with ``q = P(|z| > k)``.  Misreads
    below the target count here (the cell never reached its band)."""
    L, k = cell.n_levels, float(cell.verify_band_sigma)
    mu, sig, th = cell.level_mu, cell.level_sigma, cell.thresholds
    m, s = np.asarray(drift.drift_nu), np.asarray(drift.drift_nu_sd)
    q = 2.0 * special.ndtr(-k)
    P = np.zeros((x.size, L, L))
    for a, xa in enumerate(x):
        for lv in range(L):
            mean, sd = mu[lv] + m[lv] * xa, math.hypot(sig[lv], s[lv] * xa)
            full = special.ndtr(-(th - mean) / sd)
            band = np.array([_survival_truncated(mu[lv], sig[lv], k, m[lv], s[lv], t, float(xa)) for t in th])
            surv = np.clip((full - (1.0 - q) * band) / q, 0.0, 1.0)
            surv = np.minimum.accumulate(np.concatenate([[1.0], surv, [0.0]]))
            P[a, lv] = surv[:-1] - surv[1:]
    return P


def crossing_prob(
    cell: MlcCell,
    drift: DriftParams,
    ages_s: np.ndarray | Sequence[float] | float,
    temp_k: float | None = None,
) -> np.ndarray:
    """Probability, per age and level, that a cell reads above its upper read
    threshold (shape ``(n_ages, n_levels)``; the top level is always 0)."""
    x, _ = drift_decades(ages_s, drift, temp_k)
    S = _upward_survival(cell, drift, x)
    return np.stack([S[:, lv, lv] for lv in range(cell.n_levels)], axis=1)


def crossing_prob_mc(
    cell: MlcCell,
    drift: DriftParams,
    level: int,
    ages_s: np.ndarray | Sequence[float] | float,
    n_cells: int,
    rng: np.random.Generator,
    temp_k: float | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Monte Carlo estimate of :func:`crossing_prob` for one level: ``n_cells``
    cells, each with its own R0 and nu, observed at every age.

    Returns the estimate and its standard error ``sqrt(p(1-p)/n)``.
    """
    _check_pair(cell, drift)
    if not 0 <= level < cell.n_levels:
        raise ValueError(f"level must be in [0, {cell.n_levels})")
    x, _ = drift_decades(ages_s, drift, temp_k)
    if level == cell.n_levels - 1:
        z = np.zeros(x.size)
        return z, z.copy()
    r0 = cell.sample_program_log10_r(np.full(n_cells, level), rng)
    nu = drift.drift_nu[level] + drift.drift_nu_sd[level] * rng.standard_normal(n_cells)
    th = cell.thresholds[level]
    p = np.array([np.mean(r0 + nu * xa > th) for xa in x])
    return p, np.sqrt(p * (1.0 - p) / n_cells)


# ----------------------------------------------------------- bit errors
def crystallized_prob(drift: DriftParams, ages_s: np.ndarray | Sequence[float] | float,
                      temp_k: float | None = None) -> np.ndarray:
    """Probability that an amorphous cell has crystallized by each (wall-clock)
    age at ``temp_k``; zeros when retention is not modeled."""
    age = np.atleast_1d(np.asarray(ages_s, dtype=np.float64))
    if drift.retention is None:
        return np.zeros(age.size)
    return drift.retention.fail_prob(age, temp_k)


def _bit_error_parts(
    cell: MlcCell, drift: DriftParams, ages_s: np.ndarray | Sequence[float] | float, temp_k: float | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    x, inside = drift_decades(ages_s, drift, temp_k)
    S = _upward_survival(cell, drift, x)
    P = _landing(S)
    u = cell.p_unconverged() if cell.verify_band_sigma is not None else np.zeros(cell.n_levels)
    if np.any(u > 0):
        P = (1.0 - u)[None, :, None] * P + u[None, :, None] * _unconverged_landing(cell, drift, x)
    if drift.retention is not None:
        # A crystallized cell reads as the lowest level, whatever it drifted to.
        f = crystallized_prob(drift, ages_s, temp_k)[:, None, None]
        P[:, 1:, :] *= 1.0 - f
        P[:, 1:, 0] += f[:, :, 0]
    return S, P, inside


def _rber_by_level(cell: MlcCell, P: np.ndarray) -> np.ndarray:
    return np.einsum("alj,lj->al", P, cell.bit_distance()) / cell.bits_stored


def _cell_pmf(cell: MlcCell, P: np.ndarray, w: np.ndarray) -> np.ndarray:
    if cell.tri_level:
        raise ConfigError("refresh.fail_model", "'exact' with tri-level cells",
                          "binomial (the exact per-cell pmf needs whole bits per cell)")
    D = cell.bit_distance().astype(np.int64)
    q = np.zeros((P.shape[0], cell.bits_per_cell + 1))
    for nbits in range(1, cell.bits_per_cell + 1):
        q[:, nbits] = np.einsum("alj,lj,l->a", P, D == nbits, w)
    q[:, 0] = 1.0 - q[:, 1:].sum(axis=1)
    return q


def rber_by_level(
    cell: MlcCell,
    drift: DriftParams,
    ages_s: np.ndarray | Sequence[float] | float,
    temp_k: float | None = None,
) -> np.ndarray:
    """Raw bit error rate of cells programmed to each level: expected flipped
    bits per stored bit, shape ``(n_ages, n_levels)``."""
    _, P, _ = _bit_error_parts(cell, drift, ages_s, temp_k)
    return _rber_by_level(cell, P)


def line_rber(
    cell: MlcCell,
    drift: DriftParams,
    ages_s: np.ndarray | Sequence[float] | float,
    temp_k: float | None = None,
    level_probs: Sequence[float] | np.ndarray | None = None,
) -> np.ndarray:
    """Raw bit error rate of a line whose cells occupy levels with
    ``level_probs`` (``None`` = uniform, i.e. random data)."""
    return rber_by_level(cell, drift, ages_s, temp_k) @ cell.level_probs(level_probs)


def cell_bit_error_pmf(
    cell: MlcCell,
    drift: DriftParams,
    ages_s: np.ndarray | Sequence[float] | float,
    temp_k: float | None = None,
    level_probs: Sequence[float] | np.ndarray | None = None,
) -> np.ndarray:
    """``q[a, k]``: probability that one cell (level drawn from the occupancy)
    has ``k`` flipped bits at age ``a``, ``k = 0 .. bits_per_cell``."""
    _, P, _ = _bit_error_parts(cell, drift, ages_s, temp_k)
    return _cell_pmf(cell, P, cell.level_probs(level_probs))


def rber_mc(
    cell: MlcCell,
    drift: DriftParams,
    ages_s: np.ndarray | Sequence[float] | float,
    n_cells: int,
    rng: np.random.Generator,
    temp_k: float | None = None,
    level_probs: Sequence[float] | np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Monte Carlo line RBER: random levels, R0 and nu per cell, read back
    through the thresholds, compared bit by bit.  Returns estimate and
    standard error (over cells)."""
    _check_pair(cell, drift)
    x, _ = drift_decades(ages_s, drift, temp_k)
    if cell.tri_level:
        if level_probs is not None:
            raise ValueError("tri-level Monte Carlo draws random words; level_probs must be None")
        words = rng.integers(0, 8, size=n_cells // 2)
        lv = TRI_WORD_LEVELS[words].reshape(-1)
        n_cells = lv.size
    else:
        w = cell.level_probs(level_probs)
        lv = rng.choice(cell.n_levels, size=n_cells, p=w)
    r0, unconv = cell.sample_written_log10_r(lv, rng)
    nu = np.asarray(drift.drift_nu)[lv] + np.asarray(drift.drift_nu_sd)[lv] * rng.standard_normal(n_cells)
    stored = None if cell.tri_level else level_to_bits(lv, cell.bits_per_cell)
    est, se = np.empty(x.size), np.empty(x.size)
    cryst = crystallized_prob(drift, ages_s, temp_k)
    for a, xa in enumerate(x):
        read = cell.read_level(r0 + nu * xa)
        read = np.where(unconv, read, np.maximum(read, lv))  # converged cells: only upward misreads are drift
        if drift.retention is not None:
            read = np.where((lv > 0) & (rng.random(n_cells) < cryst[a]), 0, read)
        if cell.tri_level:
            pair = read.reshape(-1, 2)
            diff = TRI_PAIR_WORD[pair[:, 0], pair[:, 1]] ^ words
            flips = ((diff & 1) + ((diff >> 1) & 1) + ((diff >> 2) & 1)) / 3.0
        else:
            flips = (level_to_bits(read, cell.bits_per_cell) != stored).sum(axis=1) / cell.bits_per_cell
        est[a] = flips.mean()
        se[a] = flips.std(ddof=1) / math.sqrt(flips.size)
    return est, se


# ----------------------------------------------------------- line failure
def p_line_fail_binomial(rber: np.ndarray | float, n_bits: int, correctable_bits: int) -> np.ndarray:
    """P(more than ``correctable_bits`` of ``n_bits`` independent bits are wrong)."""
    return np.asarray(stats.binom.sf(correctable_bits, n_bits, np.clip(rber, 0.0, 1.0)), dtype=np.float64)


def _pmf_power(q: np.ndarray, n: int) -> np.ndarray:
    out, base = np.array([1.0]), q
    while n:
        if n & 1:
            out = np.convolve(out, base)
        n >>= 1
        if n:
            base = np.convolve(base, base)
    return out


def p_line_fail_exact(cell_pmf: np.ndarray, n_cells: int, correctable_bits: int) -> np.ndarray:
    """P(more than ``correctable_bits`` flipped bits in ``n_cells`` independent
    cells) from the per-cell pmf of flipped bits (rows = ages).  Exact where
    one cell can flip several bits; the binomial form treats bits as independent."""
    q = np.atleast_2d(np.asarray(cell_pmf, dtype=np.float64))
    return np.array([_pmf_power(row, int(n_cells))[correctable_bits + 1 :].sum() for row in q])


def rber_limit(n_bits: int, correctable_bits: int, max_fail_prob: float) -> float:
    """Largest raw bit error rate at which ``p_line_fail_binomial`` stays at
    ``max_fail_prob`` (the ECC limit)."""
    _check_target(max_fail_prob)
    if correctable_bits >= n_bits:
        return 1.0

    def g(u: float) -> float:
        return math.log(max(float(stats.binom.sf(correctable_bits, n_bits, 10.0**u)), 1e-300)) - math.log(
            max_fail_prob
        )

    return 10.0 ** optimize.brentq(g, -300.0, 0.0, xtol=1e-13)


def _check_target(p: float) -> None:
    if not 0.0 < p < 1.0:
        raise ConfigError("refresh.max_fail_prob", repr(p), "a probability strictly between 0 and 1")


def line_fail_prob(
    cell: MlcCell,
    drift: DriftParams,
    ages_s: np.ndarray | Sequence[float] | float,
    n_cells: int,
    correctable_bits: int,
    temp_k: float | None = None,
    level_probs: Sequence[float] | np.ndarray | None = None,
    method: str = "binomial",
) -> np.ndarray:
    """Probability that a line of ``n_cells`` cells has more than
    ``correctable_bits`` bit errors at each age (``method`` binomial or exact)."""
    if method not in LINE_FAIL_METHODS:
        raise ConfigError("refresh.fail_model", repr(method), " or ".join(LINE_FAIL_METHODS))
    if n_cells < 1 or correctable_bits < 0:
        raise ConfigError(
            "refresh.correctable_bits",
            f"n_cells={n_cells}, correctable_bits={correctable_bits}",
            "n_cells >= 1 and correctable_bits >= 0",
        )
    _, P, _ = _bit_error_parts(cell, drift, ages_s, temp_k)
    w = cell.level_probs(level_probs)
    return _p_fail(cell, P, w, _rber_by_level(cell, P) @ w, n_cells, correctable_bits, method)


def _p_fail(cell: MlcCell, P: np.ndarray, w: np.ndarray, rber: np.ndarray, n_cells: int,
            correctable_bits: int, method: str) -> np.ndarray:
    """P(more than ``correctable_bits`` errors in the line), by ``method``."""
    if method == "binomial":
        return p_line_fail_binomial(rber, round(n_cells * cell.bits_stored), correctable_bits)
    return p_line_fail_exact(_cell_pmf(cell, P, w), n_cells, correctable_bits)


def refresh_age(
    cell: MlcCell,
    drift: DriftParams,
    n_cells: int,
    correctable_bits: int,
    max_fail_prob: float,
    temp_k: float | None = None,
    level_probs: Sequence[float] | np.ndarray | None = None,
    method: str = "binomial",
    grid_points: int = 81,
) -> RefreshAge:
    """Earliest line age (s, wall clock) at which the probability of an
    uncorrectable line reaches ``max_fail_prob``: the refresh age.

    The window ``[t0, t_max]`` (reference-temperature ages, divided by the
    acceleration for wall clock) is scanned on a log grid; the first bracket
    where the probability reaches the target is refined by Brent's method on
    ``log P - log target`` against ``log10 t``.
    """
    _check_target(max_fail_prob)
    af = drift.acceleration(temp_k)
    lo, hi = math.log10(drift.drift_t0_s / af), math.log10(drift.drift_t_max_s / af)
    grid = np.linspace(lo, hi, grid_points)

    def prob(u: np.ndarray | float) -> np.ndarray:
        return line_fail_prob(
            cell, drift, 10.0 ** np.atleast_1d(u), n_cells, correctable_bits, temp_k, level_probs, method
        )

    p = prob(grid)
    hit = np.flatnonzero(p >= max_fail_prob)
    if hit.size == 0:
        return RefreshAge(math.inf, "not_in_window", float(p[-1]), 10.0**hi)
    i = int(hit[0])
    if i == 0:
        return RefreshAge(10.0**lo, "at_start", float(p[0]), 10.0**hi)
    log_target = math.log(max_fail_prob)

    def g(u: float) -> float:
        return math.log(max(float(prob(u)[0]), 1e-300)) - log_target

    u = optimize.brentq(g, grid[i - 1], grid[i], xtol=1e-12, rtol=4 * np.finfo(float).eps)
    return RefreshAge(10.0**u, "found", float(prob(u)[0]), 10.0**hi)


def error_table(
    cell: MlcCell,
    drift: DriftParams,
    ages_s: np.ndarray | Sequence[float],
    n_cells: int,
    correctable_bits: int,
    temp_k: float | None = None,
    level_probs: Sequence[float] | np.ndarray | None = None,
    method: str = "binomial",
) -> pd.DataFrame:
    """Error rates of a line versus its age.

    Columns: ``age_s``, ``in_window`` (reference-temperature age inside the
    drift law's window), ``cross_prob_level_<l>``, ``rber_level_<l>``,
    ``cryst_prob`` (an amorphous cell has crystallized), ``rber_line`` and ``p_uncorrectable`` (more than ``correctable_bits``
    errors in the line).
    """
    if method not in LINE_FAIL_METHODS:
        raise ConfigError("refresh.fail_model", repr(method), " or ".join(LINE_FAIL_METHODS))
    ages = np.atleast_1d(np.asarray(ages_s, dtype=np.float64))
    S, P, inside = _bit_error_parts(cell, drift, ages, temp_k)
    w = cell.level_probs(level_probs)
    by_level = _rber_by_level(cell, P)
    rber = by_level @ w
    pfail = _p_fail(cell, P, w, rber, n_cells, correctable_bits, method)
    cols: dict[str, np.ndarray] = {"age_s": ages, "in_window": inside}
    for lv in range(cell.n_levels):
        cols[f"cross_prob_level_{lv}"] = S[:, lv, lv]
    for lv in range(cell.n_levels):
        cols[f"rber_level_{lv}"] = by_level[:, lv]
    cols["cryst_prob"] = crystallized_prob(drift, ages, temp_k)
    cols["rber_line"] = rber
    cols["p_uncorrectable"] = pfail
    return pd.DataFrame(cols)
