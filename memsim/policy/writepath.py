"""The write path: leveler remap + write scheme + stored content + wear.

Both engines feed user line writes, chunk by chunk and in the order the
controller accepts them, through one :class:`WritePath`.  It keeps the stored
bits (and flag cells) of every modeled physical line, so the SET and RESET
counts of each write come from comparing real bits, and it counts wear per
line (the ledger) and per bit position (``cell_profile``).  The leveler's own
moves are applied in stream order as extra writes.

Single-level cells with a scheme that has a compiled encoder take one
compiled pass over the chunk's writes (:mod:`memsim.policy.bitops`).
Otherwise writes inside a chunk are processed in *rounds*: a round holds
events that touch distinct lines, and every line's events keep their order,
so each round is one vectorized step.  Both give the same result, random
draws included (``tests/test_write_schemes.py``).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from memsim.policy import bitops
from memsim.policy.ledger import WearLedger
from memsim.policy.leveling.base import Leveler
from memsim.policy.write.base import WriteScheme
from memsim.policy.write.bits import popcount_rows
from memsim.workload.content import DataModel


@dataclass
class WriteBatch:
    """Writes issued for one chunk of user writes, in stream order.

    ``user[k]`` is the index of the user write (within the chunk's writes)
    that event ``k`` carries, or -1 for a leveler move; ``after[k]`` is the
    user write after which a move is issued (for user writes, their own
    index).
    """

    phys: np.ndarray
    n_set: np.ndarray
    n_reset: np.ndarray
    user: np.ndarray
    after: np.ndarray
    meta_writes: int = 0      # leveler metadata writes (counted, not placed)
    program_ns: np.ndarray | None = None   # MLC: program-and-verify time per write
    program_pj: np.ndarray | None = None   # MLC: pulse + verify energy per write
    ones: np.ndarray | None = None         # 1 bits of the stored line after each write

    @property
    def is_move(self) -> np.ndarray:
        return self.user < 0


def assign_rounds(dst: np.ndarray, src: np.ndarray, group: np.ndarray | None = None) -> np.ndarray:
    """Round of each event so that a round touches distinct lines and every
    line's events keep their order.

    ``src`` is -1 for events that only write ``dst``.  Consecutive events
    with the same ``group`` id (>= 0) form one parallel step (a swap: every
    source is read before any destination is written) and share a round.
    """
    n = dst.size
    if n == 0:
        return np.empty(0, dtype=np.int64)
    if (src < 0).all():
        # Round = occurrence rank of the line within the chunk (vectorized).
        order = np.argsort(dst, kind="stable")
        s = dst[order]
        start = np.r_[True, s[1:] != s[:-1]]
        grp_start = np.maximum.accumulate(np.where(start, np.arange(n), 0))
        rounds = np.empty(n, dtype=np.int64)
        rounds[order] = np.arange(n) - grp_start
        return rounds
    if group is None:
        group = np.full(n, -1, dtype=np.int64)
    last: dict[int, int] = {}
    rounds = np.empty(n, dtype=np.int64)
    get = last.get
    d_l, s_l, g_l = dst.tolist(), src.tolist(), group.tolist()
    k = 0
    while k < n:
        j = k + 1
        if g_l[k] >= 0:
            while j < n and g_l[j] == g_l[k]:
                j += 1
        lines = d_l[k:j] + [x for x in s_l[k:j] if x >= 0]
        r = max(get(x, -1) for x in lines) + 1
        for x in lines:
            last[x] = r
        rounds[k:j] = r
        k = j
    return rounds


class WritePath:
    """Stored content and wear of the modeled physical lines."""

    def __init__(self, leveler: Leveler, scheme: WriteScheme, data: DataModel,
                 rng: np.random.Generator, cell_wear: bool = True, mlc=None) -> None:
        self.mlc = mlc            # MlcProgrammer for multi-level cells, None for SLC
        self.leveler = leveler
        self.scheme = scheme
        self.data = data
        self.rng = rng
        n = leveler.n_physical
        self.line_bits = scheme.line_bytes * 8
        self.stored = data.initial(rng, n)
        self.flags = np.zeros((n, scheme.flag_cells), dtype=np.uint8)
        self.line_writes = np.zeros(n, dtype=np.int64)
        # Every cell program of the run, per line and cause (lifetime reads it).
        self.ledger = WearLedger(n)
        # True when the engine decides a user write's cost at service (block
        # erase, hints) and records it in the ledger then.
        self.defer_user_wear = False
        # SLC programs per cell position (data cells, then flag cells),
        # summed over lines: the bit profile lifetime reads.  For MLC, wear
        # is counted in pulses per line, ``line_cells``.
        self.cell_profile = (np.zeros(self.line_bits + scheme.flag_cells, dtype=np.int64)
                             if cell_wear and mlc is None else None)
        # False: apply chunks round by round with numpy (the compiled
        # path's reference in the tests).
        self.use_kernels = True
        self.events = 0           # user writes and moves applied so far (keys of MLC draws)
        self.user_writes = 0
        self.move_writes = 0
        self.meta_writes = 0

    @property
    def line_cells(self) -> np.ndarray:
        """Cells programmed per ledger line, all causes (read-only copy)."""
        out = self.ledger.line_cells()
        out.setflags(write=False)
        return out

    @property
    def n_physical(self) -> int:
        return self.stored.shape[0]

    def logical_content(self, logical: np.ndarray) -> np.ndarray:
        phys = self.leveler.lookup(np.asarray(logical, dtype=np.int64))
        return self.scheme.decode(self.stored[phys], self.flags[phys])

    def apply(self, logical: np.ndarray, data: np.ndarray | None = None) -> WriteBatch:
        """Write user lines ``logical`` (in order); ``data`` optional new content."""
        logical = np.asarray(logical, dtype=np.int64)
        n = logical.size
        lr = self.leveler.apply(logical)
        mv = lr.moves
        m = len(mv)
        # Events in stream order: each user write, then the moves issued after it.
        key = np.concatenate([np.arange(n, dtype=np.int64) * 2, np.asarray(mv.after) * 2 + 1])
        order = np.argsort(key, kind="stable")
        dst = np.concatenate([lr.phys, mv.dst]).astype(np.int64)[order]
        src = np.concatenate([np.full(n, -1, np.int64), mv.src]).astype(np.int64)[order]
        user = np.concatenate([np.arange(n, dtype=np.int64), np.full(m, -1, np.int64)])[order]
        after = np.concatenate([np.arange(n, dtype=np.int64), np.asarray(mv.after, np.int64)])[order]

        flips = None
        if data is None and self.data.kind != "flip":
            data = self.data.new(self.rng, np.empty((n, self.scheme.line_bytes), np.uint8))
        elif data is None:
            # Flip model: the masks of the user writes in stream order, so the
            # k-th write gets the same mask however the stream is cut into chunks.
            flips = self.data.flip_mask(self.rng, n)
        group = np.where(user < 0, after, -1)
        if self._compiled():
            n_set, n_reset, ones = self._apply_compiled(dst, src, group, user, data, flips)
            mlc_ns = mlc_pj = None
        else:
            n_set, n_reset, ones, mlc_ns, mlc_pj = self._apply_rounds(dst, src, group, user, data, flips)
        self.events += n + m
        self.user_writes += n
        self.move_writes += m
        self.meta_writes += mv.cost_writes
        if mv.cost_writes:
            # Table lines live outside the modeled lines; a full-line write each.
            self.ledger.add("meta", None, mv.cost_writes * (self.line_bits + self.scheme.flag_cells))
        return WriteBatch(dst, n_set, n_reset, user, after, mv.cost_writes, mlc_ns, mlc_pj, ones)

    def _compiled(self) -> bool:
        """True when :mod:`memsim.policy.bitops` handles this path (SLC, a known scheme)."""
        return (self.use_kernels and self.mlc is None and self.scheme.kernel is not None
                and bitops.supported(self.scheme.line_bytes, self.scheme.word_bits)
                and self.stored.flags.c_contiguous and self.flags.flags.c_contiguous)

    def _apply_compiled(self, dst: np.ndarray, src: np.ndarray, group: np.ndarray, user: np.ndarray,
                        data: np.ndarray | None,
                        flips: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """All events of a chunk in one compiled pass (same result as :meth:`_apply_rounds`)."""
        k = dst.size
        n_set = np.zeros(k, dtype=np.int64)
        n_reset = np.zeros(k, dtype=np.int64)
        ones = np.zeros(k, dtype=np.int64)
        is_user = user >= 0
        content, cidx = (data if data is not None else flips), np.maximum(user, 0)
        content = np.ascontiguousarray(content, dtype=np.uint8).view(np.uint64)
        profile = self.cell_profile if self.cell_profile is not None else np.zeros(0, np.int64)
        bitops.write_events(self.scheme.kernel, self.scheme.word_bits, self.stored.view(np.uint64),
                            self.flags, dst, src, group, content, cidx, data is None,
                            n_set, n_reset, ones, self.line_writes, profile)
        self._count(dst, is_user, n_set + n_reset)
        return n_set, n_reset, ones

    def _apply_rounds(self, dst: np.ndarray, src: np.ndarray, group: np.ndarray, user: np.ndarray,
                      data: np.ndarray | None, flips: np.ndarray | None):
        """Events round by round with numpy: (SET, RESET, stored 1 bits, MLC ns, MLC pJ) per event.

        Multi-level cells take this path; it is also the reference the
        compiled path is tested against.
        """
        k = dst.size
        n_set = np.zeros(k, dtype=np.int64)
        n_reset = np.zeros(k, dtype=np.int64)
        ones = np.zeros(k, dtype=np.int64)
        mlc_ns = np.zeros(k) if self.mlc is not None else None
        mlc_pj = np.zeros(k) if self.mlc is not None else None
        rounds = assign_rounds(dst, src, group)
        by_round = np.argsort(rounds, kind="stable")
        bounds = np.searchsorted(rounds[by_round], np.arange(rounds.max(initial=-1) + 2))
        for r in range(bounds.size - 1):
            ev = by_round[bounds[r]:bounds[r + 1]]
            d = dst[ev]
            old, old_flags = self.stored[d], self.flags[d]
            u = user[ev]
            is_user = u >= 0
            new = np.empty_like(old)
            if is_user.any():
                if data is not None:
                    new[is_user] = data[u[is_user]]
                else:
                    cur = self.scheme.decode(old[is_user], old_flags[is_user])
                    new[is_user] = cur ^ flips[u[is_user]]
            if not is_user.all():
                s = src[ev[~is_user]]
                new[~is_user] = self.scheme.decode(self.stored[s], self.flags[s])
            enc = self.scheme.encode(old, old_flags, new)
            self.stored[d] = enc.stored
            self.flags[d] = enc.flags
            ns, nr = enc.n_set, enc.n_reset
            n_set[ev], n_reset[ev] = ns, nr
            ones[ev] = popcount_rows(enc.stored)
            self.line_writes[d] += 1
            if self.mlc is not None:
                # Keyed by the event's place in the stream: the attempts do
                # not depend on chunking or on refreshes in between.
                cost = self.mlc.cost(old, enc.stored, full=self.scheme.name == "full_line",
                                     keys=self.events + ev)
                mlc_ns[ev], mlc_pj[ev] = cost.program_ns, cost.energy_pj
                self._count(d, is_user, cost.pulses)
                continue
            self._count(d, is_user, ns + nr)
            if self.cell_profile is not None:
                bitops.add_profile(self.cell_profile, enc.set_mask | enc.reset_mask)
                self.cell_profile[self.line_bits:] += (enc.flag_set | enc.flag_reset).sum(axis=0)
        return n_set, n_reset, ones, mlc_ns, mlc_pj

    def _count(self, lines: np.ndarray, is_user: np.ndarray, cells: np.ndarray) -> None:
        if not self.defer_user_wear:
            self.ledger.add("user", lines[is_user], cells[is_user])
        self.ledger.add("move", lines[~is_user], cells[~is_user])

    def bit_profile(self) -> np.ndarray:
        """Programs per bit position (data cells then flag cells), summed over lines."""
        if self.cell_profile is None:
            raise ValueError("cell wear counters are off")
        return self.cell_profile.copy()
