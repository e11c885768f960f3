"""What one line write programs: the per-cell profile of a write scheme, for lifetime.

The death law of a line needs the probability that one write programs each
of its cells (data and flag cells); it depends on the data model and the
write scheme, not on which line is written, so it is measured on a short
pass (:func:`sample_profile`) or read from a timing run's write path
(:func:`path_profile`), and averaged over the bit offsets of a rotating
leveler (:func:`rotated_profile`).
"""
from __future__ import annotations

import numpy as np
from scipy import stats

from memsim.config import RunConfig
from memsim.engine.wear import rotate_profile
from memsim.experiment.build import build_path
from memsim.policy.leveling.base import Leveler
from memsim.policy.write.bits import popcount_rows
from memsim.policy.writepath import WritePath

PROFILE_WRITES = 1 << 15           # writes of the profile pass
_PROFILE_LINES = 1024              # lines of the profile pass
_DISPERSION = 2.0                  # variance allowance of pooled_profile



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
    if path.cell_profile is not None:
        return int(path.cell_profile.size)
    if path.mlc is not None:
        return path.mlc.cell.cells_per_line(path.line_bits)
    return path.line_bits


def path_profile(path: WritePath) -> float | np.ndarray:
    """Per-cell program probability of one line write in ``path`` (moves included).

    Multi-level cells are counted in pulses per cell (may exceed 1).
    """
    writes = float(path.line_writes.sum())
    if path.cell_profile is None:
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


def pool_write_cells(cfg: RunConfig, sample: WritePath) -> float:
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
