"""Lifetime of a run's memory, in years, at the scale of the whole device.

Two entry points:

* :func:`lifetime_fields` turns the wear counters of a timing run's
  :class:`~memsim.policy.writepath.WritePath` into summary fields;
* :func:`lifetime` runs the wear engine alone over the workload's write
  stream (no timing) and estimates lifetime by extrapolation, by replaying
  the stream to failure with scaled-down endurance, or both.

Device scale.  The ``array.lines`` modeled lines stand for the device's
``capacity_gib * 2**30 / line_bytes`` lines, ``S`` device lines per modeled
line.  How the workload's traffic maps onto the device depends on the
pattern ("traffic" in the summary):

* ``spread`` (ordinary patterns): each modeled line stands for S device
  lines that see the same traffic share and have their own cells, and each
  modeled user write stands for S device line writes.  A modeled line dies
  when the weakest of its S device lines does; that weakest one is drawn
  directly from the distribution of the minimum (and the next ones when
  ``capacity_loss`` needs more deaths), so no per-device-line array is built.
* ``focused`` (``repeated_address``, ``birthday_attack``, ``hot_set``): an
  attacker aims its whole write rate at the lines it hammers, it does not
  spread it over S copies.  The modeled memory is one region of the device
  that receives the entire stream; each modeled line is one device line and
  each modeled write one device write.  The rest of the device is not worn,
  so an end of life that needs more dead lines than the region holds
  (``capacity_loss``) is never reached (``inf``).

Leveling at device scale.  Running a leveler on the modeled lines moves its
registers ``S`` times too fast in device terms (Start-Gap's Start advances one
line per ``(N + 1) psi`` writes), so a hot region a real device cannot move
across in its lifetime would look leveled.  Plain Start-Gap is therefore
evaluated at device size in closed form (:mod:`memsim.engine.device_wear`):
the workload's share of writes per modeled line is counted over the window,
each modeled line stands for ``S`` adjacent device lines, and the wear of every
device line under the device's own Start and Gap registers is summed
exactly; lifetime is found by bisection on the device writes (cost O(lines)
per step, independent of the device size).  With one modeled line per device
line it agrees with a replay to failure of the real leveler within 3%
(tests/test_device_wear.py).  Randomized Start-Gap is evaluated at device
size by a normal approximation of each line's window sum (null where the
sum is too skewed for it; its error against a replay is measured in the
same tests), Security Refresh by its steady state over many key rounds.
``lifetime_leveling_scale`` says which way a run went: ``device`` (these
three, spread traffic) or ``modeled`` (the attack patterns; none and
bit rotation, which do not depend on the line count; region Start-Gap and
hot/cold swap, which then give no estimate when a modeled line stands for
more than one device line).

The ideal lifetime is perfect leveling of full-line writes over the whole
device, ``endurance_mean * capacity / write_rate``; schemes that program
fewer cells per write can exceed it (``lifetime_vs_ideal`` > 1).

Cell model.  Wear is counted in line-write equivalents per physical line
(user writes plus leveler moves); one write programs cell ``b`` with
probability ``q[b]`` (the measured per-cell profile).  A line dies under
ECP-k at its (k+1)-th failed cell (:mod:`memsim.tech.endurance`).

References
----------
M. K. Qureshi et al., "Enhancing lifetime and security of PCM-based main
memory with Start-Gap wear leveling", MICRO 2009 (lifetime normalized to
perfect wear leveling; the repeated address attack).
S. Schechter, G. H. Loh, K. Strauss and D. Burger, "Use ECP, not ECC, for hard
failures in resistive memories", ISCA 2010 (line death under ECP-k).
A. Renyi, "On the theory of order statistics", Acta Math. Acad. Sci. Hung.
4, 1953 (order statistics of uniforms as cumulative sums of exponentials).
"""
from __future__ import annotations

import time
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats
from scipy.special import betainc, betaincinv, expit, gammaln, xlog1py, xlogy

from memsim import __version__
from memsim.config import RunConfig
from memsim.engine.device_wear import (
    randomized_start_gap_device_lifetime,
    region_start_gap_device_lifetime,
    security_refresh_device_rates,
    security_refresh_round_load,
    start_gap_device_lifetime,
)
from memsim.engine.wear import PoolLeveler, WearResult, rotate_profile, run_wear
from memsim.errors import ConfigError
from memsim.experiment.build import build_leveler, build_path
from memsim.experiment.progress import track
from memsim.metrics.lifetime import (
    Lifetime,
    ideal_lifetime_writes,
    lifetime_extrapolated,
    lifetime_to_failure,
    writes_to_years,
)
from memsim.metrics.result import RunResult
from memsim.policy.erase import BlockPool
from memsim.policy.leveling.base import Leveler
from memsim.policy.write import SCHEMES
from memsim.policy.write.bits import popcount_rows
from memsim.policy.writepath import WritePath
from memsim.seeds import stream as named_stream
from memsim.tech.endurance import EnduranceModel
from memsim.units import GIB
from memsim.workload.attacks import ATTACKS
from memsim.workload.chunk import WRITE
from memsim.workload.device_traffic import folded_address
from memsim.workload.synthetic import SyntheticSource

METHODS = ("both", "extrapolated", "run_to_failure")
# Entries of a (lines x kept copies) death-wear matrix sampled at most; above
# it the device lines of a modeled line are represented by strata.
_DEATH_ENTRIES = 1 << 22
_RATE_PROBE_REQUESTS = 10_000      # timing run that measures the write rate
_PROFILE_LINES = 1024              # lines of the write-scheme profile pass
_PROFILE_WRITES = 1 << 15
_STREAM_CHUNK = 1 << 18
_DISPERSION = 2.0                  # variance allowance of pooled_profile
_Q_STEP = 2e-3                     # relative step profiles are grouped by


# ---------------------------------------------------------------- death law


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


def _capacity_share(dd: DeviceDeaths) -> tuple[float, bool]:
    """``capacity_loss`` that makes the metrics functions stop at ``dd.needed``."""
    entries = dd.death.size
    if dd.needed > entries:
        return 0.0, False
    return (dd.needed - 0.5) / entries, True


def extrapolate(wear: WearResult, dd: DeviceDeaths) -> Lifetime:
    """Estimate (a) at device scale; ``inf`` if end of life cannot be reached."""
    cl, reachable = _capacity_share(dd)
    life = lifetime_extrapolated(wear, dd.death, capacity_loss=cl)
    if not dd.exact:
        life.first_failure_writes = lifetime_extrapolated(wear, dd.first[:, None]).first_failure_writes
    if not reachable:
        life.end_writes = float("inf")
    return life


# ---------------------------------------------------------------- profile


def pooled_profile(programs: np.ndarray, writes: float, groups: list[slice]) -> float | np.ndarray:
    """Per-cell program probability from counts, pooled where spread is noise.

    Within each group of cells (data cells, flag cells) the counts are
    replaced by their mean when their spread is consistent with sampling
    noise (chi-square dispersion test, p > 0.001; common practice), so a
    short sample does not invent a most-worn cell.  The noise allowed is
    twice the binomial variance: a differential write programs a cell when
    its bit changes, and successive changes of one cell are correlated at
    lag one, which inflates the variance of the count by
    ``1 + (1 - 4s) / (1 - 2s)`` with ``s = p (1 - p)`` for independent bits
    of probability ``p`` -- at most 2 (derived here).
    """
    q = np.asarray(programs, dtype=np.float64) / max(writes, 1.0)
    for g in groups:
        part = q[g]
        if part.size == 0:
            continue
        m = part.mean()
        if 0 < m < 1:
            chi2 = ((part - m) ** 2).sum() * writes / (m * (1 - m))
            if stats.chi2.sf(chi2 / _DISPERSION, part.size - 1) <= 1e-3:
                continue
        q[g] = m
    return float(q[0]) if np.all(q == q[0]) else q


def profile_cells(path: WritePath) -> int:
    """Cells per line: data and flag cells; for multi-level cells, bits / bits per cell."""
    if path.cell_wear is not None:
        return int(path.cell_wear.shape[1])
    if path.mlc is not None:
        return path.mlc.cell.cells_per_line(path.line_bits)
    return path.line_bits


def path_profile(path: WritePath) -> float | np.ndarray:
    """Per-cell program probability of one line write in ``path`` (moves included).

    Multi-level cells are counted in pulses per cell (may exceed 1).
    """
    writes = float(path.line_writes.sum())
    if path.cell_wear is None:
        return float(path.line_cells.sum()) / max(writes, 1.0) / profile_cells(path)
    bits = path.line_bits
    return pooled_profile(path.bit_profile(), writes, [slice(0, bits), slice(bits, None)])


def rotated_profile(profile: float | np.ndarray, line_bits: int, leveler: Leveler) -> float | np.ndarray:
    """Average the data cells' profile over the bit offsets a rotating leveler cycles through."""
    steady = getattr(leveler, "steady_offsets", None)
    if steady is None or np.ndim(profile) == 0:
        return profile
    offs = steady()
    q = np.array(profile, dtype=np.float64)
    q[:line_bits] = rotate_profile(q[:line_bits], np.bincount(offs, minlength=line_bits)) / offs.size
    return q


def _pool_write_cells(cfg: RunConfig, sample: WritePath) -> float:
    """Cells an out-of-place write into an initialized line programs, on average.

    Only the bits that differ from the initialized state: the 0 bits of
    all-SET blocks, the 1 bits of all-RESET blocks (the sample pass's stored
    lines give the data's share of 1 bits).
    """
    ones = float(popcount_rows(sample.stored).mean())
    return sample.line_bits - ones if cfg.erase.init_state == "set" else ones


def sample_profile(cfg: RunConfig, rng: np.random.Generator, writes: int) -> WritePath:
    """A short write-scheme pass: ``writes`` uniform writes over a few lines.

    What a write programs depends on the data model and the write scheme,
    not on which line it goes to, so the pass uses few lines, no leveler and
    uniform addresses (fast, and independent of the address pattern).
    """
    n = min(cfg.footprint, _PROFILE_LINES)
    small = cfg.model_copy(update={
        "leveling": cfg.leveling.model_copy(update={"scheme": "none"}),
        "workload": cfg.workload.model_copy(update={"footprint_lines": n}),
    })
    path = build_path(small, rng)
    for lo in range(0, writes, 8192):
        path.apply(rng.integers(0, n, size=min(8192, writes - lo), dtype=np.int64))
    return path


# ---------------------------------------------------------------- scale, caveats, tables


@dataclass(frozen=True)
class DeviceScale:
    """How modeled lines and writes map to the device (see module docstring)."""

    line_scale: float        # device lines per modeled line
    traffic: str             # "spread" or "focused"
    device_lines: float

    @staticmethod
    def of(cfg: RunConfig) -> DeviceScale:
        a = cfg.array
        device = a.capacity_gib * GIB / a.line_bytes
        traffic = "focused" if cfg.workload.pattern in ATTACKS else "spread"
        return DeviceScale(device / a.lines, traffic, device)

    @property
    def copies(self) -> float:
        """Device lines that share one modeled line's wear."""
        return self.line_scale if self.traffic == "spread" else 1.0

    @property
    def time_scale(self) -> float:
        """Device line writes per modeled user write."""
        return self.line_scale if self.traffic == "spread" else 1.0


def leveling_cycle_writes(leveler: Leveler) -> float:
    """User writes for the leveler to move every line once through its cycle
    (uniform traffic); each leveler reports its own (:meth:`Leveler.cycle_writes`)."""
    return leveler.cycle_writes()


def wear_tables(line_wear: np.ndarray, bins: int = 64) -> dict[str, pd.DataFrame]:
    """Histogram (``lo_writes``, ``hi_writes``, ``count`` of lines) and CDF of per-line wear."""
    w = np.asarray(line_wear, dtype=np.float64)
    lo, hi = (float(w.min()), float(w.max())) if w.size else (0.0, 0.0)
    edges = np.linspace(lo, hi if hi > lo else lo + 1.0, bins + 1)
    counts, _ = np.histogram(w, edges)
    hist = pd.DataFrame({"lo_writes": edges[:-1], "hi_writes": edges[1:], "count": counts})
    share = np.linspace(0.0, 1.0, 257)
    q = np.quantile(w, share) if w.size else np.zeros_like(share)
    mean = w.mean() if w.size else 0.0
    cdf = pd.DataFrame({"share_of_lines": share, "wear_writes": q,
                        "wear_over_mean": q / mean if mean > 0 else np.zeros_like(q)})
    return {"wear_histogram": hist, "wear_cdf": cdf}


def _endurance(cfg: RunConfig) -> EnduranceModel:
    c = cfg.cell
    return EnduranceModel(c.endurance_mean, c.endurance_cov, c.endurance_dist)


def _ideal_years(cfg: RunConfig, scale: DeviceScale, rate: float) -> float:
    """Perfectly spread full-line writes over the whole device: endurance x capacity / rate."""
    if rate <= 0:
        return float("inf")
    return writes_to_years(ideal_lifetime_writes(cfg.cell.endurance_mean, cfg.array.lines),
                           line_bytes=cfg.array.line_bytes, write_bytes_per_s=rate,
                           line_scale=scale.line_scale)


def _even_writes(law: DeathLaw, line_wear: np.ndarray, user_writes: float, scale: DeviceScale,
                 capacity_loss: float) -> float:
    """:func:`even_wear_writes` for the device lines the modeled wear falls on."""
    lines = line_wear.size * scale.copies
    needed = int(np.floor(capacity_loss * scale.device_lines)) + 1
    if needed > lines:
        return float("inf")
    return even_wear_writes(law, float(line_wear.mean()) / max(user_writes, 1), lines, needed)


def _years_fields(prefix: str, life: Lifetime, scale: DeviceScale, line_bytes: int,
                  rate: float, ideal_years: float, weight: float,
                  even_writes: float = float("nan")) -> dict[str, Any]:
    def years(w: float) -> float:
        if np.isnan(w):
            return float("nan")
        if not np.isfinite(w) or rate <= 0:
            return float("inf")
        return writes_to_years(w, line_bytes=line_bytes, write_bytes_per_s=rate,
                               line_scale=scale.time_scale)

    y = years(life.end_writes)
    return {f"{prefix}_years": y, f"{prefix}_first_failure_years": years(life.first_failure_writes),
            f"{prefix}_vs_ideal": y / ideal_years if np.isfinite(ideal_years) else float("nan"),
            f"{prefix}_vs_even_wear": (life.end_writes / even_writes
                                       if np.isfinite(even_writes) and np.isfinite(life.end_writes)
                                       else float("nan")),
            f"{prefix}_dead_lines": life.dead_lines * weight}


# ---------------------------------------------------------------- timing runs


_NULL_WHEN_SHORT = ("lifetime_years", "lifetime_first_failure_years", "lifetime_vs_ideal",
                    "lifetime_vs_even_wear")


def _too_short(wear: np.ndarray, cycles: float, max_noise: float) -> str:
    """Why a timing run's wear cannot be extrapolated to a lifetime, or "".

    Extrapolation takes each line's count as its rate.  The lines that end
    life are the most worn ones, and the largest of P counts with mean ``c``
    overshoots its rate by about ``sqrt(2 ln P / c)`` relative (the maximum of
    P Gaussian deviations, common practice); and a leveler whose cycle the
    run did not complete has not spread its writes yet.
    """
    top = float(wear.max())
    noise = float(np.sqrt(2.0 * np.log(max(wear.size, 2)) / top)) if top > 0 else float("inf")
    if noise > max_noise:
        return (f"run too short for a lifetime: the most-worn line got {top:.3g} writes, counting noise "
                f"~{noise:.0%} > lifetime.timing_max_noise {max_noise:g}; use memsim lifetime or more "
                f"requests")
    if np.isfinite(cycles) and cycles < 1:
        return (f"run too short for a lifetime: it spans {cycles:.3g} of the leveler's cycle, so wear "
                f"has not evened out; use memsim lifetime")
    return ""


def lifetime_fields(cfg: RunConfig, path: WritePath, write_bytes_per_s: float) -> dict[str, Any]:
    """Lifetime fields of a timing run, from its write path's wear counters.

    Parameters
    ----------
    cfg:
        The run's config (endurance, ECP entries, capacity loss, device size).
    path:
        The run's write path: writes per physical line (leveler moves
        included) and, for single-level cells, programs per cell.
    write_bytes_per_s:
        The run's user write rate, bytes/s; used unless
        ``lifetime.write_rate_gbps`` is set (> 0) in the config.

    Returns
    -------
    dict
        ``lifetime_years``, ``lifetime_first_failure_years``,
        ``lifetime_ideal_years``, ``lifetime_vs_ideal``,
        ``leveling_write_overhead``, ``wear_max_over_mean``, ``wear_cov``,
        ``write_rate_gbps``, ``write_rate_source`` and the caveat fields
        ``lifetime_traffic``, ``lifetime_window_writes``,
        ``lifetime_window_line_writes_mean``, ``lifetime_window_cycles``.

    Notes
    -----
    The per-line rates are measured over the run only.  They are steady-state
    rates only if the most-worn lines received many writes (their counting
    noise is about ``sqrt(2 ln lines / writes)``) and if the window spans the
    leveler's cycle (``lifetime_window_cycles`` >= 1; Start-Gap over N lines
    needs ``N (N + 1) psi`` writes, far more than a timing run holds for
    realistic N).  Otherwise the lifetime keys are null (None) and
    ``lifetime_note`` says why; :func:`lifetime` runs the wear engine over a
    long window.
    """
    scale = DeviceScale.of(cfg)
    rate, source = ((cfg.lifetime.write_rate_gbps * 1e9, "config")
                    if cfg.lifetime.write_rate_gbps > 0 else (float(write_bytes_per_s), "run"))
    lv = path.leveler
    user = path.user_writes
    # Wear from the ledger (every program, whatever issued it), in write
    # equivalents: a line's cells divided by the cells one write programs.
    profile = rotated_profile(path_profile(path), path.line_bits, lv) if path.line_writes.any() else 1.0
    n_cells = profile_cells(path)
    per_write = float(np.sum(np.broadcast_to(profile, (n_cells,))))
    cells = path.ledger.line_cells()
    wear = cells / per_write if per_write > 0 else np.zeros_like(cells)
    mean = float(wear.mean()) if wear.size else 0.0
    ideal_years = _ideal_years(cfg, scale, rate)
    out: dict[str, Any] = {
        "write_rate_gbps": rate / 1e9,
        "write_rate_source": source,
        "lifetime_traffic": scale.traffic,
        "lifetime_years": float("inf"),
        "lifetime_first_failure_years": float("inf"),
        "lifetime_ideal_years": ideal_years,
        "lifetime_vs_ideal": float("nan"),
        "lifetime_vs_even_wear": float("nan"),
        "leveling_write_overhead": (path.move_writes + path.meta_writes) / max(user, 1),
        "wear_max_over_mean": float(wear.max() / mean) if mean > 0 else 0.0,
        "wear_cov": float(wear.std() / mean) if mean > 0 else 0.0,
        "lifetime_window_writes": user,
        "lifetime_window_line_writes_mean": mean,
        "lifetime_window_cycles": user / leveling_cycle_writes(lv),
    }
    out.update(path.ledger.summary())
    out["lifetime_note"] = None
    if user == 0 or mean == 0:
        for k in _NULL_WHEN_SHORT:
            out[k] = None
        out["lifetime_note"] = "no writes reached the memory in the run: no wear to extrapolate"
        return out
    if cfg.workload.sizing == "device_lines":
        from memsim.experiment.fixed_lifetime import device_lines_fields

        law = DeathLaw(_endurance(cfg), n_cells, cfg.lifetime.ecp_entries, profile)
        out.update(device_lines_fields(cfg, law, rate))
        return out
    note = _too_short(wear, out["lifetime_window_cycles"], cfg.lifetime.timing_max_noise)
    if not note and not lv.scale_free() and scale.traffic == "spread" and scale.copies > 1:
        note = (f"no lifetime from a timing run with {lv.name}: it remaps the modeled lines only, a cycle "
                f"{scale.copies:.0f}x shorter than the device's; use memsim lifetime")
    if note:
        for k in _NULL_WHEN_SHORT:
            out[k] = None
        out["lifetime_note"] = note
        return out
    law = DeathLaw(_endurance(cfg), n_cells, cfg.lifetime.ecp_entries, profile)
    rng = named_stream(cfg.run.seed, "endurance")
    dd = device_deaths(law, rng, wear / user, scale.copies, scale.device_lines, cfg.lifetime.capacity_loss)
    result = WearResult(wear, np.zeros_like(wear), user, path.meta_writes, np.zeros(1))
    life = extrapolate(result, dd)
    even = _even_writes(law, wear, user, scale, cfg.lifetime.capacity_loss)
    f = _years_fields("lifetime", life, scale, cfg.array.line_bytes, rate, ideal_years, dd.weight, even)
    f.pop("lifetime_dead_lines")
    out.update(f)
    return out


# ---------------------------------------------------------------- wear-engine runs


def _start_gap_at_device(cfg: RunConfig, lv: Leveler, law: DeathLaw, chunks: Iterator[np.ndarray],
                         window: int, scale: DeviceScale) -> Lifetime:
    """Estimate (a) for plain Start-Gap evaluated at device size (:mod:`memsim.engine.device_wear`).

    The workload's share of writes per logical line is the synthetic
    pattern's expected share (no sampling noise), or for a trace counted
    over the window; lines outside the footprint get none (the device's
    Start-Gap spans every line of the device).
    """
    rates = _device_rates(cfg, chunks, window)
    dd = device_deaths(law, named_stream(cfg.run.seed, "endurance"), rates, scale.copies, scale.device_lines,
                       cfg.lifetime.capacity_loss)
    needed = dd.needed
    end, first = start_gap_device_lifetime(rates, dd.death, dd.weight, needed, lv.psi, scale.copies)
    if not dd.exact:
        first = start_gap_device_lifetime(rates, dd.first[:, None], 1.0, 1, lv.psi, scale.copies)[1]
    # Device writes -> modeled user writes (each stands for S device writes).
    t = scale.time_scale
    return Lifetime("device_scale", end / t, first / t, int(min(needed, dd.death.size)) if np.isfinite(end) else 0,
                    int(scale.device_lines))


def _device_rates(cfg: RunConfig, chunks: Iterator[np.ndarray], window: int,
                  ) -> np.ndarray:
    """Share of writes of every modeled logical line (expected, or counted for a trace)."""
    shares = None
    if cfg.workload.pattern != "trace":
        wl = cfg.workload.model_copy(update={"arrival": "closed", "requests": 1 << 62})
        shares = SyntheticSource(wl, cfg.footprint, named_stream(cfg.run.seed, "requests")).expected_write_shares()
    if shares is None:
        counts = run_wear(chunks, Leveler(cfg.footprint), max_user_writes=window)
        shares = counts.user_line_writes / max(counts.user_writes, 1)
    rates = np.zeros(cfg.array.lines)
    rates[: cfg.footprint] = shares
    return rates


def _security_refresh_at_device(cfg: RunConfig, lv: Leveler, law: DeathLaw, chunks: Iterator[np.ndarray],
                                window: int, scale: DeviceScale) -> Lifetime:
    """Estimate (a) for Security Refresh at device size (steady state over many key rounds).

    NaN (no estimate) when one round can put more than 1% of the weakest
    line's death wear on one physical line: then the steady state does not
    hold before the first death.
    """
    rates = _device_rates(cfg, chunks, window)
    blocks = min(lv.region_lines, cfg.array.lines)
    steady = security_refresh_device_rates(rates, blocks, lv.interval)
    dd = device_deaths(law, named_stream(cfg.run.seed, "endurance"), steady, scale.copies,
                       scale.device_lines, cfg.lifetime.capacity_loss)
    if security_refresh_round_load(rates, blocks, lv.interval) > 0.01 * float(dd.first.min()):
        nan = float("nan")
        return Lifetime("device_scale", nan, nan, 0, int(scale.device_lines))
    life = extrapolate(WearResult(steady, np.zeros_like(steady), 1, 0, np.zeros(1)), dd)
    life.method = "device_scale"
    return life


def _randomized_start_gap_at_device(cfg: RunConfig, lv: Leveler, law: DeathLaw,
                                    chunks: Iterator[np.ndarray], window: int, scale: DeviceScale,
                                    ) -> Lifetime:
    """Estimate (a) for randomized Start-Gap at device size (an approximation,
    :func:`memsim.engine.device_wear.randomized_start_gap_device_lifetime`)."""
    rates = _device_rates(cfg, chunks, window)
    needed = int(np.floor(cfg.lifetime.capacity_loss * scale.device_lines)) + 1
    psi = lv.inner.psi
    end = randomized_start_gap_device_lifetime(rates, law.cdf, needed, psi, scale.copies)
    first = end if needed == 1 else randomized_start_gap_device_lifetime(rates, law.cdf, 1, psi, scale.copies)
    t = scale.time_scale
    return Lifetime("device_scale", end / t, first / t, needed if np.isfinite(end) else 0,
                    int(scale.device_lines))


def write_stream(cfg: RunConfig, chunk: int = _STREAM_CHUNK) -> Iterator[np.ndarray]:
    """Endless logical line indices of the workload's writes, in order.

    The workload's source without arrival times (they do not change which
    lines are written); stream ``requests`` of ``run.seed``.
    """
    if cfg.workload.pattern == "trace":
        # A trace is finite: the replay (method b) calls this again to loop it.
        from memsim.experiment.build import write_stream as trace_writes

        yield from trace_writes(cfg, endless=True)
        return
    # No hints: they name no new line, and without arrival times they would be
    # held back for ever.
    wl = cfg.workload.model_copy(update={"arrival": "closed", "requests": 1 << 62, "hint_lead_ns": 0.0})
    source = SyntheticSource(wl, cfg.footprint, named_stream(cfg.run.seed, "requests"), chunk,
                             address=folded_address(cfg, cfg.footprint))
    for c in source:
        yield c.line[c.op == WRITE]


def _write_rate(cfg: RunConfig, write_rate_gbps: float | None) -> tuple[float, str]:
    """Write rate in bytes/s and where it came from."""
    if write_rate_gbps is not None:
        if not (np.isfinite(write_rate_gbps) and write_rate_gbps > 0):
            raise ConfigError("write rate (--write-rate)", repr(write_rate_gbps), "a rate > 0 GB/s")
        return float(write_rate_gbps) * 1e9, "argument"
    if cfg.lifetime.write_rate_gbps > 0:
        return cfg.lifetime.write_rate_gbps * 1e9, "config"
    from memsim.experiment.run import simulate  # run.py imports this module

    n = min(cfg.workload.requests, _RATE_PROBE_REQUESTS)
    s = simulate(cfg, workload__requests=n).summary
    if s["writes"] == 0 or s["simulated_ns"] <= 0:
        raise ConfigError("lifetime.write_rate_gbps", "0 and a timing run without writes",
                          "a rate > 0 GB/s, or a workload with writes")
    rate = s["writes"] * cfg.array.line_bytes / s["simulated_ns"] * 1e9
    return rate, f"timing run ({n} requests)"


def lifetime(config: str | Path | Mapping | RunConfig | None = None,
             write_rate_gbps: float | None = None, method: str | None = None,
             **overrides: Any) -> RunResult:
    """Estimate the device's lifetime with the wear engine (no timing).

    Parameters
    ----------
    config:
        A TOML path, dict, RunConfig or None (defaults).
    write_rate_gbps:
        User write rate, GB/s.  Default: ``lifetime.write_rate_gbps``, or if
        that is 0, the rate a short timing run of the same config reaches
        (``write_rate_source`` says which).
    method:
        ``both``, ``extrapolated`` or ``run_to_failure``; default
        ``lifetime.method``.
    **overrides:
        ``section__key=value`` (or ``overrides={"section.key": value}``).

    Returns
    -------
    RunResult
        Summary (see the module docstring and the README), tables
        ``wear_histogram`` and ``wear_cdf`` (per-line wear of the window).

    Notes
    -----
    The measuring window is ``lifetime.window_writes`` user writes
    (0 = ``workload.requests``).  (a) extrapolates each line's wear rate
    over it; (b) replays the stream from the start, with every endurance
    divided by ``lifetime.endurance_scale``, until end of life, and scales
    the time back.  (b) is only as good as its scaled endurance allows: it
    must span many leveler cycles (``lifetime_replay_cycles``), and a line
    must not be able to die between two moves of the leveler, which real
    endurance would never allow (a hammered line under Start-Gap or
    Security Refresh); otherwise (b) understates the lifetime and (a) is
    the figure to use.  (a) in turn needs a window in which the leveler has
    spread the hot lines over every line many times; a ``wear_max_over_mean``
    well above 1 under a leveler means the window is too short and (a)
    understates the lifetime too.  ``lifetime_years`` is (a), or (b) if only (b) ran.
    What a write programs is measured by a short pass of the write scheme
    over the data model (:func:`sample_profile`).
    """
    from memsim.experiment.run import resolve  # run.py imports this module

    extra = overrides.pop("overrides", None) or {}
    cfg = resolve(config, {**extra, **overrides})
    method = method or cfg.lifetime.method
    if method not in METHODS:
        raise ConfigError("lifetime.method", repr(method), ", ".join(METHODS))
    if cfg.workload.read_fraction >= 1:
        raise ConfigError("workload.read_fraction", repr(cfg.workload.read_fraction),
                          "less than 1: lifetime needs writes")
    t0 = time.perf_counter()
    rate, source = _write_rate(cfg, write_rate_gbps)
    window = cfg.lifetime.window_writes or cfg.workload.requests
    if cfg.workload.pattern == "trace" and not cfg.lifetime.window_writes:
        from memsim.experiment.build import write_stream as trace_writes

        # One pass over the trace's writes.
        window = sum(int(w.size) for w in trace_writes(cfg, endless=False))
    scale = DeviceScale.of(cfg)
    lt = cfg.lifetime

    def stream() -> Iterator[np.ndarray]:
        return write_stream(cfg)

    def new_leveler() -> Leveler:
        if SCHEMES[cfg.write.scheme].out_of_place:
            e = cfg.erase
            pool = BlockPool(cfg.footprint, e.block_lines, e.spare_fraction, e.init_state, e.victim,
                             e.low_watermark, e.fallback)
            return PoolLeveler(pool, cfg.array.line_bytes * 8)     # bulk init drives every data cell
        return build_leveler(cfg, named_stream(cfg.run.seed, "leveler"))

    sample = sample_profile(cfg, named_stream(cfg.run.seed, "profile"), min(window, _PROFILE_WRITES))
    lv = new_leveler()
    profile = rotated_profile(path_profile(sample), sample.line_bits, lv)
    n_cells = profile_cells(sample)
    # The ledger counts cells; the death law's write equivalent is one write of `profile`.
    per_write = float(np.sum(np.broadcast_to(profile, (n_cells,))))
    cells_per_write = _pool_write_cells(cfg, sample) if isinstance(lv, PoolLeveler) else per_write
    counting = {"cells_per_write": cells_per_write, "wear_unit": per_write}
    wear = run_wear(track(stream(), window, "writes", "wear window"), lv, max_user_writes=window, **counting)
    law = DeathLaw(_endurance(cfg), n_cells, lt.ecp_entries, profile)
    dd = device_deaths(law, named_stream(cfg.run.seed, "endurance"), wear.line_wear / wear.user_writes,
                       scale.copies, scale.device_lines, lt.capacity_loss)
    ideal_years = _ideal_years(cfg, scale, rate)
    line_wear = wear.line_wear
    s: dict[str, Any] = {"lifetime_method": method, "write_rate_gbps": rate / 1e9,
                         "write_rate_source": source, "lifetime_traffic": scale.traffic,
                         "lifetime_line_scale": scale.line_scale, "device_lines": scale.device_lines,
                         "lifetime_ideal_years": ideal_years}
    even = _even_writes(law, line_wear, wear.user_writes, scale, lt.capacity_loss)
    args = (scale, cfg.array.line_bytes, rate, ideal_years, dd.weight, even)
    device_scale = ((lv.name in ("none", "start_gap", "randomized_start_gap", "security_refresh")
                     or (lv.name == "region_start_gap" and lv.perm is None and lt.capacity_loss == 0))
                    and scale.traffic == "spread")
    s["lifetime_leveling_scale"] = "device" if device_scale else "modeled"
    if not device_scale and not lv.scale_free() and scale.traffic == "spread" and scale.copies > 1:
        # The leveler ran on the modeled lines: its cycle is far shorter than
        # on the device, so its figure would look better than the device's.
        s.update({k: None for k in ("lifetime_years", "lifetime_first_failure_years", "lifetime_vs_ideal",
                                    "lifetime_vs_even_wear")})
        s["lifetime_note"] = (f"no estimate: {lv.name} is evaluated on the modeled lines only, whose cycle is "
                              f"{scale.copies:.0f}x shorter than the device's; set array.lines to the device's "
                              f"line count ({scale.device_lines:.0f}) for a direct evaluation")
        method = "none"
    if cfg.workload.sizing == "device_lines":
        from memsim.experiment.fixed_lifetime import device_lines_fields

        s.update(device_lines_fields(cfg, law, rate))
        s["lifetime_ideal_years"] = ideal_years
        method = "none"      # the modeled wear below is kept for its statistics only
    if method in ("both", "extrapolated"):
        if device_scale and lv.name == "none":
            # No remapping: each line wears at its own expected share (no window noise).
            rates = _device_rates(cfg, stream(), window)
            nd = device_deaths(law, named_stream(cfg.run.seed, "endurance"), rates, scale.copies,
                               scale.device_lines, lt.capacity_loss)
            a = extrapolate(WearResult(rates, np.zeros_like(rates), 1, 0, np.zeros(1)), nd)
            a.method = "device_scale"
        elif device_scale and lv.name == "region_start_gap":
            rates = _device_rates(cfg, stream(), window)
            rd = device_deaths(law, named_stream(cfg.run.seed, "endurance"), rates, scale.copies,
                               scale.device_lines, 0.0)
            q, rem = divmod(cfg.array.lines, lv.regions)     # the device's regions span every line
            sizes = np.where(np.arange(lv.regions) < rem, q + 1, q)
            w = region_start_gap_device_lifetime(rates, sizes, rd.first[:, None], lv.psi, scale.copies)
            t = scale.time_scale
            a = Lifetime("device_scale", w / t, w / t, 1 if np.isfinite(w) else 0, int(scale.device_lines))
        elif device_scale and lv.name == "security_refresh":
            a = _security_refresh_at_device(cfg, lv, law, stream(), window, scale)
            if np.isnan(a.end_writes) and scale.copies == 1:
                a = extrapolate(wear, dd)       # the modeled leveler is the device
                s["lifetime_leveling_scale"] = "modeled"
        elif device_scale and lv.name == "randomized_start_gap":
            a = _randomized_start_gap_at_device(cfg, lv, law, stream(), window, scale)
            if np.isnan(a.end_writes) and scale.copies == 1:
                # One modeled line per device line: the modeled leveler is the device.
                a = extrapolate(wear, dd)
                s["lifetime_leveling_scale"] = "modeled"
        elif device_scale:
            a = _start_gap_at_device(cfg, lv, law, stream(), window, scale)
        else:
            a = extrapolate(wear, dd)
        s.update(_years_fields("lifetime", a, *args))
        if np.isnan(a.end_writes):
            for k in ("lifetime_years", "lifetime_first_failure_years", "lifetime_vs_ideal",
                      "lifetime_vs_even_wear"):
                s[k] = None
            s["lifetime_note"] = (f"no device-scale estimate for {lv.name}: its device-scale approximation "
                                  f"does not hold for this traffic (see memsim.engine.device_wear)")
    replay_ok = lv.scale_free() or scale.copies == 1 or scale.traffic != "spread"
    if method in ("both", "run_to_failure") and not replay_ok:
        # The replay runs the leveler on the modeled lines: a cycle far too
        # short in device terms, so its figure would mislead.
        s["lifetime_replay_note"] = (f"no replay: {lv.name} would run on {cfg.array.lines} modeled lines standing "
                                     f"for {scale.device_lines:.0f} device lines; set array.lines to the "
                                     f"device's line count to replay it")
        if method == "run_to_failure":
            s.update({k: None for k in ("lifetime_years", "lifetime_first_failure_years", "lifetime_vs_ideal",
                                        "lifetime_vs_even_wear")})
            s["lifetime_note"] = s["lifetime_replay_note"]
        method = "extrapolated" if method == "both" else "none"
    if method in ("both", "run_to_failure"):
        cl, reachable = _capacity_share(dd)
        def replay_stream() -> Iterator[np.ndarray]:
            return track(stream(), None, "writes", "replay to failure")

        b = lifetime_to_failure(replay_stream, new_leveler(), dd.death, endurance_scale=lt.endurance_scale,
                                capacity_loss=cl, **counting)
        if not reachable:
            b.end_writes, b.reached_end = float("inf"), False
        if not dd.exact:           # strata do not hold the weakest copies
            b.first_failure_writes = float("nan")
        rep = _years_fields("lifetime_replay", b, *args)
        if method == "run_to_failure":
            s.update({k.replace("lifetime_replay", "lifetime"): v for k, v in rep.items()})
        s.update(rep)
        s["lifetime_replay_reached_end"] = b.reached_end
        s["lifetime_replay_endurance_scale"] = lt.endurance_scale
        # Writes actually replayed, in leveler cycles: a replay that ends
        # within a few cycles sees wear that has not evened out yet.
        s["lifetime_replay_cycles"] = b.end_writes / lt.endurance_scale / leveling_cycle_writes(lv)
        if method == "both":
            s["lifetime_replay_over_extrapolated"] = (
                rep["lifetime_replay_years"] / s["lifetime_years"] if (s["lifetime_years"] or 0) > 0 else None)
    mean = float(line_wear.mean())
    s.update({
        "leveling_write_overhead": wear.leveling_write_overhead,
        "wear_max_over_mean": wear.wear_max_over_mean,
        "wear_cov": wear.wear_cov,
        "lifetime_cells_per_write": per_write,
        **wear.ledger.summary(),
        "lifetime_death_sampling": "exact" if dd.exact else "strata",
        "lifetime_window_writes": wear.user_writes,
        "lifetime_window_line_writes_mean": mean,
        "lifetime_window_cycles": wear.user_writes / leveling_cycle_writes(lv),
    })
    return RunResult(s, wear_tables(line_wear), cfg.model_dump(), cfg.run.seed, __version__,
                     time.perf_counter() - t0)
