"""Cost of programming lines of multi-level cells with program-and-verify.

Each group of ``bits_per_cell`` bits of a line is one cell; its Gray-coded
value is the cell's level.  A write programs the cells whose level changes
(every cell under a full-line write).  Each programmed cell takes a sampled
number of iterations (pulse + verify) for its target level
(:meth:`MlcCell.sample_iterations`).  Cells are programmed in rounds limited
by the bank's current budget, every pulse drawing up to ``pulse_ua``; a round
lasts as long as its slowest cell.  Energy and wear (pulses) add up over
cells.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from memsim.tech.mlc import MlcCell, gray_decode


@dataclass
class MlcCost:
    program_ns: np.ndarray     # per line
    energy_pj: np.ndarray      # per line (pulses + verifies)
    pulses: np.ndarray         # per line, summed over cells
    cells: np.ndarray          # programmed cells per line


def cell_levels(lines: np.ndarray, bits_per_cell: int) -> np.ndarray:
    """Levels ``(n, cells)`` of packed lines ``(n, line_bytes)``."""
    bits = np.unpackbits(lines, axis=1).astype(np.int64)
    n, nb = bits.shape
    if nb % bits_per_cell:
        # The last cell of the line is only partly used (e.g. 3-bit cells).
        pad = bits_per_cell - nb % bits_per_cell
        bits = np.concatenate([bits, np.zeros((n, pad), np.int64)], axis=1)
        nb += pad
    groups = bits.reshape(n, nb // bits_per_cell, bits_per_cell)
    weights = 1 << np.arange(bits_per_cell - 1, -1, -1)
    return gray_decode(groups @ weights)


class MlcProgrammer:
    """Program-and-verify cost of batches of line writes."""

    def __init__(self, cell: MlcCell, budget_ua: float, pulse_ua: float,
                 rng: np.random.Generator) -> None:
        self.cell = cell
        self.per_round = max(1, int(budget_ua // pulse_ua))
        self.rng = rng
        self.iter_ns = np.asarray(cell.iteration_ns())
        self.iter_pj = np.asarray(cell.iteration_pj())

    def cost(self, old: np.ndarray, new: np.ndarray, full: bool = False) -> MlcCost:
        b = self.cell.bits_per_cell
        lv_new = cell_levels(new, b)
        n, ncells = lv_new.shape
        prog = np.ones_like(lv_new, dtype=bool) if full else (cell_levels(old, b) != lv_new)
        iters = np.zeros(lv_new.shape, dtype=np.int64)
        iters[prog] = self.cell.sample_iterations(lv_new[prog], self.rng)
        cell_ns = iters * self.iter_ns[lv_new]
        energy = (iters * self.iter_pj[lv_new]).sum(axis=1)
        # Round of each programmed cell: its rank among the line's programmed
        # cells, divided by the cells one round may drive.
        rank = np.cumsum(prog, axis=1) - 1
        rnd = np.where(prog, rank // self.per_round, 0)
        rounds = -(-ncells // self.per_round)
        per_round = np.zeros((n, rounds))
        rows = np.repeat(np.arange(n), ncells).reshape(n, ncells)
        np.maximum.at(per_round, (rows[prog], rnd[prog]), cell_ns[prog])
        return MlcCost(per_round.sum(axis=1), energy, iters.sum(axis=1), prog.sum(axis=1))
