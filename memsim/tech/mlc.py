"""Multi-level cell programming: levels, read thresholds, Gray code and
iterative program-and-verify.

A cell stores ``bits_per_cell`` bits (1, 2 or 3) as one of ``2**bits`` resistance
levels.  Level 0 is the lowest resistance (fully crystalline, SET) and the top
level the highest (fully amorphous, RESET).  The programmed resistance of a
level is log-normal: ``log10 R0 ~ N(level_log10_ohm[l], program_sigma_decades[l])``,
optionally cut at ``+-verify_band_sigma`` sigma because program-and-verify
re-pulses a cell until its read-back lands inside the verify band.

Program-and-verify: a write to level ``l`` repeats "pulse, then verify read"
until the cell verifies or ``pv_max_iterations`` is reached.  The number of
iterations ``N`` follows one of two models, both parameterized by the uncapped
mean ``m_l = pv_mean_iterations[l] >= 1``:

``"geometric"``
    Each iteration lands in the verify band independently with probability
    ``p = 1 / m_l`` (memoryless attempts): ``N = min(Geom(p), cap)``.
``"poisson"``
    A first pulse always, then a Poisson number of corrections:
    ``N = min(1 + Poisson(m_l - 1), cap)``.  Less spread than geometric; fits
    staircase schemes that converge step by step.

The geometric model is the conservative default (larger tail of slow writes).
Each iteration costs ``pulse_ns[l] + verify_ns`` and ``pulse_pj[l] + verify_pj``
and one pulse of wear.  Expected values are exact sums over the capped pmf, so
tests can compare sampled moments with them.

Bits map to levels by a reflected binary Gray code, so a cell read as an
adjacent level flips exactly one of its bits.

References
----------
.. [1] T. Nirschl et al., "Write strategies for 2 and 4-bit multi-level
   phase-change memory", IEDM 2007 (iterative program-and-verify).
.. [2] F. Gray, "Pulse code communication", US patent 2,632,058, 1953.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import MISSING, dataclass, fields
from typing import Any

import numpy as np
from scipy import stats

from memsim.errors import ConfigError

PV_MODELS = ("geometric", "poisson")


# ----------------------------------------------------------------- Gray code
def gray_code(levels: np.ndarray | int) -> np.ndarray:
    """Gray code word stored by each level: ``l ^ (l >> 1)``."""
    lv = np.asarray(levels, dtype=np.int64)
    return lv ^ (lv >> 1)


def gray_decode(codes: np.ndarray | int) -> np.ndarray:
    """Level whose Gray code word is ``codes`` (inverse of :func:`gray_code`)."""
    g = np.asarray(codes, dtype=np.int64)
    lv = g.copy()
    shift = g >> 1
    while np.any(shift):
        lv ^= shift
        shift = shift >> 1
    return lv


def level_to_bits(levels: np.ndarray | int, bits_per_cell: int) -> np.ndarray:
    """Bits stored by each level, most significant first: shape ``(..., bits)``."""
    g = gray_code(levels)
    pos = np.arange(bits_per_cell - 1, -1, -1, dtype=np.int64)
    return ((g[..., None] >> pos) & 1).astype(np.uint8)


def bits_to_level(bits: np.ndarray) -> np.ndarray:
    """Level that stores ``bits`` (last axis, most significant first)."""
    b = np.asarray(bits, dtype=np.int64)
    n = b.shape[-1]
    weights = 1 << np.arange(n - 1, -1, -1, dtype=np.int64)
    return gray_decode((b * weights).sum(axis=-1))


def bit_distance_matrix(bits_per_cell: int) -> np.ndarray:
    """``D[i, j]`` = bits that differ between the words of level i and level j."""
    n = 1 << bits_per_cell
    g = gray_code(np.arange(n))
    x = g[:, None] ^ g[None, :]
    d = np.zeros_like(x)
    for _ in range(bits_per_cell):
        d += x & 1
        x = x >> 1
    return d


# ------------------------------------------------------- tri-level pairs
# Two tri-level cells store one 3-bit word (8 of the 3 x 3 level pairs).  The
# word of each (level of cell A, level of cell B): every pair of used
# neighbours (one cell one level apart) differs in one bit.  The middle-middle
# pair is unused; a read that lands there decodes as word 0.
TRI_PAIR_WORD = np.array([[0, 1, 3],
                          [2, 0, 7],
                          [6, 4, 5]], dtype=np.int64)
TRI_PAIR_USED = np.array([[True, True, True], [True, False, True], [True, True, True]])
TRI_WORD_LEVELS = np.array([[0, 0], [0, 1], [1, 0], [0, 2], [2, 1], [2, 2], [2, 0], [1, 2]], dtype=np.int64)


def tri_distance_matrix() -> np.ndarray:
    """``D[i, j]``: expected bits flipped when one cell of a tri-level pair at
    level i reads as level j, averaged over both cells of the pair and the
    eight words (uniformly random data)."""
    d = np.zeros((3, 3))
    count = np.zeros(3)
    for w, (a, b) in enumerate(TRI_WORD_LEVELS):
        for pos in (0, 1):
            lv = (a, b)[pos]
            count[lv] += 1
            for j in range(3):
                pair = [a, b]
                pair[pos] = j
                read = TRI_PAIR_WORD[pair[0], pair[1]]
                d[lv, j] += (int(w) ^ int(read)).bit_count()
    return d / count[:, None]


# ----------------------------------------------------------------- the cell
def _per_level(name: str, value: float | Sequence[float], n: int) -> tuple[float, ...]:
    if np.ndim(value) == 0:
        return (float(value),) * n  # type: ignore[arg-type]
    vals = tuple(float(v) for v in value)  # type: ignore[union-attr]
    if len(vals) != n:
        raise ConfigError(f"cell.{name}", f"{len(vals)} values", f"one number or {n} values (one per level)")
    return vals


@dataclass(frozen=True)
class MlcCell:
    """One PCM cell storing 1, 2 or 3 bits, or a tri-level cell (three levels,
    two cells per 3-bit word; ``bits_per_cell`` is then not used).  Per-level fields accept one number
    (same for every level) or one value per level, lowest resistance first.

    Attributes
    ----------
    bits_per_cell:
        1, 2 or 3.
    level_log10_ohm:
        Target log10 resistance of each level, strictly increasing.
    program_sigma_decades:
        Standard deviation of log10 R right after programming.
    read_thresholds_log10_ohm:
        Read thresholds between adjacent levels; ``None`` = midpoints in log space.
    verify_band_sigma:
        Program-and-verify keeps log10 R0 within this many sigma of the target
        (truncated normal); ``None`` = plain normal.
    pv_model:
        ``"geometric"`` or ``"poisson"`` (see module docstring).
    pv_mean_iterations:
        Uncapped mean iterations per level, each ``>= 1``.
    pv_max_iterations:
        Cap on iterations; a cell still outside its band then is "unconverged".
    pulse_ns, pulse_pj:
        Latency and energy of one programming pulse per level (per cell).
    verify_ns, verify_pj:
        Latency and energy of one verify read (per cell).
    """

    bits_per_cell: int
    level_log10_ohm: tuple[float, ...]
    program_sigma_decades: tuple[float, ...] | float
    pv_mean_iterations: tuple[float, ...] | float
    pulse_ns: tuple[float, ...] | float
    pulse_pj: tuple[float, ...] | float
    verify_ns: float
    verify_pj: float
    read_thresholds_log10_ohm: tuple[float, ...] | None = None
    verify_band_sigma: float | None = None
    pv_model: str = "geometric"
    pv_max_iterations: int = 16
    tri_level: bool = False

    def __post_init__(self) -> None:
        b = self.bits_per_cell
        if isinstance(b, bool) or not isinstance(b, (int, np.integer)) or b not in (1, 2, 3):
            raise ConfigError("cell.bits_per_cell", repr(b), "1, 2 or 3")
        n = 3 if self.tri_level else 1 << int(b)
        lv = _per_level("level_log10_ohm", self.level_log10_ohm, n)
        if np.ndim(self.level_log10_ohm) == 0 or np.any(np.diff(lv) <= 0):
            raise ConfigError(
                "cell.level_log10_ohm", repr(self.level_log10_ohm), f"{n} strictly increasing numbers"
            )
        sig = _per_level("program_sigma_decades", self.program_sigma_decades, n)
        if min(sig) <= 0:
            raise ConfigError("cell.program_sigma_decades", repr(self.program_sigma_decades), "numbers > 0")
        if self.read_thresholds_log10_ohm is None:
            th = tuple(0.5 * (lv[i] + lv[i + 1]) for i in range(n - 1))
        else:
            th = tuple(float(v) for v in self.read_thresholds_log10_ohm)
            ok = len(th) == n - 1 and all(lv[i] < th[i] < lv[i + 1] for i in range(n - 1))
            if not ok:
                raise ConfigError(
                    "cell.read_thresholds_log10_ohm",
                    repr(self.read_thresholds_log10_ohm),
                    f"{n - 1} numbers, each strictly between adjacent levels",
                )
        if self.verify_band_sigma is not None and not float(self.verify_band_sigma) > 0:
            raise ConfigError(
                "cell.verify_band_sigma", repr(self.verify_band_sigma), "a number > 0, or absent"
            )
        if self.pv_model not in PV_MODELS:
            raise ConfigError("cell.pv_model", repr(self.pv_model), " or ".join(PV_MODELS))
        mi = _per_level("pv_mean_iterations", self.pv_mean_iterations, n)
        if min(mi) < 1:
            raise ConfigError("cell.pv_mean_iterations", repr(self.pv_mean_iterations), "numbers >= 1")
        cap = self.pv_max_iterations
        if not isinstance(cap, (int, np.integer)) or isinstance(cap, bool) or cap < 1:
            raise ConfigError("cell.pv_max_iterations", repr(cap), "an integer >= 1")
        pns = _per_level("pulse_ns", self.pulse_ns, n)
        ppj = _per_level("pulse_pj", self.pulse_pj, n)
        for key, vals in (
            ("pulse_ns", pns),
            ("pulse_pj", ppj),
            ("verify_ns", (self.verify_ns,)),
            ("verify_pj", (self.verify_pj,)),
        ):
            if min(vals) < 0:
                raise ConfigError(f"cell.{key}", repr(getattr(self, key)), "numbers >= 0")
        set_ = object.__setattr__
        set_(self, "bits_per_cell", int(b))
        set_(self, "level_log10_ohm", lv)
        set_(self, "program_sigma_decades", sig)
        set_(self, "read_thresholds_log10_ohm", th)
        set_(self, "pv_mean_iterations", mi)
        set_(self, "pv_max_iterations", int(cap))
        set_(self, "pulse_ns", pns)
        set_(self, "pulse_pj", ppj)
        set_(self, "verify_ns", float(self.verify_ns))
        set_(self, "verify_pj", float(self.verify_pj))
        if self.verify_band_sigma is not None:
            set_(self, "verify_band_sigma", float(self.verify_band_sigma))

    @classmethod
    def from_dict(cls, d: Mapping[str, Any], where: str = "cell") -> MlcCell:
        """Build from a config section, ignoring keys that belong to other models
        (e.g. ``drift_*``).  Missing required keys raise :class:`ConfigError`."""
        names = {f.name for f in fields(cls)}
        kw = {k: (tuple(v) if isinstance(v, list) else v) for k, v in d.items() if k in names}
        required = {f.name for f in fields(cls) if f.default is MISSING and f.default_factory is MISSING}
        missing = sorted(required - set(kw))
        if missing:
            raise ConfigError(where, f"missing {', '.join(missing)}", f"all of {', '.join(sorted(required))}")
        return cls(**kw)

    # -- geometry ------------------------------------------------------------
    @property
    def n_levels(self) -> int:
        return 3 if self.tri_level else 1 << self.bits_per_cell

    @property
    def bits_stored(self) -> float:
        """Data bits per cell (1.5 for tri-level pairs)."""
        return 1.5 if self.tri_level else float(self.bits_per_cell)

    def bit_distance(self) -> np.ndarray:
        """Bits flipped when a cell of level i reads as level j (expected, for tri-level pairs)."""
        return tri_distance_matrix() if self.tri_level else bit_distance_matrix(self.bits_per_cell).astype(float)

    def cells_per_line(self, line_bits: int) -> int:
        """Cells holding ``line_bits`` data bits (the last cell or pair may be partly used)."""
        if self.tri_level:
            return 2 * -(-int(line_bits) // 3)
        return -(-int(line_bits) // self.bits_per_cell)

    @property
    def level_mu(self) -> np.ndarray:
        """Target log10 R per level (float64 array)."""
        return np.asarray(self.level_log10_ohm, dtype=np.float64)

    @property
    def level_sigma(self) -> np.ndarray:
        return np.asarray(self.program_sigma_decades, dtype=np.float64)

    @property
    def thresholds(self) -> np.ndarray:
        """Read thresholds (log10 ohm), ``n_levels - 1`` of them."""
        return np.asarray(self.read_thresholds_log10_ohm, dtype=np.float64)

    def read_level(self, log10_r: np.ndarray) -> np.ndarray:
        """Level a read returns for each log10 resistance (ties go to the lower level)."""
        return np.searchsorted(self.thresholds, np.asarray(log10_r), side="left").astype(np.int64)

    def level_probs(self, level_probs: Sequence[float] | np.ndarray | None = None) -> np.ndarray:
        """Validated level occupancy; ``None`` = uniform (random data)."""
        n = self.n_levels
        if level_probs is None:
            if self.tri_level:
                # Random words: each cell of a pair sits at levels 0, 1, 2 in 3, 2, 3 of 8 words.
                return np.array([3.0, 2.0, 3.0]) / 8.0
            return np.full(n, 1.0 / n)
        w = np.asarray(level_probs, dtype=np.float64)
        if w.shape != (n,) or np.any(w < 0) or not np.isclose(w.sum(), 1.0):
            raise ConfigError("level_probs", repr(level_probs), f"{n} non-negative numbers summing to 1")
        return w

    # -- program-and-verify: exact moments ----------------------------------
    def iteration_pmf(self) -> np.ndarray:
        """``P[l, k]`` = probability that a write to level l takes k iterations
        (``k = 0 .. pv_max_iterations``; column 0 is zero)."""
        cap = self.pv_max_iterations
        m = np.asarray(self.pv_mean_iterations)
        k = np.arange(1, cap + 1)
        pmf = np.zeros((self.n_levels, cap + 1))
        if self.pv_model == "geometric":
            p = 1.0 / m[:, None]
            body = (1.0 - p) ** (k - 1) * p
            body[:, -1] = (1.0 - p[:, 0]) ** (cap - 1)  # everything left lands on the cap
        else:
            lam = (m - 1.0)[:, None]
            body = stats.poisson.pmf(k - 1, lam)
            body[:, -1] = stats.poisson.sf(cap - 2, lam[:, 0])
        pmf[:, 1:] = body
        return pmf

    def mean_iterations(self) -> np.ndarray:
        """Expected iterations per level (capped)."""
        pmf = self.iteration_pmf()
        return pmf @ np.arange(pmf.shape[1])

    def var_iterations(self) -> np.ndarray:
        """Variance of iterations per level (capped)."""
        pmf = self.iteration_pmf()
        k = np.arange(pmf.shape[1])
        mean = pmf @ k
        return pmf @ (k * k) - mean * mean

    def p_unconverged(self) -> np.ndarray:
        """Probability per level that the cell is still outside its verify band
        after ``pv_max_iterations`` iterations."""
        cap = self.pv_max_iterations
        m = np.asarray(self.pv_mean_iterations)
        if self.pv_model == "geometric":
            return (1.0 - 1.0 / m) ** cap
        return stats.poisson.sf(cap - 1, m - 1.0)

    def iteration_ns(self) -> np.ndarray:
        """Latency of one pulse + verify per level."""
        return np.asarray(self.pulse_ns) + self.verify_ns

    def iteration_pj(self) -> np.ndarray:
        """Energy of one pulse + verify per level (per cell)."""
        return np.asarray(self.pulse_pj) + self.verify_pj

    def expected_latency_ns(self) -> np.ndarray:
        """Expected program-and-verify latency of one cell, per target level."""
        return self.mean_iterations() * self.iteration_ns()

    def expected_energy_pj(self) -> np.ndarray:
        """Expected program-and-verify energy of one cell, per target level."""
        return self.mean_iterations() * self.iteration_pj()

    def expected_wear_pulses(self) -> np.ndarray:
        """Expected programming pulses (wear) of one cell write, per target level."""
        return self.mean_iterations()

    def expected_cell_write(
        self, level_probs: Sequence[float] | np.ndarray | None = None
    ) -> dict[str, float]:
        """Expected per-cell iterations, latency, energy and wear for data with
        the given level occupancy (``None`` = uniformly random data)."""
        w = self.level_probs(level_probs)
        return {
            "iterations": float(w @ self.mean_iterations()),
            "latency_ns": float(w @ self.expected_latency_ns()),
            "energy_pj": float(w @ self.expected_energy_pj()),
            "wear_pulses": float(w @ self.expected_wear_pulses()),
        }

    def expected_line_iterations(
        self, n_cells: int, level_probs: Sequence[float] | np.ndarray | None = None
    ) -> float:
        """Expected iterations until the slowest of ``n_cells`` cells verifies,
        with cell levels drawn independently from the occupancy.

        ``E[max] = sum_{k>=0} (1 - F(k)^n)`` with ``F`` the mixture CDF.
        """
        w = self.level_probs(level_probs)
        cdf = np.cumsum(w @ self.iteration_pmf())
        return float(np.sum(1.0 - np.clip(cdf[:-1], 0.0, 1.0) ** int(n_cells)))

    # -- sampling -----------------------------------------------------------
    def _check_levels(self, levels: np.ndarray | Sequence[int]) -> np.ndarray:
        lv = np.asarray(levels)
        if lv.size and (not np.issubdtype(lv.dtype, np.integer) or lv.min() < 0 or lv.max() >= self.n_levels):
            raise ValueError(f"levels must be integers in [0, {self.n_levels})")
        return lv.astype(np.int64, copy=False)

    def sample_iterations(self, levels: np.ndarray | Sequence[int], rng: np.random.Generator) -> np.ndarray:
        """Iterations of each cell write (int32, same shape as ``levels``)."""
        return self.sample_attempts(levels, rng)[0]

    def sample_attempts(self, levels: np.ndarray | Sequence[int],
                        rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
        """Iterations of each cell write (capped, int32) and whether the cell
        verified within the cap (the same draws as :meth:`sample_iterations`)."""
        lv = self._check_levels(levels)
        m = np.asarray(self.pv_mean_iterations)[lv]
        if self.pv_model == "geometric":
            n = rng.geometric(1.0 / m)
        else:
            n = 1 + rng.poisson(m - 1.0)
        return np.minimum(n, self.pv_max_iterations).astype(np.int32), n <= self.pv_max_iterations

    def attempts_from_uniforms(self, levels: np.ndarray | Sequence[int],
                               u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """As :meth:`sample_attempts`, by inversion of uniforms ``u`` in (0, 1)
        (one per cell): the same distribution, drawn from keyed uniforms."""
        lv = self._check_levels(levels)
        m = np.asarray(self.pv_mean_iterations, dtype=np.float64)[lv]
        if self.pv_model == "geometric":
            # Inverse CDF of the geometric law on 1, 2, ... with success 1/m.
            with np.errstate(divide="ignore"):
                n = 1.0 + np.floor(np.log(u) / np.log1p(-1.0 / m))
            n = np.where(m <= 1.0, 1.0, n)
        else:
            n = 1.0 + stats.poisson.ppf(u, m - 1.0)
        n = np.minimum(n, np.iinfo(np.int32).max)
        return (np.minimum(n, self.pv_max_iterations).astype(np.int32),
                n <= self.pv_max_iterations)

    def sample_program_log10_r(
        self, levels: np.ndarray | Sequence[int], rng: np.random.Generator
    ) -> np.ndarray:
        """Programmed log10 R0 of each cell (truncated normal if a verify band is set)."""
        lv = self._check_levels(levels)
        mu = self.level_mu[lv]
        sd = self.level_sigma[lv]
        if self.verify_band_sigma is None:
            z = rng.standard_normal(lv.shape)
        else:
            k = self.verify_band_sigma
            z = stats.truncnorm.rvs(-k, k, size=lv.shape, random_state=rng)
        return mu + sd * z

    def sample_written_log10_r(self, levels: np.ndarray | Sequence[int],
                               rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
        """log10 R0 of written cells, counting the ones left unconverged at the
        iteration cap (probability :meth:`p_unconverged`): those lie outside
        the verify band (the programming normal conditioned on ``|z| > k``).
        Returns R0 and the unconverged mask; without a band (or when no cell
        can be left unconverged) this is :meth:`sample_program_log10_r`."""
        lv = self._check_levels(levels)
        u = self.p_unconverged()
        if self.verify_band_sigma is None or not np.any(u > 0):
            return self.sample_program_log10_r(lv, rng), np.zeros(lv.shape, dtype=bool)
        r0 = self.sample_program_log10_r(lv, rng)
        out = rng.random(lv.shape) < u[lv]
        k = self.verify_band_sigma
        z = stats.truncnorm.rvs(k, np.inf, size=int(out.sum()), random_state=rng)
        z *= np.where(rng.random(z.size) < 0.5, -1.0, 1.0)
        r0[out] = self.level_mu[lv[out]] + self.level_sigma[lv[out]] * z
        return r0, out
