"""Block erase-ahead: the state model of out-of-place writes into pre-initialized blocks.

Physical lines are grouped into erase blocks of ``block_lines`` lines.  A
background engine bulk-initializes a whole block to one state: all-RESET
(every cell 0) or all-SET (every cell 1); in memsim bit 1 is SET (crystalline)
and bit 0 is RESET (amorphous), common practice.  A user write of a logical
line is placed out of place into the next initialized line of the *user
frontier* block, so it needs only the pulse opposite to the initialized state,
and only for cells whose new value differs from it.  The line it used to occupy
becomes stale.  A cleaner picks a victim block, moves its live lines out of
place into the *move frontier* block (a second write frontier, so that data
which survived a cleaning is not mixed with fresh user writes) and hands the
victim to the engine for bulk initialization.

:class:`BlockPool` only keeps state and counts; it does no timing.  The timing
engine drives it like this::

    phys, mode = pool.place(logical)          # per user write
    if mode == WAIT: retry after the next mark_initialized()
    while pool.need_erase():                  # whenever convenient
        job = pool.clean()                    # map already updated
        ...copy job.src[k] -> job.dst[k], then bulk-initialize job.block
        pool.mark_initialized(job.block)      # when the bulk init is done

Initial state: logical line ``i`` sits in physical line ``i`` (those blocks are
full and not initialized, so they are candidates for cleaning); every other
block is initialized and free.  The initial initialization is not counted as an
erase.

Block life cycle: ``FREE`` (initialized, unused) -> ``ACTIVE`` (a frontier
being filled) -> ``SEALED`` (full; a victim candidate) -> ``ERASING`` (live
lines moved away, waiting for the engine's bulk init) -> ``FREE``.
"""
from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq
from scipy.special import digamma, lambertw

from memsim.errors import ConfigError, require_int
from memsim.policy.leveling.base import Moves
from memsim.policy.victims import VICTIMS

# Placement modes returned by BlockPool.place.
OUT_OF_PLACE = 0   # into an initialized line: only the opposite pulse is needed
IN_PLACE = 1       # fallback: over the line's current, not initialized, location
WAIT = 2           # fallback: no initialized line; nothing changed, retry later

# Block states.
FREE = 0
ACTIVE = 1
SEALED = 2
ERASING = 3

INIT_STATES = {"reset": 0, "set": 1}            # initialized bit value
VICTIM_POLICIES: tuple[str, ...] = tuple(VICTIMS.names())     # the names (memsim.policy.victims)
FALLBACKS = ("in_place", "wait")

# Free blocks user writes may not take, so that the cleaner can always open a
# move frontier and make progress (a victim has at most block_lines - 1 live
# lines).
_CLEANER_RESERVE = 1


@dataclass(frozen=True)
class EraseJob:
    """One cleaning step, already applied to the map.

    ``src[k]`` (in the victim) was live and is now mapped at ``dst[k]`` (an
    initialized line of the move frontier); the engine copies it, then
    bulk-initializes all ``block_lines`` lines of ``block`` and calls
    :meth:`BlockPool.mark_initialized`.
    """

    block: int
    src: tuple[int, ...]
    dst: tuple[int, ...]


@dataclass(frozen=True)
class InstantResult:
    """Outcome of :meth:`BlockPool.apply_instant` on a chunk of user writes.

    ``phys[i]`` is where write ``i`` landed, ``in_place[i]`` whether it was an
    in-place fallback; ``moves`` are the cleaner's copies (``after`` indexes
    the write they follow); block ``erased[k]`` was initialized right after
    write ``erase_after[k]``.
    """

    phys: np.ndarray
    in_place: np.ndarray
    moves: Moves
    erased: np.ndarray
    erase_after: np.ndarray


class BlockPool:
    """Logical -> physical line map over pre-initialized erase blocks.

    Parameters
    ----------
    n_logical:
        Logical lines the workload addresses.
    block_lines:
        Lines per erase block, ``B``.
    spare_fraction:
        Fraction of physical lines beyond the logical ones:
        ``n_physical >= n_logical / (1 - spare_fraction)``, rounded up to
        whole blocks (:attr:`spare_actual` is the value after rounding).
    init_state:
        ``"reset"`` (blocks initialized to all 0) or ``"set"`` (all 1).
    victim:
        ``"greedy"`` (fewest live lines), ``"cost_benefit"`` (largest
        ``(1 - u) * age / (1 + u)``, ``u`` = live fraction, ``age`` = user
        writes since the newest data in the block was written) or ``"fifo"``
        (the block sealed longest ago); the policies live in :mod:`memsim.policy.victims`.
    low_watermark:
        Cleaning is wanted while free blocks plus blocks being initialized are
        fewer than this (at least 2: one free block is kept for the cleaner).
    fallback:
        What :meth:`place` does when user writes have no initialized line:
        ``"in_place"`` writes over the logical line's current location,
        ``"wait"`` refuses (returns :data:`WAIT`).

    Notes
    -----
    Per-call work: :meth:`place` is O(1); :meth:`clean` is O(block_lines)
    plus the victim choice, which is O(1) amortized for ``greedy`` (buckets by
    live count; ties broken arbitrarily but deterministically) and ``fifo``,
    and one vectorized pass over the blocks for ``cost_benefit``.  Moved
    lines keep the write time of their data, so a block's age reflects the
    age of the data it holds, as in the log-structured file system.

    References
    ----------
    .. [1] M. Rosenblum and J. K. Ousterhout, "The design and implementation
       of a log-structured file system", ACM Trans. Computer Systems 10(1),
       1992 (SOSP 1991): greedy and cost-benefit segment cleaning.
    """

    def __init__(
        self,
        n_logical: int,
        block_lines: int,
        spare_fraction: float = 0.1,
        init_state: str = "reset",
        victim: str = "greedy",
        low_watermark: int = 2,
        fallback: str = "in_place",
    ) -> None:
        _check_int("erase.n_logical", n_logical, 1)
        _check_int("erase.block_lines", block_lines, 1)
        _check_int("erase.low_watermark", low_watermark, _CLEANER_RESERVE + 1)
        if not (isinstance(spare_fraction, (int, float)) and 0.0 < spare_fraction < 1.0):
            raise ConfigError("erase.spare_fraction", repr(spare_fraction),
                              "a number in (0, 1)")
        if init_state not in INIT_STATES:
            raise ConfigError("erase.init_state", repr(init_state), "'reset' or 'set'")
        victim_policy = VICTIMS.get_part(victim)
        if fallback not in FALLBACKS:
            raise ConfigError("erase.fallback", repr(fallback), ", ".join(FALLBACKS))

        B = int(block_lines)
        self.n_logical = int(n_logical)
        self.block_lines = B
        self.spare_fraction = float(spare_fraction)
        self.init_state = init_state
        self.init_bit = INIT_STATES[init_state]
        self.victim = victim
        self.low_watermark = int(low_watermark)
        self.fallback = fallback

        data_blocks = -(-self.n_logical // B)
        self.n_blocks = math.ceil(self.n_logical / (1.0 - self.spare_fraction) / B - 1e-9)
        # Two frontiers, the watermark and one block of slack for stale lines.
        need = data_blocks + self.low_watermark + 3
        if self.n_blocks < need and B > self.n_logical:
            # No spare share can help a block larger than the lines it organizes.
            raise ConfigError(
                "erase.block_lines", repr(block_lines),
                f"at most the {self.n_logical} lines a bank holds (with a few blocks of them spare)")
        if self.n_blocks < need:
            raise ConfigError(
                "erase.spare_fraction", repr(spare_fraction),
                f"enough spare for at least {need - data_blocks} spare blocks of "
                f"{B} lines (low_watermark + 3); got {self.n_blocks - data_blocks}")
        self.n_physical = self.n_blocks * B

        # Hot-path state in Python lists (cheaper per item than numpy scalars).
        self._l2p: list[int] = list(range(self.n_logical))
        self._p2l: list[int] = list(range(self.n_logical)) + [-1] * (self.n_physical - self.n_logical)
        self._stamp: list[int] = [0] * self.n_physical      # write time of the data held
        # Per-block state in numpy: the cost-benefit choice scans it whole.
        self._live = np.zeros(self.n_blocks, dtype=np.int64)
        self._mtime = np.zeros(self.n_blocks, dtype=np.int64)   # newest data in block
        self._state = np.full(self.n_blocks, FREE, dtype=np.int8)
        self._free: deque[int] = deque(range(data_blocks, self.n_blocks))
        self._n_erasing = 0
        self._victims = victim_policy(self)
        for b in range(data_blocks):
            self._live[b] = min(B, self.n_logical - b * B)
            self._seal(b)
        # Frontiers: block (-1 = none) and next line offset in it.
        self._ublk, self._ufill = -1, B
        self._mblk, self._mfill = -1, B

        self.clock = 0                     # user writes placed so far
        self.user_writes = 0
        self.move_writes = 0
        self.fallbacks_in_place = 0
        self.waits = 0                     # refused placements (each retry counts)
        self.cleans = 0
        self.erase_count = np.zeros(self.n_blocks, dtype=np.int64)

    # ------------------------------------------------------------------ info
    @property
    def spare_actual(self) -> float:
        """Spare fraction after rounding up to whole blocks."""
        return 1.0 - self.n_logical / self.n_physical

    @property
    def write_amplification(self) -> float:
        """(user + move writes) / user writes; NaN before the first user write."""
        if self.user_writes == 0:
            return float("nan")
        return (self.user_writes + self.move_writes) / self.user_writes

    @property
    def free_blocks(self) -> int:
        return len(self._free)

    @property
    def erasing_blocks(self) -> int:
        return self._n_erasing

    @property
    def lines_in_use(self) -> int:
        """Physical lines written since their last initialization (live or
        stale): all lines minus free, being-initialized and unfilled frontier
        lines.  ``n_logical / lines_in_use`` is what the cleaning models call
        the utilization."""
        B = self.block_lines
        unused = (len(self._free) + self._n_erasing) * B
        if self._ublk >= 0:
            unused += B - self._ufill
        if self._mblk >= 0:
            unused += B - self._mfill
        return self.n_physical - unused

    @property
    def l2p(self) -> np.ndarray:
        """Copy of the logical -> physical map."""
        return np.array(self._l2p, dtype=np.int64)

    @property
    def p2l(self) -> np.ndarray:
        """Copy of the physical -> logical map (-1: stale, unused or initialized)."""
        return np.array(self._p2l, dtype=np.int64)

    @property
    def live(self) -> np.ndarray:
        """Copy of the live-line count of each block."""
        return self._live.copy()

    @property
    def block_state(self) -> np.ndarray:
        """Copy of each block's state (FREE, ACTIVE, SEALED, ERASING)."""
        return self._state.copy()

    @property
    def block_mtime(self) -> np.ndarray:
        """Copy of each block's newest data write time (user-write clock)."""
        return self._mtime.copy()

    def lookup(self, logical: int) -> int:
        """Current physical line of ``logical``."""
        return self._l2p[logical]

    def lookup_many(self, logical: np.ndarray) -> np.ndarray:
        """Vectorized :meth:`lookup` (copies the map once: O(n_logical))."""
        return self.l2p[np.asarray(logical, dtype=np.int64)]

    def is_initialized(self, phys: int) -> bool:
        """Whether physical line ``phys`` is still in the initialized state."""
        b, off = divmod(phys, self.block_lines)
        if self._state[b] == FREE:
            return True
        if b == self._ublk:
            return off >= self._ufill
        if b == self._mblk:
            return off >= self._mfill
        return False

    def state(self) -> dict:
        """Small, JSON-friendly summary of the pool."""
        return {
            "user_writes": self.user_writes,
            "move_writes": self.move_writes,
            "write_amplification": self.write_amplification,
            "fallbacks_in_place": self.fallbacks_in_place,
            "waits": self.waits,
            "cleans": self.cleans,
            "erases": int(self.erase_count.sum()),
            "erases_max_per_block": int(self.erase_count.max()),
            "free_blocks": len(self._free),
            "erasing_blocks": self._n_erasing,
            "user_frontier": self._ublk,
            "move_frontier": self._mblk,
        }

    # ------------------------------------------------------------ user path
    def place(self, logical: int) -> tuple[int, int]:
        """Place one user write of ``logical``; return ``(phys, mode)``.

        ``mode`` is :data:`OUT_OF_PLACE`, :data:`IN_PLACE` (fallback; ``phys``
        is the line's current location) or :data:`WAIT` (fallback; ``phys`` is
        -1 and nothing changed).
        """
        B = self.block_lines
        if self._ufill == B:
            if len(self._free) <= _CLEANER_RESERVE:
                return self._fallback(logical)
            self._ublk = self._open()
            self._ufill = 0
        blk = self._ublk
        phys = blk * B + self._ufill
        self._ufill += 1
        now = self.clock
        self._invalidate(self._l2p[logical])
        self._l2p[logical] = phys
        self._p2l[phys] = logical
        self._stamp[phys] = now
        self._live[blk] += 1
        self._mtime[blk] = now
        if self._ufill == B:
            self._seal(blk)
            self._ublk = -1
        self.clock = now + 1
        self.user_writes += 1
        return phys, OUT_OF_PLACE

    def _fallback(self, logical: int) -> tuple[int, int]:
        if self.fallback == "wait":
            self.waits += 1
            return -1, WAIT
        phys = self._l2p[logical]
        blk = phys // self.block_lines
        self._stamp[phys] = self.clock
        self._mtime[blk] = self.clock
        self.clock += 1
        self.user_writes += 1
        self.fallbacks_in_place += 1
        return phys, IN_PLACE

    # --------------------------------------------------------------- cleaner
    def need_erase(self) -> bool:
        """Whether a cleaning step is both wanted (below the low watermark)
        and possible now (room for any victim's live lines)."""
        if len(self._free) + self._n_erasing >= self.low_watermark:
            return False
        return self.can_clean()

    def can_clean(self) -> bool:
        """Whether :meth:`clean` would clean a block now (a victim whose live
        lines fit)."""
        v = self.pick_victim()
        return v is not None and self._live[v] <= self._room()

    def pick_victim(self) -> int | None:
        """The block the policy would clean next (no state change), or None.

        ``greedy`` and ``cost_benefit`` only consider sealed blocks with a
        stale line; ``fifo`` takes the oldest sealed block whatever it holds.
        """
        return self._victims.pick()

    def clean(self) -> EraseJob | None:
        """Clean one victim: move its live lines to the move frontier (the map
        is updated now) and hand it over for bulk init.  Returns None, changing
        nothing, when there is no victim or no room yet for its live lines
        (retry after the next :meth:`mark_initialized`).  Does not look at the
        watermark: :meth:`need_erase` does."""
        B = self.block_lines
        v = self.pick_victim()
        if v is None:
            return None
        if self._live[v] > self._room():
            return None
        self._unseal(v)
        p2l, l2p, stamp = self._p2l, self._l2p, self._stamp
        src = [s for s in range(v * B, v * B + B) if p2l[s] >= 0]
        dst: list[int] = []
        k = 0
        while k < len(src):
            # Fill the move frontier one segment (up to its end) at a time.
            if self._mfill == B:
                self._mblk = self._open()
                self._mfill = 0
            m = self._mblk
            take = min(B - self._mfill, len(src) - k)
            base = m * B + self._mfill
            newest = 0
            for i in range(take):
                s, d = src[k + i], base + i
                lg = p2l[s]
                p2l[s] = -1
                p2l[d] = lg
                l2p[lg] = d
                stamp[d] = stamp[s]
                if stamp[s] > newest:
                    newest = stamp[s]
                dst.append(d)
            k += take
            self._mfill += take
            self._live[m] += take
            if newest > self._mtime[m]:
                self._mtime[m] = newest
            if self._mfill == B:
                self._seal(m)
                self._mblk = -1
        self._live[v] = 0
        self._state[v] = ERASING
        self._n_erasing += 1
        self.move_writes += len(src)
        self.cleans += 1
        return EraseJob(v, tuple(src), tuple(dst))

    def mark_initialized(self, block: int) -> None:
        """The engine finished bulk-initializing ``block`` (from :meth:`clean`)."""
        if self._state[block] != ERASING:
            raise RuntimeError(f"block {block} is not waiting for initialization")
        self._state[block] = FREE
        self._n_erasing -= 1
        self._free.append(block)
        self.erase_count[block] += 1

    # ------------------------------------------------------ whole-chunk path
    def apply_instant(self, logical: np.ndarray) -> InstantResult:
        """Place a chunk of user writes with cleaning and bulk init taking no
        time: after each write, clean until the watermark is met.

        For engines without time (wear, tests).  A Python loop per write: the
        model is inherently sequential.
        """
        logical = np.asarray(logical, dtype=np.int64)
        n = logical.size
        phys = np.empty(n, dtype=np.int64)
        in_place = np.zeros(n, dtype=bool)
        msrc: list[int] = []
        mdst: list[int] = []
        mafter: list[int] = []
        erased: list[int] = []
        eafter: list[int] = []
        for i, lg in enumerate(logical.tolist()):
            p, mode = self.place(lg)
            if mode == WAIT:
                raise RuntimeError("no initialized line although cleaning is instant")
            phys[i] = p
            in_place[i] = mode == IN_PLACE
            while self.need_erase():
                job = self.clean()
                if job is None:
                    break
                msrc.extend(job.src)
                mdst.extend(job.dst)
                mafter.extend([i] * len(job.src))
                self.mark_initialized(job.block)
                erased.append(job.block)
                eafter.append(i)
        return InstantResult(phys, in_place, Moves(_i64(msrc), _i64(mdst), _i64(mafter)),
                             _i64(erased), _i64(eafter))

    # -------------------------------------------------------------- helpers
    def _room(self) -> int:
        """Initialized lines the cleaner can still write into."""
        room = len(self._free) * self.block_lines
        if self._mblk >= 0:
            room += self.block_lines - self._mfill
        return room

    def _open(self) -> int:
        b = self._free.popleft()
        self._state[b] = ACTIVE
        self._live[b] = 0
        self._mtime[b] = 0
        return b

    def _seal(self, b: int) -> None:
        self._state[b] = SEALED
        self._victims.sealed(b)

    def _unseal(self, b: int) -> None:
        self._victims.unsealed(b)

    def _invalidate(self, phys: int) -> None:
        self._p2l[phys] = -1
        b = phys // self.block_lines
        n = self._live[b]
        self._live[b] = n - 1
        if self._state[b] == SEALED:
            self._victims.lost_line(b, int(n))


def _i64(values: list[int]) -> np.ndarray:
    return np.asarray(values, dtype=np.int64)


def _check_int(where: str, value: object, lo: int) -> None:
    require_int(where, value, lo)


def analytic_write_amplification(
    spare_fraction: float, victim: str, block_lines: int | None = None
) -> float:
    """Steady-state write amplification of cleaning under uniform random
    single-line writes, in the limit of many blocks.

    Let ``alpha = n_physical / n_logical = 1 / (1 - spare_fraction)`` and
    every user write hit a logical line chosen uniformly at random, so each
    live line dies at rate ``1 / n_logical`` per user write.

    * ``"fifo"``: every block is cleaned after one pass of the log,
      ``alpha * n_logical * (1 - u)`` user writes after it was written, so
      its live fraction is ``u = exp(-alpha (1 - u))``; the non-trivial root
      is ``u = -W0(-alpha exp(-alpha)) / alpha`` (Lambert W) and
      ``WA = 1 / (1 - u)``.
    * ``"greedy"`` with ``block_lines = B``: in the many-blocks limit greedy
      cleans every block when its live count falls to a threshold ``j``.  A
      block's live lines follow a pure-death process, so it lives
      ``n_logical * (H_B - H_j)`` user writes; one block is cleaned per
      ``B - j`` user writes; Little's law gives
      ``alpha = B (H_B - H_j) / (B - j)`` and ``WA = B / (B - j)``.  ``H`` is
      extended to real ``j`` by ``H_x = digamma(x + 1) + Euler's gamma``,
      which smooths the exact mixing of thresholds ``floor(j)`` and
      ``ceil(j)`` (against simulation: within 0.5 % for ``B >= 16``, about
      5 % low at ``B = 8`` with 10 % spare).  As ``B`` grows this tends to the FIFO value
      (``H_B - H_j -> ln(B / j)``); for finite ``B`` it is lower.

    ``cost_benefit`` has no closed form here (ValueError).

    References
    ----------
    .. [1] P. Desnoyers, "Analytic modeling of SSD write performance",
       SYSTOR 2012: the FIFO (LRU) cleaning model under uniform traffic and
       its Lambert W solution.
    .. [2] B. Van Houdt, "A mean field model for a class of garbage collection
       algorithms in flash-based solid state drives", SIGMETRICS 2013: the
       many-blocks (mean-field) limit of greedy cleaning (from memory; the
       threshold form above is derived here from a pure-death process and
       Little's law).
    """
    if not 0.0 < spare_fraction < 1.0:
        raise ValueError("spare_fraction must be in (0, 1)")
    alpha = 1.0 / (1.0 - spare_fraction)
    if victim == "fifo" or (victim == "greedy" and block_lines is None):
        u = float(np.real(-lambertw(-alpha * math.exp(-alpha), 0) / alpha))
        return 1.0 / (1.0 - u)
    if victim == "greedy":
        B = int(block_lines)
        gamma = np.euler_gamma
        H_B = digamma(B + 1.0) + gamma

        def excess(j: float) -> float:
            return B * (H_B - digamma(j + 1.0) - gamma) / (B - j) - alpha

        if excess(0.0) <= 0.0:          # enough spare that empty blocks appear
            return 1.0
        j = brentq(excess, 0.0, B * (1.0 - 1e-9), xtol=1e-12)
        return B / (B - j)
    raise ValueError(f"no analytic write amplification for victim {victim!r}")
