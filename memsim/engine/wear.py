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

Every program is also recorded in a :class:`~memsim.policy.ledger.WearLedger`
(user writes, moves, metadata, and with :class:`PoolLeveler` the erase pool's
cleaner moves and bulk initializations), in cells: ``cells_per_write`` cells
per user write or move.  :meth:`WearCounter.wear` reads the ledger, in units
of ``wear_unit`` cells (the cells one write of the death law's profile
programs), so every program counts toward lifetime.

Block erase.  :class:`PoolLeveler` drives a
:class:`~memsim.policy.erase.BlockPool` through
:meth:`~memsim.policy.erase.BlockPool.apply_instant` (cleaning and bulk
initialization take no time): each user write lands out of place, the
cleaner's copies are moves, and every line of an initialized block is
charged ``erase_cells_per_line`` cells.
"""
from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field

import numpy as np

from memsim.errors import ConfigError
from memsim.policy.erase import BlockPool
from memsim.policy.ledger import WearLedger
from memsim.policy.leveling.base import Leveler, LevelResult


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
    ledger: WearLedger | None = None
    wear_unit: float = 1.0

    @property
    def move_writes(self) -> int:
        return int(self.move_line_writes.sum())

    @property
    def line_wear(self) -> np.ndarray:
        """Write equivalents per physical line: the ledger's cells over ``wear_unit``
        (without a ledger, user + move_weight * moves)."""
        if self.ledger is not None:
            return self.ledger.line_cells() / self.wear_unit
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
                 line_bits: int = 512, move_weight: float = 1.0,
                 cells_per_write: float | None = None, wear_unit: float | None = None) -> None:
        if not move_weight >= 0:
            raise ConfigError("wear.move_weight", repr(move_weight), "a number >= 0")
        self.leveler = leveler
        self.line_bits = int(line_bits)
        self.p = cell_profile(cells, self.line_bits)
        self.move_weight = float(move_weight)
        self.cells_per_write = float(self.p.sum() if cells_per_write is None else cells_per_write)
        self.wear_unit = float(self.cells_per_write if wear_unit is None else wear_unit)
        P = leveler.n_physical
        self.ledger = WearLedger(P)
        # Erase-pool cleaner copies are erase wear, not leveling moves.
        self.move_cause = getattr(leveler, "move_cause", "move")
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
        self.ledger.add(self.move_cause, dst, self.cells_per_write * self.move_weight)
        if res.moves.cost_writes:
            self.ledger.add("meta", None, res.moves.cost_writes * self.line_bits)
        erased = getattr(self.leveler, "erased_lines", None)
        if erased is not None and erased.size:
            self.ledger.add("erase", erased, self.leveler.erase_cells_per_line)
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
            self.ledger.add("user", phys, self.cells_per_write)
            self._pending.clear()
            self._pending_n = 0

    def wear(self) -> np.ndarray:
        """Current write equivalents per physical line (float64), from the ledger."""
        self._flush()
        return self.ledger.line_cells() / self.wear_unit

    def result(self) -> WearResult:
        self._flush()
        return WearResult(
            user_line_writes=self.user.copy(), move_line_writes=self.moved.copy(),
            user_writes=self.user_writes, cost_writes=self.cost_writes,
            bit_profile=rotate_profile(self.p, self.offset_counts),
            move_weight=self.move_weight, leveler_state=self.leveler.state(), ledger=self.ledger,
            wear_unit=self.wear_unit)


class PoolLeveler(Leveler):
    """A block-erase pool as the wear engine's line map (cleaning takes no time).

    Parameters
    ----------
    pool:
        The block pool (its state advances).
    erase_cells_per_line:
        Cells a bulk initialization programs per line (every cell: the
        line's bits).
    """

    name = "block_erase_pool"
    move_cause = "erase"

    def __init__(self, pool: BlockPool, erase_cells_per_line: float) -> None:
        super().__init__(pool.n_logical)
        self.pool = pool
        self.n_physical = pool.n_physical
        self.erase_cells_per_line = float(erase_cells_per_line)
        self.erased_lines = np.empty(0, dtype=np.int64)

    def lookup(self, logical: np.ndarray) -> np.ndarray:
        return self.pool.l2p()[np.asarray(logical, dtype=np.int64)]

    def scale_free(self) -> bool:
        # Cleaning depends on the spare share and block size, not on how many
        # blocks there are (many-blocks limit, policy/erase.py).
        return True

    def apply(self, logical: np.ndarray) -> LevelResult:
        r = self.pool.apply_instant(logical)
        B = self.pool.block_lines
        self.erased_lines = (r.erased[:, None] * B + np.arange(B)).ravel()
        self.user_writes += r.phys.size
        self.move_writes += len(r.moves)
        return LevelResult(phys=r.phys, moves=r.moves)

    def state(self) -> dict:
        return {"scheme": self.name, "erases": int(self.pool.erase_count.sum()), **super().state()}


def run_wear(chunks: Iterable[np.ndarray], leveler: Leveler, *,
             cells: float | np.ndarray | None = None, line_bits: int = 512,
             move_weight: float = 1.0, max_user_writes: int | None = None,
             cells_per_write: float | None = None, wear_unit: float | None = None) -> WearResult:
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
    wc = WearCounter(leveler, cells=cells, line_bits=line_bits, move_weight=move_weight,
                     cells_per_write=cells_per_write, wear_unit=wear_unit)
    for chunk in chunks:
        if max_user_writes is not None:
            left = max_user_writes - wc.user_writes
            if left <= 0:
                break
            chunk = chunk[:left]
        wc.feed(chunk)
    return wc.result()
