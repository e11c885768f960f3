"""The fast engine's Python steps between kernel events: hints, block erase, the agents' interface.

:class:`AgentSteps` is mixed into :class:`memsim.engine.fast.FastEngine`.  When
the kernel returns because a write's form must be decided, an erase
sub-process resumes or hints arrive with a chunk, these methods do what the
reference does at that moment (:mod:`memsim.engine.timing`), on the kernel's
state arrays, and hand the bank back to the kernel
(:mod:`memsim.engine.kernel_erase`, :mod:`memsim.engine.kernel_hints`).
"""
from __future__ import annotations

import numpy as np

from memsim.engine import kernel as K
from memsim.engine import kernel_erase as KE
from memsim.engine import kernel_hints as KH
from memsim.engine.ops import preset_costs
from memsim.workload.chunk import Chunk


class AgentSteps:
    """Hint hand-over, write placement and the erase agent's engine interface (fast engine)."""

    def _queue_hints(self, hints: Chunk) -> None:
        """Hints of the chunk the source takes now: one pre-programming each, in its
        bank's hint queue (same items as :meth:`TimingEngine._queue_hints`)."""
        phys, ch, bank, service, cur, pj, n_set = preset_costs(self, hints)
        while int(self.ist[K.FREE_TOP]) < phys.size:
            self._grow_slots()
        self._ensure_heap(phys.size)
        counts = np.bincount(bank, minlength=self.amap.total_banks)
        if int((self.hqn + counts).max(initial=0)) > self.hqa.shape[1]:
            self.hqa = grown_queues(self.hqa, self.hqh, int((self.hqn + counts).max()), self.hqn)
        now = float(self.fst[K.NOW])
        for t, b, c_, s_, cu, e, n, p_ in zip(hints.time_ns.tolist(), bank.tolist(), ch.tolist(),
                                              service.tolist(), cur.tolist(), pj.tolist(),
                                              n_set.tolist(), phys.tolist()):
            KH.queue_hint(b, t, c_, s_, cu, e, n, p_, self.sf, self.si, self.free, self.ist,
                          self.hqa, self.hqh, self.hqn)
            self.presets_due[b].append((p_, e, n))
            # Wake an idle bank now (not at the hint's time), as the reference.
            K.wake(b, now, self.bi, self.ist, self.fst, self.ht, self.hs, self.hp)

    # ------------------------------------------------------------ block erase
    def _erase_step(self, status: int, b: int) -> None:
        """Run bank ``b``'s erase sub-process up to its next wait (or its end)."""
        if status == K.PLACE_WRITE:
            s = int(self.bi[b, K.B_SLOT])
            self._gens[b] = (self.erase.prepare_write(b, int(self.si[s, K.SI_PHYS])), self._placed)
        elif status == K.IDLE_CLEAN:
            self._gens[b] = (self.erase.clean(b, yield_to_reads=True), self._cleaned)
        elif self._after_put[b] >= 0:
            # The put's event is processed: waiting gets first, then the bank.
            KE.serve_pool(self._after_put[b], self.pool_level, self.pq, self.pqh, self.pqn, self.bf,
                          self.ist, self.fst, self.ht, self.hs, self.hp)
            self._after_put[b] = -1
        gen, then = self._gens[b]
        try:
            cmd = gen.send(None)
        except StopIteration as stop:
            self._gens[b] = None
            then(b, stop.value)
        else:
            self._issue(b, cmd)
        self.bi[b, K.B_WANT_CLEAN] = self.erase.wants_idle_clean(b)

    def _issue(self, b: int, cmd: tuple) -> None:
        what, x = cmd
        args = (self.ist, self.fst, self.ht, self.hs, self.hp)
        if what == "hold":
            KE.hold(b, x, self.bi, *args)
        elif what == "take":
            KE.take_current(self._pool_of(b), b, x, self.bi, self.bf, self.pool_level, self.pq, self.pqh,
                            self.pqn, *args)
        else:
            p = self._pool_of(b)
            if not KE.give_current(p, b, x, self.pf, self.bi, self.pool_level, *args):
                raise RuntimeError("fast engine: a power-pool return had to wait (not modeled)")
            self._after_put[b] = p

    def _cleaned(self, b: int, _did: bool) -> None:
        # The bank loop goes on at this time (no event between).
        self.bi[b, K.B_KIND] = K.K_RUN
        self.ist[K.RESUME] = b + 1

    def _hint_placed(self, b: int) -> None:
        """Bank ``b``'s user write takes the fast form if a hint pre-programmed its line."""
        s = int(self.bi[b, K.B_SLOT])
        phys = int(self.si[s, K.SI_PHYS])
        fast = self.preset.pop(phys, False)
        self.totals.hint_hits += fast
        self._start_placed(b, phys, fast)

    def _placed(self, b: int, placed: tuple[int, bool]) -> None:
        phys, oop = placed
        self._start_placed(b, self.erase.base[b] + phys, oop)

    def _start_placed(self, b: int, line: int, fast: bool) -> None:
        """Bank ``b``'s write has its form (fast: out of place or into a pre-programmed
        line): wear on ledger line ``line``, then the write starts."""
        s = int(self.bi[b, K.B_SLOT])
        sf, si = self.sf, self.si
        if fast:
            sf[s, K.SF_SERVICE], sf[s, K.SF_PRE] = sf[s, K.SF_OOP_NS], 0.0
            si[s, K.SI_NSET], si[s, K.SI_NRESET] = si[s, K.SI_OOP_SET], si[s, K.SI_OOP_RESET]
        self.path.ledger.add("user", line, int(si[s, K.SI_NSET] + si[s, K.SI_NRESET]))
        KE.start_write(b, self.pi, self.pf, self.ist, self.fst, self.ht, self.hs, self.hp, self.bi, self.bf,
                       sf, si, self.ib, self.ibh, self.ibn, self.rqn, self.bus_free, self.pool_level,
                       self.pq, self.pqh, self.pqn, self.clog)

    def _ensure_heap(self, more: int) -> None:
        nb = self.amap.total_banks
        need = int(self.ist[K.HSIZE]) + more + 4 * nb + 16
        if need > self.ht.size:
            n, size = int(self.ist[K.HSIZE]), max(2 * self.ht.size, need)
            for name in ("ht", "hs", "hp"):
                old = getattr(self, name)
                new = np.zeros(size, old.dtype)
                new[:n] = old[:n]
                setattr(self, name, new)

    # ---------------------------------------- the interface agents run on
    @property
    def now(self) -> float:
        return float(self.fst[K.NOW])

    def _pool_of(self, b: int) -> int:
        # Global bank index = channel * banks + bank (as the reference).
        return b // self.cfg.array.banks if int(self.pi[K.P_NPOOLS]) > 1 else 0

    def current_limit(self, b: int) -> float | None:
        return float(self.pf[K.F_POOL_CAP]) if int(self.pi[K.P_NPOOLS]) > 0 else None

    def take_current(self, b: int, need: float) -> tuple:
        return ("take", need)

    def give_current(self, b: int, need: float) -> tuple:
        return ("give", need)

    def hold(self, dt: float) -> tuple:
        return ("hold", dt)

    def add_bank_busy(self, b: int, dt: float) -> None:
        self.bf[b, K.BF_BUSY] += dt

    def add_power_wait(self, dt: float) -> None:
        self.fst[K.POWER_WAIT] += dt

    def next_read(self, b: int, now: float, end: float) -> float | None:
        if self.rqn[b] > 0:
            return now
        cap = self.ib.shape[1]
        for k in range(int(self.ibn[b])):
            e = self.ib[b, (self.ibh[b] + k) % cap]
            t = float(self.sf[e, K.SF_T])
            if t >= end:
                return None
            if self.si[e, K.SI_READ]:
                return t
        return None


def grown_queues(q: np.ndarray, qh: np.ndarray, need: int, qn: np.ndarray | None = None) -> np.ndarray:
    """Per-bank ring queues with room for ``need`` entries, heads reset to 0 (``qh`` in place)."""
    cap = q.shape[1]
    new = np.zeros((q.shape[0], max(2 * cap, need)), np.int64)
    for b in range(q.shape[0]):
        k = cap if qn is None else int(qn[b])
        new[b, :k] = q[b, (qh[b] + np.arange(k)) % cap]
    qh[:] = 0
    return new
