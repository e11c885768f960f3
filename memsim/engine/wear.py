"""Wear engine: fast-forward over the write stream alone (no timing).

Feeds chunks of logical line writes through a leveler and counts, per
physical line, user writes and the leveler's own move writes, plus a
per-bit-position program profile.  It is numpy over chunks: the leveler maps
a chunk in one call and ``np.bincount`` accumulates it.

Cell model.  ``cells`` says how many cells of a line one write programs:
``None`` (all of them, a full-line write), a scalar fraction, or a vector of
per-bit-position probabilities.  Wear is kept in *line-write equivalents*
``W = user + move_weight * moves`` per line; cell ``b`` of the line has then
been programmed ``W * q[b]`` times on average, with ``q`` the effective
profile (:func:`effective_profile`).  A move copies a line of user data, so
it is taken to program cells with the same profile as a user write, scaled
by ``move_weight`` (e.g. > 1 if moves are full-line writes while user writes
are differential).
"""
from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field

import numpy as np

from memsim.errors import ConfigError
from memsim.policy.leveling.base import Leveler


def cell_profile(cells: float | np.ndarray | None, line_bits: int) -> np.ndarray:
    """Per-bit-position program probability of one write (length ``line_bits``)."""
    if cells is None:
        return np.ones(line_bits)
    if np.ndim(cells) == 0:
        f = float(cells)
        if not 0 < f <= 1:
            raise ConfigError("wear.cells", repr(cells), "a fraction in (0, 1]")
        return np.full(line_bits, f)
    p = np.asarray(cells, dtype=np.float64)
    if p.shape != (line_bits,) or np.any(p < 0) or np.any(p > 1):
        raise ConfigError("wear.cells", f"array of shape {p.shape}",
                          f"{line_bits} probabilities in [0, 1]")
    return p


def rotate_profile(p: np.ndarray, offset_counts: np.ndarray) -> np.ndarray:
    """Sum over offsets ``o`` of ``offset_counts[o] * p`` rotated by ``o`` bits.

    A bit stored at logical position ``b`` with offset ``o`` lands on cell
    ``(b + o) mod L``.
    """
    out = np.zeros_like(p)
    for o in np.flatnonzero(offset_counts):
        out += offset_counts[o] * np.roll(p, int(o))
    return out


def effective_profile(cells: float | np.ndarray | None, line_bits: int,
                      leveler: Leveler | None = None) -> float | np.ndarray:
    """Steady-state per-cell program probability of one line write.

    A scalar when every cell is equally likely to be programmed (then the
    fast order-statistic endurance sampling applies); otherwise a vector,
    averaged over the bit rotation offsets the leveler cycles through.
    """
    if cells is None or np.ndim(cells) == 0:
        return 1.0 if cells is None else float(cell_profile(cells, line_bits)[0])
    p = cell_profile(cells, line_bits)
    steady = getattr(leveler, "steady_offsets", None)
    if steady is not None:
        offs = steady()
        p = rotate_profile(p, np.bincount(offs, minlength=line_bits)) / offs.size
    if np.allclose(p, p[0]):
        return float(p[0])
    return p


@dataclass
class WearResult:
    """Wear counted over a stream of user writes.

    Attributes
    ----------
    user_line_writes, move_line_writes:
        Per physical line (int64), user writes and leveler move writes.
    user_writes, cost_writes:
        Totals: user line writes fed; metadata line writes of the leveler.
    bit_profile:
        Expected programs per bit position, summed over all user writes and
        lines (after bit rotation); ``bit_profile / user_writes`` is the
        per-write profile actually seen.
    move_weight:
        Weight of a move relative to a user write in :attr:`line_wear`.
    """

    user_line_writes: np.ndarray
    move_line_writes: np.ndarray
    user_writes: int
    cost_writes: int
    bit_profile: np.ndarray
    move_weight: float = 1.0
    leveler_state: dict = field(default_factory=dict)

    @property
    def move_writes(self) -> int:
        return int(self.move_line_writes.sum())

    @property
    def line_wear(self) -> np.ndarray:
        """Write equivalents per physical line: user + move_weight * moves."""
        return self.user_line_writes + self.move_weight * self.move_line_writes

    @property
    def leveling_write_overhead(self) -> float:
        """Extra line writes (moves + metadata) per user write."""
        return (self.move_writes + self.cost_writes) / max(self.user_writes, 1)

    @property
    def wear_max_over_mean(self) -> float:
        w = self.line_wear
        return float(w.max() / w.mean()) if w.mean() > 0 else 0.0

    @property
    def wear_cov(self) -> float:
        w = self.line_wear
        return float(w.std() / w.mean()) if w.mean() > 0 else 0.0

    def summary(self) -> dict:
        return {"user_writes": self.user_writes, "move_writes": self.move_writes,
                "cost_writes": self.cost_writes,
                "leveling_write_overhead": self.leveling_write_overhead,
                "wear_max_over_mean": self.wear_max_over_mean,
                "wear_cov": self.wear_cov}


class WearCounter:
    """Incremental wear accumulation; :func:`run_wear` drives it over a stream.

    Parameters
    ----------
    leveler:
        The scheme (its state advances as chunks are fed).
    cells:
        Cells programmed per write (see module docstring).
    line_bits:
        Cells per line.
    move_weight:
        Weight of a move write relative to a user write.
    """

    def __init__(self, leveler: Leveler, *, cells: float | np.ndarray | None = None,
                 line_bits: int = 512, move_weight: float = 1.0) -> None:
        if not move_weight >= 0:
            raise ConfigError("wear.move_weight", repr(move_weight), "a number >= 0")
        self.leveler = leveler
        self.line_bits = int(line_bits)
        self.p = cell_profile(cells, self.line_bits)
        self.move_weight = float(move_weight)
        P = leveler.n_physical
        self.user = np.zeros(P, dtype=np.int64)
        self.moved = np.zeros(P, dtype=np.int64)
        self.user_writes = 0
        self.cost_writes = 0
        self.offset_counts = np.zeros(self.line_bits, dtype=np.int64)
        self._pending: list[np.ndarray] = []
        self._pending_n = 0

    def feed(self, logical: np.ndarray) -> None:
        """Apply one chunk of logical line writes."""
        la = np.asarray(logical, dtype=np.int64)
        if la.size == 0:
            return
        res = self.leveler.apply(la)
        P = self.user.size
        # Counting a chunk much smaller than the line space with bincount
        # would cost O(P) per chunk; batch chunks until they are about P long.
        self._pending.append(res.phys)
        self._pending_n += res.phys.size
        if self._pending_n >= P:
            self._flush()
        dst = res.moves.dst
        if dst.size * 8 < P:
            np.add.at(self.moved, dst, 1)
        elif dst.size:
            self.moved += np.bincount(dst, minlength=P)
        self.cost_writes += res.moves.cost_writes
        if res.bit_offset is None:
            self.offset_counts[0] += la.size
        else:
            self.offset_counts += np.bincount(res.bit_offset % self.line_bits,
                                              minlength=self.line_bits)
        self.user_writes += la.size

    def _flush(self) -> None:
        if self._pending:
            phys = self._pending[0] if len(self._pending) == 1 else np.concatenate(self._pending)
            self.user += np.bincount(phys, minlength=self.user.size)
            self._pending.clear()
            self._pending_n = 0

    def wear(self) -> np.ndarray:
        """Current write equivalents per physical line (float64)."""
        self._flush()
        return self.user + self.move_weight * self.moved

    def result(self) -> WearResult:
        self._flush()
        return WearResult(
            user_line_writes=self.user.copy(), move_line_writes=self.moved.copy(),
            user_writes=self.user_writes, cost_writes=self.cost_writes,
            bit_profile=rotate_profile(self.p, self.offset_counts),
            move_weight=self.move_weight, leveler_state=self.leveler.state())


def run_wear(chunks: Iterable[np.ndarray], leveler: Leveler, *,
             cells: float | np.ndarray | None = None, line_bits: int = 512,
             move_weight: float = 1.0, max_user_writes: int | None = None) -> WearResult:
    """Fast-forward a stream of logical line writes through ``leveler``.

    Parameters
    ----------
    chunks:
        Iterable of int64 arrays of logical line indices, in write order.
    leveler:
        Wear-leveling scheme; its state advances.
    cells, line_bits, move_weight:
        Cell model (see module docstring).
    max_user_writes:
        Stop after this many user writes (the last chunk is cut).

    Returns
    -------
    WearResult
    """
    wc = WearCounter(leveler, cells=cells, line_bits=line_bits, move_weight=move_weight)
    for chunk in chunks:
        if max_user_writes is not None:
            left = max_user_writes - wc.user_writes
            if left <= 0:
                break
            chunk = chunk[:left]
        wc.feed(chunk)
    return wc.result()
