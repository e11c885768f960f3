"""Contract of a wear leveler: a logical -> physical line map with state.

A leveler sees the stream of *user line writes* in the order the controller
accepts them, chunk by chunk, and answers two questions:

* where does each write land (its physical line at the moment it is issued);
* which extra line moves does the scheme itself make, and when.

Both engines (timing and wear) call the same object, so they cannot disagree
about what a scheme does.  State must stay small and inspectable
(:meth:`Leveler.state`).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from memsim.policy.leveling.device_model import DeviceModel


@dataclass(frozen=True)
class Moves:
    """Extra line copies a leveler makes while a chunk of writes is applied.

    ``src[k]`` is copied to ``dst[k]`` right after the user write with index
    ``after[k]`` in the chunk (``after`` is non-decreasing; several moves may
    follow the same write).  Indices are physical lines.  ``cost_writes`` is
    any further write traffic the scheme spends on its own metadata (e.g. a
    remapping table kept in the same memory), counted in whole line writes.

    Entries that share one ``after`` index form a single step done as a
    parallel copy: every ``src`` of the step is read before any ``dst`` is
    written.  A swap of two lines is therefore two entries with the same
    ``after`` (``a -> b`` and ``b -> a``), and costs two line writes.
    """

    src: np.ndarray
    dst: np.ndarray
    after: np.ndarray
    cost_writes: int = 0

    @staticmethod
    def none() -> Moves:
        e = np.empty(0, dtype=np.int64)
        return Moves(e, e.copy(), e.copy(), 0)

    def __len__(self) -> int:
        return int(self.src.size)


@dataclass
class LevelResult:
    """Outcome of :meth:`Leveler.apply` on one chunk of user writes."""

    phys: np.ndarray                 # physical line of each user write (int64)
    moves: Moves = field(default_factory=Moves.none)
    # Bit offset (rotation within the line) each user write is stored with,
    # or None when the scheme does not rotate bits.
    bit_offset: np.ndarray | None = None


class Leveler:
    """Base class.  Subclasses override :meth:`lookup` and :meth:`apply`.

    Parameters
    ----------
    n_logical:
        Number of logical lines the workload addresses.
    rng:
        Owned random generator of the keys and randomizers (stream
        ``leveler`` of ``run.seed``).  None only for a scheme that draws
        nothing; reading :attr:`rng` then raises ``ValueError``.

    Attributes
    ----------
    n_physical:
        Physical lines the scheme needs (e.g. one more than ``n_logical`` for
        a gap line).  The array must have at least this many.
    """

    name = "none"

    def __init__(self, n_logical: int, rng: np.random.Generator | None = None) -> None:
        self.n_logical = int(n_logical)
        self.n_physical = int(n_logical)
        self._rng = rng
        self.user_writes = 0       # user writes seen so far
        self.move_writes = 0       # extra line writes made so far

    @property
    def rng(self) -> np.random.Generator:
        # No fallback generator: a hidden fixed seed would give every run the same keys.
        if self._rng is None:
            raise ValueError(f"leveler {self.name!r} draws random keys: pass a Generator "
                             "(memsim.seeds.stream(run.seed, 'leveler'))")
        return self._rng

    def lookup(self, logical: np.ndarray) -> np.ndarray:
        """Current physical line of each logical line (no state change)."""
        return np.asarray(logical, dtype=np.int64)

    def apply(self, logical: np.ndarray) -> LevelResult:
        """Feed a chunk of user writes in order; return where each lands.

        Implementations must be vectorized over the chunk (no Python loop per
        write) and must leave :meth:`lookup` consistent with the state after
        the last write of the chunk.
        """
        logical = np.asarray(logical, dtype=np.int64)
        self.user_writes += logical.size
        return LevelResult(phys=logical.copy())

    def scale_free(self) -> bool:
        """True when the scheme's wear does not depend on how many lines it
        maps (so its result on the modeled lines holds for the device).
        Remapping schemes are not: their cycles grow with the line count."""
        return False

    def device_model(self) -> DeviceModel | None:
        """The scheme evaluated at device size, for lifetime; None when it has no
        device-scale evaluation (lifetime then uses the modeled lines, or gives
        null with a note where they do not stand for the device)."""
        return None

    def cycle_writes(self) -> float:
        """User writes for the scheme to move every line once through its cycle
        under uniform traffic; NaN when it has no fixed cycle (none, dynamic
        schemes)."""
        return float("nan")

    def state(self) -> dict:
        """Small, JSON-friendly view of the scheme's registers."""
        return {"user_writes": self.user_writes, "move_writes": self.move_writes}
