"""The fast timing engine: op columns fed to a compiled event loop.

Same controller and same results as the simpy reference
(:class:`memsim.engine.timing.TimingEngine`), request for request; see
:mod:`memsim.engine.kernel` for how the event order is kept.  Decisions that
live in Python objects (refresh scans and scrub draws, the erase pool's
placement and cleaning, whether a hint pre-programmed a write's line) are
taken between kernel events, at the moment the reference takes them.
Features the kernel does not cover would be listed by :func:`unsupported`
(none now); a run that uses one goes to the reference engine
(:func:`make_engine`).
"""
from __future__ import annotations

from collections import deque
from collections.abc import Iterable

import numpy as np
from numba import njit

from memsim.engine import kernel as K
from memsim.engine import kernel_sched as KS
from memsim.engine.fast_steps import AgentSteps, grown_queues
from memsim.engine.ops import OpColumns, prepare_ops
from memsim.engine.refresh_agent import URGENT, RefreshAgent
from memsim.engine.stream import LatencyStream
from memsim.engine.timing import TimingEngine, TimingTotals
from memsim.policy.refresh import RefreshPlan
from memsim.policy.writepath import WritePath
from memsim.workload.chunk import Chunk

ENGINES = ("fast", "reference")


def unsupported(cfg, path: WritePath, plan: RefreshPlan | None) -> list[str]:
    """Features of this run the compiled kernel does not cover (empty: it runs).

    Every feature of the reference is covered now; a feature added to the
    reference before the kernel has it is named here, and the run falls back.
    """
    return []


class FastEngine(AgentSteps, TimingEngine):
    """Compiled twin of :class:`TimingEngine` (same constructor, same totals)."""

    name = "fast"

    def __init__(self, cfg, source: Iterable[Chunk], path: WritePath,
                 refresh: RefreshPlan | None = None, rng: np.random.Generator | None = None) -> None:
        super().__init__(cfg, source, path, refresh, rng)
        gaps = unsupported(cfg, path, refresh)
        if gaps:
            raise ValueError("the fast engine does not cover: " + "; ".join(gaps))
        w = cfg.workload
        # The bank decides a user write's form at service (Python between kernel
        # events) with block erase, and where hints may have pre-programmed its
        # line; otherwise every user write takes its in-place cost and its wear
        # is known when the write path applies it.
        self.place_at_service = self.out_of_place or (
            self.hint_mode and (w.hint_lead_ns > 0 or w.pattern == "trace"))
        path.defer_user_wear = self.place_at_service

    # ------------------------------------------------------------ state
    def _alloc(self) -> None:
        cfg = self.cfg
        c, p = cfg.controller, cfg.power
        nb = self.amap.total_banks
        rcap, wcap = c.read_queue, c.write_queue
        self.pi = pi = np.zeros(K.N_PI, np.int64)
        pi[K.P_NB], pi[K.P_RCAP], pi[K.P_WCAP] = nb, rcap, wcap
        pi[K.P_HIGH], pi[K.P_LOW], pi[K.P_IDLEW] = c.drain_high, c.drain_low, c.idle_writes
        pi[K.P_CLOSED], pi[K.P_LIMIT] = self.closed, cfg.workload.outstanding
        pi[K.P_EXT], pi[K.P_CANCEL], pi[K.P_PAUSE] = self.extended, c.write_cancel, c.write_pause
        n_pools = 0
        if p.budget_ua > 0:
            n_pools = cfg.array.channels if p.scope == "channel" else 1
        pi[K.P_NPOOLS], pi[K.P_CAS] = n_pools, self.cost_at_service
        per_reset, per_set = self.cell.cells_per_round(self.round_budget_ua)
        pi[K.P_PER_RESET], pi[K.P_PER_SET] = per_reset, per_set
        pi[K.P_EXTRA_BITS] = self.line_bits + self.path.scheme.flag_cells
        cell = self.cell
        self.pf = pf = np.zeros(K.N_PF)
        pf[K.F_BURST], pf[K.F_READ], pf[K.F_HIT] = cfg.array.burst_ns, cell.read_ns, cfg.array.row_hit_ns
        pf[K.F_CANCEL_BEFORE], pf[K.F_RESET_NS], pf[K.F_SET_NS] = c.cancel_before, cell.reset_ns, cell.set_ns
        pf[K.F_POOL_CAP] = p.budget_ua
        pf[K.F_RESET_UA], pf[K.F_SET_UA] = cell.reset_ua, cell.set_ua
        self.ist = np.zeros(K.N_IST, np.int64)
        self.fst = np.zeros(K.N_FST)
        # One pending event per process (source, banks, refresh scans, a bank's
        # hint timer), a return per bank, and void hint timers (the heap grows).
        n_events = 4 * nb + 16
        self.ht = np.zeros(n_events)
        self.hs = np.zeros(n_events, np.int64)
        self.hp = np.zeros(n_events, np.int64)
        self.bi = np.zeros((nb, K.N_BI), np.int64)
        self.bi[:, K.B_ROW] = -1
        self.bf = np.zeros((nb, K.N_BF))
        n_slots = 1024
        self.sf = np.zeros((n_slots, K.N_SF))
        self.si = np.zeros((n_slots, K.N_SI), np.int64)
        self.free = np.arange(n_slots - 1, -1, -1, dtype=np.int64)
        self.ist[K.FREE_TOP] = n_slots
        self.ib = np.zeros((nb, rcap + wcap + 2), np.int64)
        self.rq = np.zeros((nb, rcap + 2), np.int64)
        self.wq = np.zeros((nb, wcap + 2), np.int64)
        self.ibh, self.ibn = np.zeros(nb, np.int64), np.zeros(nb, np.int64)
        self.rqh, self.rqn = np.zeros(nb, np.int64), np.zeros(nb, np.int64)
        self.wqh, self.wqn = np.zeros(nb, np.int64), np.zeros(nb, np.int64)
        self.rpend, self.wpend = np.zeros(nb, np.int64), np.zeros(nb, np.int64)
        self.bus_free = np.zeros(cfg.array.channels)
        self.pool_level = np.full(max(n_pools, 1), float(p.budget_ua))
        self.pq = np.zeros((max(n_pools, 1), nb + 1), np.int64)
        self.pqh, self.pqn = np.zeros(max(n_pools, 1), np.int64), np.zeros(max(n_pools, 1), np.int64)
        self.clog = np.zeros((4096, 2), np.int64)
        self.fqa = np.zeros((nb, 64), np.int64)             # the kernel's refresh queues
        self.fqh, self.fqn = np.zeros(nb, np.int64), np.zeros(nb, np.int64)
        self.hlog = np.zeros((4096, 2))
        pi[K.P_SCAN_BASE] = nb + 1 + self.pool_level.size
        pi[K.P_CLOSED_REFRESH] = self.closed_refresh
        pi[K.P_URGENT] = URGENT
        pi[K.P_SCRUB] = self.agent is not None and self.plan.policy == "scrub"
        pi[K.P_PLACE] = self.place_at_service
        self.ist[K.HINT_BASE] = pi[K.P_SCAN_BASE] + nb
        self.hqa = np.zeros((nb, 64), np.int64)            # hint queues (slots)
        self.hqh, self.hqn = np.zeros(nb, np.int64), np.zeros(nb, np.int64)
        self.presets_due: list[deque] = [deque() for _ in range(nb)]    # (line, pJ, cells) in queue order
        self._gens: list = [None] * nb          # the erase agent's sub-process per bank
        self._after_put = [-1] * nb             # pool whose put a bank waits on
        if self.erase is not None:
            for b in range(nb):
                self.bi[b, K.B_WANT_CLEAN] = self.erase.wants_idle_clean(b)
        scans = self.agent is not None and self.plan.active and np.isfinite(self.plan.scan_ns)
        pf[K.F_SCAN_NS] = self.plan.scan_ns if scans else 0.0
        # Process start order as in simpy: the source, bank 0, 1, ..., then
        # the refresh scans.
        pids = [nb] + list(range(nb))
        if scans:
            self.ist[K.REFRESH_RUNNING] = nb
            pids += [int(pi[K.P_SCAN_BASE]) + b for b in range(nb)]
        for pid in pids:
            K._push(self.ht, self.hs, self.hp, self.ist, 0.0, pid)
        self.ist[K.SRC_RUN] = 0
        self.ist[K.SRC_K] = K.S_NEXT
        # Per-request arrays only on request (run.keep_requests); the
        # statistics stream in fixed memory.
        self.keep = bool(getattr(cfg.run, "keep_requests", False))
        cap = 1 << 16 if self.keep else 0
        self.arrival = np.full(cap, np.nan)
        self.finish = np.full(cap, np.nan)
        self.op = np.zeros(cap, np.int8)
        self.n_req = 0
        self.stream = LatencyStream()
        # Queue policies (kernel_sched): one admission can complete a whole
        # inbox, so the logs keep that many rows free while they are on.
        pol = self.policy
        self.xs = xs = np.zeros(KS.N_XS, np.int64)
        KS.layout(xs, K)
        xs[KS.X_ON], xs[KS.X_SCHED], xs[KS.X_CAP] = pol.active, pol.fr_fcfs, pol.cap
        xs[KS.X_COALESCE], xs[KS.X_FORWARD], xs[KS.X_CAS] = pol.coalesce, pol.forward, self.cost_at_service
        xs[KS.X_MARGIN] = rcap + wcap + 4 if pol.active else 0
        self.xf = np.zeros(KS.N_XF)
        self.xf[KS.XF_FORWARD_NS] = pol.forward_ns
        n_log = max(1 << 16, 4 * int(xs[KS.X_MARGIN]))
        self.alog = np.zeros((n_log if pol.coalesce else 1, 2), np.int64)
        self.done_f = np.zeros((n_log, 2))
        self.done_i = np.zeros((n_log, 2), np.int64)
        self.max_finish = 0.0

    def _grow_slots(self) -> None:
        n = self.sf.shape[0]
        self.sf = np.concatenate([self.sf, np.zeros_like(self.sf)])
        self.si = np.concatenate([self.si, np.zeros_like(self.si)])
        top = int(self.ist[K.FREE_TOP])
        free = np.empty(2 * n, np.int64)
        free[:n] = np.arange(2 * n - 1, n - 1, -1)
        free[n:n + top] = self.free[:top]
        self.free = free
        self.ist[K.FREE_TOP] = n + top

    def _take_requests(self, ops: OpColumns) -> int:
        """Append a chunk's requests to the per-request arrays; its first global index."""
        base, n = self.n_req, ops.op.size
        self.n_req = base + n
        if not self.keep:
            return base
        if base + n > self.arrival.size:
            cap = max(2 * self.arrival.size, base + n)
            for name, fill in (("arrival", np.nan), ("finish", np.nan), ("op", 0)):
                old = getattr(self, name)
                new = np.full(cap, fill, old.dtype)
                new[:base] = old[:base]
                setattr(self, name, new)
        self.arrival[base:base + n] = ops.arrival
        self.op[base:base + n] = ops.op
        return base

    def _columns(self, ops: OpColumns) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        nr, nw = ops.n_reads, ops.w_req.size
        c_bank = np.empty(nr + nw, np.int64)
        c_f = np.empty((nr + nw, 5))
        c_i = np.zeros((nr + nw, K.N_SI), np.int64)
        i64 = np.int64
        _fill_columns(np.asarray(ops.order, i64), nr,
                      np.asarray(ops.r_idx, i64), np.asarray(ops.r_ch, i64), np.asarray(ops.r_bank, i64),
                      np.asarray(ops.r_row, i64), np.asarray(ops.r_phys, i64),
                      np.asarray(ops.w_req, i64), np.asarray(ops.w_ch, i64), np.asarray(ops.w_bank, i64),
                      np.asarray(ops.w_phys, i64), np.asarray(ops.uses_bus, i64),
                      np.asarray(ops.rr, i64), np.asarray(ops.sr, i64), np.asarray(ops.cells, i64),
                      np.asarray(ops.n_set, i64), np.asarray(ops.n_reset, i64),
                      np.asarray(ops.service, float), np.asarray(ops.current, float),
                      np.asarray(ops.pre, float), np.asarray(ops.pj, float), c_bank, c_f, c_i)
        if not (self.policy.fr_fcfs or ops.alt is not None):
            return np.ascontiguousarray(ops.t, dtype=float), c_bank, c_f, c_i
        o = np.asarray(ops.order, i64)
        w = o >= nr
        j = o[w] - nr
        if self.policy.fr_fcfs:
            # User writes open rows only under FR-FCFS (see engine/sched.py).
            c_i[w, K.SI_ROW] = np.asarray(ops.w_row, i64)[j]
        if ops.alt is not None:
            # The fast form (out of place with block erase, or into a line a hint
            # pre-programmed), taken if the bank finds it so at service.
            alt_pj, alt_set, alt_reset = ops.alt
            c_f[w, 4] = np.asarray(alt_pj, float)[j]
            c_i[w, K.SI_OOP_SET] = np.asarray(alt_set, i64)[j]
            c_i[w, K.SI_OOP_RESET] = np.asarray(alt_reset, i64)[j]
        return np.ascontiguousarray(ops.t, dtype=float), c_bank, c_f, c_i

    def _call(self, cols, base: int) -> int:
        fst, ist = self.fst, self.ist
        while True:
            status = K.run_kernel(
                self.pi, self.pf, ist, fst, self.ht, self.hs, self.hp, self.bi, self.bf,
                self.sf, self.si, self.free, self.ib, self.ibh, self.ibn, self.rq, self.rqh, self.rqn,
                self.wq, self.wqh, self.wqn, self.rpend, self.wpend, self.bus_free, self.pool_level,
                self.pq, self.pqh, self.pqn, cols[0], cols[1], cols[2], cols[3], base,
                self.done_f, self.done_i, self.clog, self.fqa, self.fqh, self.fqn, self.hlog,
                self.hqa, self.hqh, self.hqn, self.xs, self.xf, self.alog)
            self._flush_cancel_wear()
            self._flush_absorbed()
            self._flush_done()
            self._flush_handovers()
            if status == K.SCAN:
                self._scan(int(ist[K.SCAN_B]))
                continue
            if status == K.SCRUB:
                self.agent.on_read(int(ist[K.SCAN_B]), int(ist[K.SCRUB_PHYS]), float(fst[K.NOW]))
                continue
            if status == K.PLACE_WRITE and self.erase is None:
                self._hint_placed(int(ist[K.SCAN_B]))
                continue
            if status in (K.BANK_PY, K.PLACE_WRITE, K.IDLE_CLEAN):
                self._erase_step(status, int(ist[K.SCAN_B]))
                continue
            if status == K.GROW_HEAP:
                self._ensure_heap(0)
                continue
            if status == K.NEED_SLOTS:
                self._grow_slots()
                continue
            if status == K.FLUSH:
                continue
            if status == K.FAILED:
                raise RuntimeError("fast engine: a power-pool return had to wait (not modeled)")
            break
        return status

    def _flush_cancel_wear(self) -> None:
        n = int(self.ist[K.CLOG_N])
        if n > self.clog.shape[0]:
            raise RuntimeError("fast engine: cancellation log overflow")
        if n:
            rows = self.clog[:n]
            done = rows[:, 0] < 0
            if done.any():
                # Pre-programmings that ended (row: -1 - bank), in order.
                tot, path = self.totals, self.path
                for b in (-1 - rows[done, 0]).tolist():
                    line, pj, cells = self.presets_due[b].popleft()
                    self.preset[line] = True
                    tot.presets += 1
                    tot.preset_pj += pj
                    tot.preset_cells += cells
                    path.line_writes[line] += 1
                    path.ledger.add("preset", line, cells)
                rows = rows[~done]
            self.cancel_wear(rows[:, 0], rows[:, 1])
            self.ist[K.CLOG_N] = 0

    def _flush_absorbed(self) -> None:
        """Replaced writes program no cells: take their wear back (the reference does it one by one)."""
        n = int(self.xs[KS.X_ALOG_N])
        if n:
            phys, cells = self.alog[:n, 0], self.alog[:n, 1]
            np.subtract.at(self.path.line_writes, phys, 1)
            if not self.path.defer_user_wear:
                self.path.ledger.add("user", phys, -cells.astype(float))
            self.xs[KS.X_ALOG_N] = 0

    def _flush_done(self) -> None:
        n = int(self.ist[K.DONE_N])
        if not n:
            return
        f, i = self.done_f[:n], self.done_i[:n]
        self.stream.add(i[:, 1], f[:, 0], f[:, 1])
        self.max_finish = max(self.max_finish, float(f[:, 1].max()))
        if self.keep:
            self.finish[i[:, 0]] = f[:, 1]
            self.arrival[i[:, 0]] = f[:, 0]     # closed loop: the time of hand-over
        self.ist[K.DONE_N] = 0

    def _flush_handovers(self) -> None:
        n = int(self.ist[K.HLOG_N])
        if n:
            # One at a time, as the reference hands them over: the agent
            # sums failure probabilities per noted batch.
            note = self.agent.note_writes
            for t, p in zip(self.hlog[:n, 0].tolist(), self.hlog[:n, 1].astype(np.int64).tolist()):
                note(np.array([t]), np.array([p]))
            self.ist[K.HLOG_N] = 0

    def _scan(self, b: int) -> None:
        """A refresh scan of bank ``b`` is due (the reference's scan process)."""
        ist, fst = self.ist, self.fst
        if ist[K.SRC_DONE] and ist[K.IN_FLIGHT] == 0:
            ist[K.REFRESH_RUNNING] -= 1
            K.wake_all(self.amap.total_banks, self.bi, ist, fst, self.ht, self.hs, self.hp)
            return
        now = float(fst[K.NOW])
        self.agent.scan_once(b, now)
        K.push_event(self.ht, self.hs, self.hp, ist, now + self.plan.scan_ns, int(self.pi[K.P_SCAN_BASE]) + b)

    def queue_refreshes(self, b: int, ch: np.ndarray, service: np.ndarray, current: np.ndarray,
                        lines: np.ndarray, now: float) -> None:
        """The refresh agent's operations for bank ``b`` into the kernel's refresh queue; wake it."""
        n = lines.size
        if n:
            while int(self.ist[K.FREE_TOP]) < n:
                self._grow_slots()
            need = int(self.fqn[b]) + n
            if need > self.fqa.shape[1]:
                self._grow_refresh_queues(need)
            K.queue_refreshes(b, np.asarray(ch, np.int64), np.asarray(service, float),
                              np.asarray(current, float), np.asarray(lines, np.int64), self.sf, self.si,
                              self.free, self.ist, self.fqa, self.fqh, self.fqn, float(self.fst[K.NOW]))
        K.wake(b, now, self.bi, self.ist, self.fst, self.ht, self.hs, self.hp)

    def _grow_refresh_queues(self, need: int) -> None:
        self.fqa = grown_queues(self.fqa, self.fqh, need, self.fqn)

    def policy_counts(self) -> dict:
        xs = self.xs
        return {"row_hits": int(xs[KS.X_ROW_HITS]), "write_row_hits": int(xs[KS.X_WROW_HITS]),
                "requests_passed": int(xs[KS.X_PASSED]), "max_times_passed": int(xs[KS.X_MAX_PASSED]),
                "coalesced": int(xs[KS.X_COALESCED]), "forwarded": int(xs[KS.X_FORWARDED]),
                "a_set": int(xs[KS.X_A_SET]), "a_reset": int(xs[KS.X_A_RESET]),
                "a_pj": float(self.xf[KS.XF_A_PJ]), "a_pre": int(xs[KS.X_A_PRE])}

    def cancel_wear(self, phys: np.ndarray, wasted: np.ndarray) -> None:
        """Cells programmed by aborted writes (the reference counts them one by one)."""
        self.path.ledger.add("cancelled", phys, wasted)

    # ------------------------------------------------------------ simulation
    def run(self) -> TimingTotals:
        self.source_done = False
        if self.plan is not None:
            self.agent = RefreshAgent(self, self.plan, self.rng)
        self._alloc()
        nb = self.amap.total_banks
        empty = (np.zeros(0), np.zeros(0, np.int64), np.zeros((0, 5)), np.zeros((0, K.N_SI), np.int64))
        started = False
        for chunk in self.source:
            ops = prepare_ops(self, chunk)
            base = self._take_requests(ops)
            if not self.closed:
                self.ist[K.IN_FLIGHT] += ops.users
            # The source resumes where it asked for the chunk (at the start,
            # its first event in the heap).
            self.ist[K.SRC_POS] = 0
            status = self._call(self._columns(ops), base)
            if status != K.NEED_CHUNK:
                raise RuntimeError(f"fast engine: unexpected kernel status {status}")
            started = True
        if not started:
            # No request reached the memory (a cache took them all): the
            # source still takes its first step at time 0, before the banks.
            status = self._call(empty, 0)
            if status != K.NEED_CHUNK:
                raise RuntimeError(f"fast engine: unexpected kernel status {status}")
        K.source_done(self.pi, self.ist, self.fst, self.bi, self.ht, self.hs, self.hp)
        self.source_done = True
        status = self._call(empty, 0)
        if status != K.FINISHED:
            raise RuntimeError(f"fast engine: unexpected kernel status {status}")
        self._flush_handovers()
        return self._finish_fast(nb)

    def _finish_fast(self, nb: int) -> TimingTotals:
        tot, ist, fst = self.totals, self.ist, self.fst
        n = self.n_req if self.keep else 0
        tot.arrival_ns = self.arrival[:n].copy()
        tot.finish_ns = self.finish[:n].copy()
        tot.op = self.op[:n].copy()
        tot.latency_ns = tot.finish_ns - tot.arrival_ns
        tot.stream = self.stream
        tot.simulated_ns = self.max_finish
        tot.bank_busy_ns = self.bf[:, K.BF_BUSY].copy()
        tot.power_wait_ns = float(fst[K.POWER_WAIT])
        tot.refresh_busy_ns = float(fst[K.REFRESH_BUSY])
        tot.cancellations = int(ist[K.CANCELS])
        tot.cancelled_pj = float(fst[K.CANC_PJ])
        tot.cancelled_cells = int(ist[K.CANC_CELLS])
        tot.pauses = int(ist[K.PAUSES])
        tot.user_set_cells += int(ist[K.USER_SET])
        tot.user_reset_cells += int(ist[K.USER_RESET])
        tot.set_cells += int(ist[K.SET_CELLS])
        tot.reset_cells += int(ist[K.RESET_CELLS])
        tot.read_bits += int(ist[K.READ_BITS])
        return self._close_totals(tot)


@njit(cache=True)
def _fill_columns(order, nr, r_idx, r_ch, r_bank, r_row, r_phys, w_req, w_ch, w_bank, w_phys, uses_bus,
                  rr, sr, cells, n_set, n_reset, service, current, pre, pj, c_bank, c_f, c_i):
    """The kernel's chunk columns in admission order (reads, then writes, permuted by ``order``)."""
    for k in range(order.size):
        j = order[k]
        if j < nr:
            c_bank[k] = r_bank[j]
            for f in range(5):
                c_f[k, f] = 0.0
            c_i[k, K.SI_READ] = 1
            c_i[k, K.SI_REQ] = r_idx[j]
            c_i[k, K.SI_CH] = r_ch[j]
            c_i[k, K.SI_ROW] = r_row[j]
            c_i[k, K.SI_PHYS] = r_phys[j]
            c_i[k, K.SI_BUS] = 1
            c_i[k, K.SI_RR] = 0
            c_i[k, K.SI_SR] = 0
            c_i[k, K.SI_CELLS] = 0
            c_i[k, K.SI_NSET] = 0
            c_i[k, K.SI_NRESET] = 0
        else:
            j -= nr
            c_bank[k] = w_bank[j]
            c_f[k, 0] = service[j]
            c_f[k, 1] = current[j]
            c_f[k, 2] = pre[j]
            c_f[k, 3] = pj[j]
            c_f[k, 4] = 0.0
            c_i[k, K.SI_READ] = 0
            c_i[k, K.SI_REQ] = w_req[j]
            c_i[k, K.SI_CH] = w_ch[j]
            c_i[k, K.SI_ROW] = -1
            c_i[k, K.SI_PHYS] = w_phys[j]
            c_i[k, K.SI_BUS] = uses_bus[j]
            c_i[k, K.SI_RR] = rr[j]
            c_i[k, K.SI_SR] = sr[j]
            c_i[k, K.SI_CELLS] = cells[j]
            c_i[k, K.SI_NSET] = n_set[j]
            c_i[k, K.SI_NRESET] = n_reset[j]


def make_engine(cfg, source: Iterable[Chunk], path: WritePath, refresh: RefreshPlan | None = None,
                rng: np.random.Generator | None = None) -> TimingEngine:
    """The engine ``run.engine`` asks for, or the reference where the fast one has a gap."""
    want = getattr(cfg.run, "engine", "fast")
    if want == "fast" and not unsupported(cfg, path, refresh):
        return FastEngine(cfg, source, path, refresh, rng)
    return TimingEngine(cfg, source, path, refresh, rng)
