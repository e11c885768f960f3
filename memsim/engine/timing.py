"""The timing engine: a discrete-event controller on simpy (reference model).

Processes: one source (open-loop arrivals at their times, or closed-loop with
a fixed number of requests in flight) and one controller process per bank.
Each bank has a read queue and a write queue; reads go first; when the write
queue reaches ``drain_high`` the bank drains writes until it falls to
``drain_low``; outside drains, writes are served when no read waits.  A full
queue back-pressures the source.  Each channel's data bus is reserved in
first-come order when a bank starts an access (a slot schedule, so the bus
needs no simpy event of its own).

Per-request Python work is kept small: everything that does not depend on
the order of service (addresses, banks, bit counts, programming times,
energy) is computed for a whole chunk with numpy before the requests enter
simulated time.  Latency of a request runs from its arrival (generation) to
the end of its bank access, so time spent back-pressured counts.
"""
from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field
from typing import Iterable, Iterator

import numpy as np
import simpy

from memsim.policy.writepath import WritePath
from memsim.tech.array import AddressMap
from memsim.tech.cell import CellTech
from memsim.workload.chunk import READ, WRITE, Chunk


@dataclass
class TimingTotals:
    """Everything the engine measured, before it becomes a RunResult."""

    latency_ns: np.ndarray = field(default_factory=lambda: np.empty(0))
    op: np.ndarray = field(default_factory=lambda: np.empty(0, np.int8))
    finish_ns: np.ndarray = field(default_factory=lambda: np.empty(0))
    arrival_ns: np.ndarray = field(default_factory=lambda: np.empty(0))
    simulated_ns: float = 0.0
    reads: int = 0
    writes: int = 0
    move_writes: int = 0
    meta_writes: int = 0
    hints: int = 0
    read_pj: float = 0.0
    set_pj: float = 0.0
    reset_pj: float = 0.0
    user_set_cells: int = 0
    user_reset_cells: int = 0
    move_cells: int = 0
    bank_busy_ns: np.ndarray = field(default_factory=lambda: np.empty(0))
    user_write_ns: float = 0.0       # sum of write service (program) times, ns

    @property
    def requests(self) -> int:
        return self.reads + self.writes


class _Wake(simpy.Event):
    """An event the source can fire at a future time (a scheduled wake-up)."""

    def at(self, delay: float) -> None:
        self._ok = True
        self._value = None
        self.env.schedule(self, delay=delay)


class _Prepared:
    """One chunk, ready for simulated time: admission entries as tuples."""

    __slots__ = ("entries", "lat", "op", "arrival", "finish")

    def __init__(self, n: int) -> None:
        # Plain lists: the bank loop writes one element per request, and list
        # item assignment is several times cheaper than numpy's.
        nan = float("nan")
        self.lat = [nan] * n
        self.finish = [nan] * n
        self.arrival: list[float] = []
        self.op = np.zeros(n, np.int8)
        self.entries: list = []


class TimingEngine:
    """Run a request stream through banks, buses and queues.

    Parameters
    ----------
    cfg:
        The validated :class:`~memsim.config.RunConfig`.
    source:
        Iterable of request chunks (logical lines).
    path:
        The write path (leveler, write scheme, stored content, wear).
    """

    def __init__(self, cfg, source: Iterable[Chunk], path: WritePath) -> None:
        self.cfg = cfg
        self.source = source
        self.path = path
        self.cell = CellTech.from_config(cfg.cell)
        a = cfg.array
        self.amap = AddressMap(a.channels, a.banks, a.row_lines, a.bank_hash)
        self.line_bits = a.line_bytes * 8
        self.closed = cfg.workload.arrival == "closed"
        self.totals = TimingTotals(bank_busy_ns=np.zeros(self.amap.total_banks))

    # ------------------------------------------------------------ preparation
    def _prepare(self, chunk: Chunk) -> _Prepared:
        """Vectorized work for a chunk: remap, bit counts, service times, energy."""
        tot, cell, a = self.totals, self.cell, self.cfg.array
        keep = chunk.op != 2
        tot.hints += int((~keep).sum())
        if not keep.all():
            chunk = chunk.take(keep)
        n = len(chunk)
        prep = _Prepared(n)
        prep.op[:] = chunk.op
        prep.arrival = chunk.time_ns.tolist()
        is_read = chunk.op == READ
        w_idx = np.flatnonzero(~is_read)
        tot.reads += int(is_read.sum())
        tot.writes += int(w_idx.size)

        # Reads see the map as it stands before this chunk's writes.
        r_idx = np.flatnonzero(is_read)
        r_phys = self.path.leveler.lookup(chunk.line[r_idx])
        r_ch, r_bank, r_row = self.amap.locate(r_phys)
        tot.read_pj += r_idx.size * self.line_bits * cell.read_pj

        wb = self.path.apply(chunk.line[w_idx], None if chunk.data is None else chunk.data[w_idx])
        w_ch, w_bank, _ = self.amap.locate(wb.phys)
        program = self.cell.program_ns(wb.n_set, wb.n_reset, a.bank_budget_ua)
        moves = wb.user < 0
        pre_read = self.path.scheme.pre_read
        # A move reads its source line, then programs the destination.
        service = program + np.where(moves | pre_read, cell.read_ns, 0.0)
        extra_bits = self.line_bits + self.path.scheme.flag_cells
        tot.read_pj += (int(moves.sum()) + (int((~moves).sum()) if pre_read else 0)) * extra_bits * cell.read_pj
        tot.set_pj += float(wb.n_set.sum()) * cell.set_pj
        tot.reset_pj += float(wb.n_reset.sum()) * cell.reset_pj
        tot.user_set_cells += int(wb.n_set[~moves].sum())
        tot.user_reset_cells += int(wb.n_reset[~moves].sum())
        tot.move_cells += int(wb.n_set[moves].sum() + wb.n_reset[moves].sum())
        tot.move_writes += int(moves.sum())
        tot.meta_writes += wb.meta_writes
        tot.user_write_ns += float(service[~moves].sum())

        # Admission entries in arrival order: (time, is_read, bank, item).
        # Read item: (local index, channel, row).  Write item: (local index or
        # -1 for a move, channel, service ns, uses bus).  A write's moves
        # follow it (stable order by position in the chunk).
        t = chunk.time_ns
        w_req = np.where(moves, -1, w_idx[np.clip(wb.user, 0, None)] if w_idx.size else 0)
        w_pos = w_idx[wb.after] if w_idx.size else np.empty(0, np.int64)
        pos = np.concatenate([r_idx, w_pos])
        order = np.argsort(pos, kind="stable")
        nr = r_idx.size
        items = (list(zip(r_idx.tolist(), r_ch.tolist(), r_row.tolist()))
                 + list(zip(w_req.tolist(), w_ch.tolist(), service.tolist(), (~moves).tolist())))
        ol = order.tolist()
        prep.entries = list(zip(t[pos[order]].tolist(), (order < nr).tolist(),
                                np.concatenate([r_bank, w_bank])[order].tolist(),
                                [items[k] for k in ol]))
        return prep

    # ------------------------------------------------------------ simulation
    def run(self) -> TimingTotals:
        env = self.env = simpy.Environment()
        nb = self.amap.total_banks
        self.inbox = [deque() for _ in range(nb)]
        self.rpend = [0] * nb          # reads waiting in a bank's inbox
        self.wpend = [0] * nb          # writes waiting in a bank's inbox
        self.rq = [deque() for _ in range(nb)]
        self.wq = [deque() for _ in range(nb)]
        self.idle: list = [None] * nb
        self.space: list = [None] * nb
        self.slot = None
        self.bus_free = [0.0] * self.cfg.array.channels
        self.in_flight = 0
        self.source_done = False
        self.prepared: list[_Prepared] = []
        env.process(self._source())
        for b in range(nb):
            env.process(self._bank(b))
        env.run()
        return self._finish()

    def _wake(self, b: int, at: float) -> None:
        """Wake bank ``b`` at time ``at`` if it sleeps with nothing to do."""
        ev = self.idle[b]
        if ev is not None:
            self.idle[b] = None
            ev.at(max(0.0, at - self.env.now))

    def _chunks(self) -> Iterator[_Prepared]:
        for chunk in self.source:
            prep = self._prepare(chunk)
            self.prepared.append(prep)
            yield prep

    def _admit(self, b: int) -> None:
        """Move bank ``b``'s inbox entries that have arrived into its queues."""
        ib, now = self.inbox[b], self.env.now
        rq, wq = self.rq[b], self.wq[b]
        while ib and ib[0][0] <= now:
            _, is_read, prep, item = ib.popleft()
            if is_read:
                rq.append((prep, item))
                self.rpend[b] -= 1
            else:
                wq.append((prep, item))
                self.wpend[b] -= 1

    def _source(self):
        """Hand requests to their banks' inboxes in arrival order.

        Requests are handed over ahead of simulated time (the bank admits
        them when they arrive), which costs no simpy event.  The source only
        steps into simulated time when a queue could be full on arrival;
        then it waits for real space, which is the back-pressure.
        """
        env = self.env
        rcap, wcap = self.cfg.controller.read_queue, self.cfg.controller.write_queue
        limit = self.cfg.workload.outstanding
        closed = self.closed
        rq, wq, inbox, rpend, wpend = self.rq, self.wq, self.inbox, self.rpend, self.wpend
        for prep in self._chunks():
            arrival = prep.arrival
            for t, is_read, b, item in prep.entries:
                user = is_read or item[0] >= 0
                if closed:
                    if user:
                        while self.in_flight >= limit:
                            self.slot = env.event()
                            yield self.slot
                        arrival[item[0]] = env.now
                    t = env.now
                if user:
                    self.in_flight += 1
                if is_read:
                    q, cap, pend = rq[b], rcap, rpend
                else:
                    q, cap, pend = wq[b], wcap, wpend
                if len(q) + pend[b] < cap:
                    inbox[b].append((t, is_read, prep, item))
                    pend[b] += 1
                    self._wake(b, t)
                    continue
                # The queue may be full when this request arrives: go there.
                if t > env.now:
                    yield env.timeout(t - env.now)
                self._admit(b)
                while len(q) >= cap:
                    self.space[b] = env.event()
                    yield self.space[b]
                    self._admit(b)
                q.append((prep, item))
                self._wake(b, env.now)
        self.source_done = True
        for b in range(len(self.idle)):
            self._wake(b, env.now)

    def _bank(self, b: int):
        env = self.env
        rq, wq, ib = self.rq[b], self.wq[b], self.inbox[b]
        rpend, wpend, space = self.rpend, self.wpend, self.space
        c = self.cfg.controller
        high, low, idle_writes = c.drain_high, c.drain_low, c.idle_writes
        burst = self.cfg.array.burst_ns
        read_ns, hit_ns = self.cell.read_ns, self.cfg.array.row_hit_ns
        bus_free = self.bus_free
        busy = self.totals.bank_busy_ns
        timeout = env.timeout
        draining = False
        open_row = -1
        while True:
            now = env._now
            # Admit what has arrived (inlined: this loop is the hot path).
            while ib and ib[0][0] <= now:
                _, is_read, prep, item = ib.popleft()
                if is_read:
                    rq.append((prep, item))
                    rpend[b] -= 1
                else:
                    wq.append((prep, item))
                    wpend[b] -= 1
            if draining and len(wq) <= low:
                draining = False
            if not draining and len(wq) >= high:
                draining = True
            if draining or (wq and not rq and (idle_writes or (self.source_done and not ib))):
                prep, (idx, ch, service, uses_bus) = wq.popleft()
                if uses_bus:
                    start = bus_free[ch] if bus_free[ch] > now else now
                    bus_free[ch] = start + burst
                    dur = start + burst - now + service
                else:
                    dur = service
            elif rq:
                prep, (idx, ch, row) = rq.popleft()
                start = now + (hit_ns if (row >= 0 and row == open_row) else read_ns)
                open_row = row
                if bus_free[ch] > start:
                    start = bus_free[ch]
                bus_free[ch] = start + burst
                dur = start + burst - now
            elif ib:
                yield timeout(ib[0][0] - now)
                continue
            else:
                if self.source_done and not wq:
                    return
                ev = self.idle[b] = _Wake(env)
                yield ev
                continue
            if space[b] is not None:
                sp, space[b] = space[b], None
                sp.succeed()
            busy[b] += dur
            yield timeout(dur)
            if idx >= 0:
                done = now + dur
                prep.finish[idx] = done
                prep.lat[idx] = done - prep.arrival[idx]
                self.in_flight -= 1
                if self.slot is not None:
                    ev, self.slot = self.slot, None
                    ev.succeed()

    def _finish(self) -> TimingTotals:
        tot = self.totals
        if self.prepared:
            tot.latency_ns = np.concatenate([np.asarray(p.lat, float) for p in self.prepared])
            tot.op = np.concatenate([p.op for p in self.prepared])
            tot.finish_ns = np.concatenate([np.asarray(p.finish, float) for p in self.prepared])
            tot.arrival_ns = np.concatenate([np.asarray(p.arrival, float) for p in self.prepared])
        tot.simulated_ns = float(np.nanmax(tot.finish_ns)) if tot.finish_ns.size else 0.0
        return tot
