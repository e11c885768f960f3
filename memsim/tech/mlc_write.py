"""Cost of programming lines of multi-level cells with program-and-verify.

Each group of ``bits_per_cell`` bits of a line is one cell; its Gray-coded
value is the cell's level.  A write programs the cells whose level changes
(every cell under a full-line write).  Each programmed cell needs a sampled
number of attempts for its target level (:meth:`MlcCell.sample_attempts`),
at most ``pv_max_iterations``.

The cells of a line iterate in lock step: iteration ``k`` pulses every cell
that has not verified yet, then verifies the line once.  The pulses of an
iteration are driven in rounds limited by the bank's current budget, each
pulse drawing ``pulse_ua``; a round lasts as long as the longest pulse among
the cells still active.  As cells converge, later iterations need fewer
rounds and draw less current, so::

    program_ns = sum_k ( ceil(active_k / per_round) * max pulse of active_k + verify_ns )

Energy and wear (pulses) add up over cells: a cell costs its attempts times
``pulse + verify``.  A cell that still fails to verify at the cap stays
outside its verify band: it is counted as unconverged and feeds the error
rate right after the write (:mod:`memsim.tech.drift`).

The timing engine holds one current per write (its peak, the first
iteration); the falling current shows in the mean current this module
reports, in time and in energy.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from memsim.seeds import keyed_uniforms
from memsim.tech.mlc import TRI_WORD_LEVELS, MlcCell, gray_decode


@dataclass
class MlcCost:
    program_ns: np.ndarray     # per line
    energy_pj: np.ndarray      # per line (pulses + verifies)
    pulses: np.ndarray         # per line, summed over cells
    cells: np.ndarray          # programmed cells per line
    unconverged: np.ndarray    # programmed cells per line left outside their verify band
    iterations: np.ndarray     # lock-step iterations per line
    charge_ua_ns: np.ndarray   # programming current integrated over the write, uA ns


def tri_levels(lines: np.ndarray) -> np.ndarray:
    """Levels ``(n, 2 * words)`` of packed lines stored in tri-level pairs,
    3 bits per pair (the last word is zero-padded)."""
    bits = np.unpackbits(lines, axis=1).astype(np.int64)
    n, nb = bits.shape
    pad = -nb % 3
    if pad:
        bits = np.concatenate([bits, np.zeros((n, pad), np.int64)], axis=1)
    words = bits.reshape(n, -1, 3) @ np.array([4, 2, 1])
    return TRI_WORD_LEVELS[words].reshape(n, -1)


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
    """Program-and-verify cost of batches of line writes, with running totals."""

    def __init__(self, cell: MlcCell, budget_ua: float, pulse_ua: float,
                 rng: np.random.Generator) -> None:
        self.cell = cell
        self.salt: int | None = None      # of the keyed draws, taken from rng at first use
        self.per_round = max(1, int(budget_ua // pulse_ua))
        self.pulse_ua = pulse_ua
        self.rng = rng
        self.pulse_ns = np.asarray(cell.pulse_ns, dtype=np.float64)
        self.iter_pj = np.asarray(cell.iteration_pj())
        self.totals = {"lines": 0, "cells": 0, "unconverged": 0, "iterations": 0,
                       "program_ns": 0.0, "charge_ua_ns": 0.0, "peak_ua": 0.0}

    def cost(self, old: np.ndarray, new: np.ndarray, full: bool = False,
             keys: np.ndarray | None = None) -> MlcCost:
        """Cost of writing lines ``old`` -> ``new``.

        ``keys`` (one int per line, unique over the run) make each cell's
        attempts a keyed draw (:func:`memsim.seeds.keyed_uniforms` of the
        line's key and the cell's position), the same however writes are
        batched; without keys the attempts come from the programmer's
        generator in batch order.
        """
        c = self.cell
        lv_new = self.levels(new)
        n = lv_new.shape[0]
        prog = np.ones_like(lv_new, dtype=bool) if full else (self.levels(old) != lv_new)
        iters = np.zeros(lv_new.shape, dtype=np.int64)
        unconv = np.zeros(lv_new.shape, dtype=bool)
        if keys is None:
            iters[prog], conv = c.sample_attempts(lv_new[prog], self.rng)
        else:
            if self.salt is None:
                self.salt = int(self.rng.integers(0, 2 ** 63))
            row, col = np.nonzero(prog)
            u = keyed_uniforms(self.salt, np.asarray(keys, np.int64)[row], col)
            iters[prog], conv = c.attempts_from_uniforms(lv_new[prog], u)
        unconv[prog] = ~conv
        energy = (iters * self.iter_pj[lv_new]).sum(axis=1)
        pulse = np.where(prog, self.pulse_ns[lv_new], 0.0)
        program = np.zeros(n)
        charge = np.zeros(n)
        n_iter = iters.max(axis=1, initial=0)
        for k in range(1, int(n_iter.max(initial=0)) + 1):
            active = iters >= k
            count = active.sum(axis=1)
            busy = count > 0
            rounds = -(-count // self.per_round)
            longest = np.where(active, pulse, 0.0).max(axis=1)
            program += np.where(busy, rounds * longest + c.verify_ns, 0.0)
            # Every active cell draws pulse_ua for its own pulse.
            charge += np.where(active, pulse, 0.0).sum(axis=1) * self.pulse_ua
        cells = prog.sum(axis=1)
        unconverged = unconv.sum(axis=1)
        t = self.totals
        t["lines"] += n
        t["cells"] += int(cells.sum())
        t["unconverged"] += int(unconverged.sum())
        t["iterations"] += int(n_iter.sum())
        t["program_ns"] += float(program.sum())
        t["charge_ua_ns"] += float(charge.sum())
        if n:
            t["peak_ua"] = max(t["peak_ua"], float(np.minimum(cells, self.per_round).max()) * self.pulse_ua)
        return MlcCost(program, energy, iters.sum(axis=1), cells, unconverged, n_iter, charge)

    def levels(self, lines: np.ndarray) -> np.ndarray:
        if self.cell.tri_level:
            return tri_levels(lines)
        return cell_levels(lines, self.cell.bits_per_cell)

    def summary(self) -> dict[str, float | None]:
        """Totals over every line programmed so far (user writes, moves, refreshes)."""
        t = self.totals
        return {
            "verify_cells_programmed": t["cells"],
            "verify_unconverged_cells": t["unconverged"],
            "verify_unconverged_share": t["unconverged"] / t["cells"] if t["cells"] else None,
            "verify_iterations_per_line_mean": t["iterations"] / t["lines"] if t["lines"] else None,
            "verify_program_ns_per_line_mean": t["program_ns"] / t["lines"] if t["lines"] else None,
            "verify_current_mean_ua": t["charge_ua_ns"] / t["program_ns"] if t["program_ns"] else None,
            "verify_current_peak_ua": t["peak_ua"],
        }
