"""Rotation of bits within a line.

Data-dependent writes (differential write, Flip-N-Write) wear some bit
positions of a line more than others (e.g. the low bytes of counters).
Rotating the stored image by an offset that changes over time spreads that
wear over the line.  The line mapping is left to an optional inner leveler.

Our choice: one *global* offset, advanced by ``step`` bits every
``interval`` user writes (to any line), so the state is one counter.  Each
write stores its line at the offset current when it is written; a real
controller keeps that offset in a few metadata bits of the line
(``log2(line_bits / gcd(step, line_bits))`` bits), which is how reads undo
the rotation and how a differential write aligns the old image.  In steady
state every offset in ``steady_offsets()`` is used equally often.

References
----------
P. Zhou, B. Zhao, J. Yang and Y. Zhang, "A durable and energy efficient
main memory using phase change memory technology", ISCA 2009 (row shifting).
"""
from __future__ import annotations

from math import gcd

import numpy as np

from memsim.policy.leveling._common import check_int, step_runs
from memsim.policy.leveling.base import Leveler, LevelResult
from memsim.policy.leveling.none import NoLeveling


class BitRotation(Leveler):
    """Global rotating bit offset on top of an optional line remapper.

    Parameters
    ----------
    n_logical:
        Logical lines.
    rng:
        Passed to nothing (the inner leveler was built with its own).
    line_bits:
        Bits (cells) per line.
    interval:
        User writes between two advances of the offset.
    step:
        Bits the offset advances by.
    inner:
        Line remapper applied underneath (default: none).

    References
    ----------
    P. Zhou et al., ISCA 2009.
    """

    name = "bit_rotation"

    def __init__(self, n_logical: int, rng: np.random.Generator | None = None, *,
                 line_bits: int = 512, interval: int = 1000, step: int = 8,
                 inner: Leveler | None = None) -> None:
        check_int("n_logical", n_logical, 1)
        super().__init__(n_logical, rng)
        self.line_bits = check_int("line_bits", line_bits, 1)
        self.interval = check_int("interval", interval, 1)
        self.step = check_int("step", step, 1)
        self.inner = inner if inner is not None else NoLeveling(self.n_logical)
        self.n_physical = self.inner.n_physical

    @property
    def offset(self) -> int:
        """Offset the next user write will be stored with."""
        return (self.user_writes // self.interval * self.step) % self.line_bits

    def rotation(self, phys_lines: np.ndarray) -> np.ndarray:
        """Bit offset a write issued now to each of ``phys_lines`` uses."""
        return np.full(np.shape(phys_lines), self.offset, dtype=np.int64)

    def steady_offsets(self) -> np.ndarray:
        """Offsets visited, equally often, over a full rotation."""
        return np.arange(0, self.line_bits, gcd(self.step, self.line_bits),
                         dtype=np.int64)

    def lookup(self, logical: np.ndarray) -> np.ndarray:
        return self.inner.lookup(logical)

    def apply(self, logical: np.ndarray) -> LevelResult:
        la = np.asarray(logical, dtype=np.int64)
        vals, lens = step_runs(self.user_writes, la.size, self.interval)
        offsets = np.repeat((vals * self.step) % self.line_bits, lens)
        res = self.inner.apply(la)
        self.user_writes += la.size
        self.move_writes = self.inner.move_writes
        return LevelResult(phys=res.phys, moves=res.moves, bit_offset=offsets)

    def scale_free(self) -> bool:
        """Rotation within a line does not depend on the line count; the remapper under it may."""
        return self.inner.scale_free()

    def cycle_writes(self) -> float:
        """A full turn of the bit offset, or the inner remapper's cycle if longer."""
        turn = self.line_bits // gcd(self.step, self.line_bits) * self.interval
        return float(np.nanmax([turn, self.inner.cycle_writes()]))

    def state(self) -> dict:
        return {"scheme": self.name, "line_bits": self.line_bits,
                "interval": self.interval, "step": self.step,
                "offset": self.offset, "inner": self.inner.state(),
                **super().state()}
