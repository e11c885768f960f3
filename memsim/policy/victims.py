"""Cleaner victim policies of the block pool (:mod:`memsim.policy.erase`), found by name in :data:`VICTIMS`.

A policy keeps whatever index it needs to pick a victim quickly; the pool
tells it when a block is sealed (becomes a candidate), unsealed (taken for
cleaning) and when a sealed block loses a live line.  Add one: a class with
``name``, a docstring and these four methods, then one line below.

References: M. Rosenblum and J. K. Ousterhout, "The design and
implementation of a log-structured file system", ACM Trans. Computer Systems
10(1), 1992 (SOSP 1991): greedy and cost-benefit segment cleaning.
"""
from __future__ import annotations

from collections import deque
from typing import Protocol

import numpy as np

from memsim.registry import Registry

SEALED = 2      # the pool's block state of a candidate (memsim.policy.erase.SEALED)


class BlockPool(Protocol):
    """What a policy reads of the pool (:class:`memsim.policy.erase.BlockPool`)."""

    block_lines: int
    clock: int
    _live: np.ndarray       # live lines per block
    _mtime: np.ndarray      # user-write clock of each block's newest data
    _state: np.ndarray      # block state (SEALED = candidate)


class VictimPolicy:
    """Base: no index; subclasses pick the block the cleaner takes next."""

    name = ""

    def __init__(self, pool: BlockPool) -> None:
        self.pool = pool

    def sealed(self, b: int) -> None:
        """Block ``b`` is full and may be cleaned."""

    def unsealed(self, b: int) -> None:
        """Block ``b`` was taken for cleaning."""

    def lost_line(self, b: int, live_before: int) -> None:
        """A sealed block ``b`` had ``live_before`` live lines and now has one fewer."""

    def pick(self) -> int | None:
        """The block to clean next (no state change), or None."""
        raise NotImplementedError


class Greedy(VictimPolicy):
    """Fewest live lines first (O(1) amortized: blocks in buckets by live count)."""

    name = "greedy"

    def __init__(self, pool: BlockPool) -> None:
        super().__init__(pool)
        B = pool.block_lines
        self._buckets: list[set[int]] = [set() for _ in range(B + 1)]
        self._min = B + 1

    def sealed(self, b: int) -> None:
        n = int(self.pool._live[b])
        self._buckets[n].add(b)
        if n < self._min:
            self._min = n

    def unsealed(self, b: int) -> None:
        self._buckets[self.pool._live[b]].discard(b)

    def lost_line(self, b: int, live_before: int) -> None:
        bk = self._buckets
        bk[live_before].discard(b)
        bk[live_before - 1].add(b)
        if live_before - 1 < self._min:
            self._min = live_before - 1

    def pick(self) -> int | None:
        # Only sealed blocks with a stale line are candidates.
        B = self.pool.block_lines
        while self._min < B and not self._buckets[self._min]:
            self._min += 1
        if self._min >= B:
            return None
        return next(iter(self._buckets[self._min]))


class CostBenefit(VictimPolicy):
    """Largest (1 - u) age / (1 + u), u the live share and age the user writes since the block's newest data."""

    name = "cost_benefit"

    def pick(self) -> int | None:
        pool = self.pool
        B = pool.block_lines
        live = pool._live
        cand = (pool._state == SEALED) & (live < B)
        if not cand.any():
            return None
        u = live / B
        age = (pool.clock - pool._mtime).astype(np.float64)
        score = np.where(cand, (1.0 - u) * age / (1.0 + u), -np.inf)
        # All ages can be 0 at start; then prefer the emptiest candidate.
        best = int(np.argmax(score))
        if score[best] <= 0.0:
            best = int(np.argmin(np.where(cand, live, np.inf)))
        return best


class Fifo(VictimPolicy):
    """The oldest sealed block, whatever it holds."""

    name = "fifo"

    def __init__(self, pool: BlockPool) -> None:
        super().__init__(pool)
        self._queue: deque[int] = deque()

    def sealed(self, b: int) -> None:
        self._queue.append(b)

    def unsealed(self, b: int) -> None:
        self._queue.popleft()        # the victim is always the oldest

    def pick(self) -> int | None:
        # Strictly the oldest, even if all its lines are live: that is the
        # policy the closed form describes.
        return self._queue[0] if self._queue else None


VICTIMS: Registry[type[VictimPolicy]] = Registry("cleaner victim policy", "erase.victim")
for _cls in (Greedy, CostBenefit, Fifo):
    VICTIMS.add(_cls)
