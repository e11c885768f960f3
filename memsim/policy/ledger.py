"""The wear ledger: every cell program of a run, per line and by cause.

Whatever issues a program -- a user write, a leveler move, a refresh, the
part of a cancelled write that was already programmed, a hint's
pre-programming, an erase pool's bulk initialization or cleaner move, a
metadata write -- calls :meth:`WearLedger.add` once, and lifetime is computed
from the ledger alone.  Counts are cells programmed (pulses for multi-level
cells).  Metadata kept outside the modeled lines (a leveler's table) has no
line: it is added with ``phys_lines=None`` and held per cause, so that the
parts still sum to the total.
"""
from __future__ import annotations

import numpy as np
from numba import njit

CAUSES = ("user", "move", "refresh", "cancelled", "preset", "erase", "meta")
_INDEX = {c: i for i, c in enumerate(CAUSES)}


class WearLedger:
    """Cells programmed per line (``n_lines`` lines) and per cause.

    Counts are float64 so that expected (fractional) counts of the wear
    engine and exact integer counts of the timing engine share one type;
    integers stay exact up to 2**53.
    """

    def __init__(self, n_lines: int) -> None:
        self.n_lines = int(n_lines)
        self.cells = np.zeros((len(CAUSES), self.n_lines), dtype=np.float64)
        self.unplaced = np.zeros(len(CAUSES), dtype=np.float64)
        self._scratch: np.ndarray | None = None     # zeros between calls

    def add(self, cause: str, phys_lines: int | np.ndarray | None,
            cells: float | np.ndarray) -> None:
        """Count ``cells`` programs of ``cause`` on lines ``phys_lines``.

        ``phys_lines`` is one line, an array (repeats allowed; ``cells`` a
        scalar or one value per entry), or None for programs outside the
        modeled lines.
        """
        i = _INDEX[cause]
        if phys_lines is None:
            self.unplaced[i] += float(np.sum(cells))
            return
        if isinstance(phys_lines, (int, np.integer)):
            self.cells[i, phys_lines] += cells
            return
        p = np.asarray(phys_lines, dtype=np.int64).ravel()
        if p.size == 0:
            return
        w = np.broadcast_to(np.asarray(cells, dtype=np.float64), p.shape)
        if p.size * 2 >= self.n_lines:
            self.cells[i] += np.bincount(p, weights=w, minlength=self.n_lines)
            return
        if p.min() < 0 or p.max() >= self.n_lines:
            raise IndexError(f"wear ledger: line outside 0..{self.n_lines - 1}")
        w = np.ascontiguousarray(w)
        if p.size * 8 >= self.n_lines:
            # As row += bincount(...): per-line sums first, then one addition
            # per line (the same float rounding), touching only the lines named.
            if self._scratch is None:
                self._scratch = np.zeros(self.n_lines)
            _add_summed(self.cells[i], p, w, self._scratch)
        else:
            _add_each(self.cells[i], p, w)    # as np.add.at: one addition per entry, in order

    def line_cells(self) -> np.ndarray:
        """Cells programmed per line, all causes (a new array)."""
        return self.cells.sum(axis=0)

    def cause_totals(self) -> dict[str, float]:
        """Cells programmed per cause, lines plus unplaced."""
        t = self.cells.sum(axis=1) + self.unplaced
        return {c: float(t[i]) for i, c in enumerate(CAUSES)}

    def total(self) -> float:
        return float(self.cells.sum() + self.unplaced.sum())

    def summary(self) -> dict[str, float]:
        """``wear_cells_total`` and ``wear_cells_<cause>`` for every cause."""
        parts = self.cause_totals()
        out = {"wear_cells_total": float(sum(parts.values()))}
        out.update({f"wear_cells_{c}": v for c, v in parts.items()})
        return out


@njit(cache=True)
def _add_summed(row, p, w, scratch):
    for k in range(p.size):
        scratch[p[k]] += w[k]
    for k in range(p.size):
        q = p[k]
        row[q] += scratch[q]
        scratch[q] = 0.0


@njit(cache=True)
def _add_each(row, p, w):
    for k in range(p.size):
        row[p[k]] += w[k]
