"""Start-Gap wear leveling: N logical lines rotate over N + 1 physical lines.

Two registers, Start and Gap, describe the whole map.  Every ``psi`` user
writes the gap moves down by one line (the line just below it is copied into
it); when it reaches line 0 the next move copies line N into line 0, the gap
returns to N and Start advances by one.  After ``c`` gap moves the registers
are known in closed form, which is what makes the scheme vectorizable:

* one cycle is N + 1 moves,
* ``start = (c // (N + 1)) mod N``,
* ``gap = N - (c mod (N + 1))``,
* ``PA = (LA + start) mod N``, then ``PA += 1`` if ``PA >= gap``.

References
----------
M. K. Qureshi, J. Karidis, M. Franceschini, V. Srinivasan, L. Lastras and
B. Abali, "Enhancing lifetime and security of PCM-based main memory with
Start-Gap wear leveling", MICRO 2009. doi:10.1145/1669112.1669117
"""
from __future__ import annotations

import numpy as np

from memsim.policy.leveling._common import check_int, step_events, step_runs
from memsim.policy.leveling.base import Leveler, LevelResult, Moves
from memsim.policy.leveling.device_model import DeviceModel
from memsim.policy.leveling.device_models import StartGapDevice


def sg_registers(c: np.ndarray | int, n: np.ndarray | int) -> tuple[np.ndarray, np.ndarray]:
    """Start and Gap registers after ``c`` gap moves on ``n`` logical lines."""
    c = np.asarray(c, dtype=np.int64)
    n = np.asarray(n, dtype=np.int64)
    cycles = c // (n + 1)
    return cycles % n, n - (c - cycles * (n + 1))


def sg_map(la: np.ndarray, start: np.ndarray | int, gap: np.ndarray | int,
           n: np.ndarray | int) -> np.ndarray:
    """Physical line of logical lines ``la`` for given registers (vectorized)."""
    pa = np.add(la, start, dtype=np.int64)
    # (la + start) < 2n, so one conditional subtraction is the modulo.
    np.subtract(pa, n, out=pa, where=pa >= n)
    pa += pa >= gap
    return pa


def sg_move(c: np.ndarray, n: np.ndarray | int) -> tuple[np.ndarray, np.ndarray]:
    """Source and destination of gap move number ``c`` (0-based)."""
    c = np.asarray(c, dtype=np.int64)
    n = np.asarray(n, dtype=np.int64)
    gap = n - c % (n + 1)
    src = np.where(gap == 0, n, gap - 1)
    return src, gap


class StartGap(Leveler):
    """Start-Gap over the whole line space.

    Parameters
    ----------
    n_logical:
        Logical lines N; the scheme uses N + 1 physical lines.
    rng:
        Unused (the scheme is deterministic); kept for the common signature.
    psi:
        User writes between two gap moves.  Each gap move is one extra line
        write, so the write overhead is ``1 / psi``.

    References
    ----------
    M. K. Qureshi et al., "Enhancing lifetime and security of PCM-based main
    memory with Start-Gap wear leveling", MICRO 2009.
    """

    name = "start_gap"

    def __init__(self, n_logical: int, rng: np.random.Generator | None = None, *,
                 psi: int = 100) -> None:
        check_int("n_logical", n_logical, 1)
        super().__init__(n_logical, rng)
        self.psi = check_int("psi", psi, 1)
        self.n_physical = self.n_logical + 1
        self.gap_moves = 0

    @property
    def start(self) -> int:
        return int(sg_registers(self.gap_moves, self.n_logical)[0])

    @property
    def gap(self) -> int:
        return int(sg_registers(self.gap_moves, self.n_logical)[1])

    def lookup(self, logical: np.ndarray) -> np.ndarray:
        return sg_map(np.asarray(logical, dtype=np.int64), self.start, self.gap,
                      self.n_logical)

    def apply(self, logical: np.ndarray) -> LevelResult:
        la = np.asarray(logical, dtype=np.int64)
        n, N, w0 = la.size, self.n_logical, self.user_writes
        vals, lens = step_runs(w0, n, self.psi)
        start_v, gap_v = sg_registers(vals, N)
        gap = np.repeat(gap_v, lens)
        if np.all(start_v == start_v[0]):   # common: no Start change in chunk
            phys = sg_map(la, int(start_v[0]), gap, N)
        else:
            phys = sg_map(la, np.repeat(start_v, lens), gap, N)
        c, after = step_events(w0, n, self.psi)
        src, dst = sg_move(c, N)
        self.user_writes += n
        self.gap_moves = int(vals[-1])
        self.move_writes += c.size
        return LevelResult(phys=phys, moves=Moves(src, dst, after, 0))

    def device_model(self) -> DeviceModel:
        return StartGapDevice(self.psi)

    def cycle_writes(self) -> float:
        """A full Start rotation: ``N (N + 1) psi`` user writes (Qureshi et al., MICRO 2009)."""
        n = self.n_logical
        return float(n) * (n + 1) * self.psi

    def state(self) -> dict:
        return {"scheme": self.name, "psi": self.psi, "start": self.start,
                "gap": self.gap, "gap_moves": self.gap_moves, **super().state()}
