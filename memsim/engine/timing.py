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

import gc
from collections import deque
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from itertools import repeat
from operator import itemgetter

import numpy as np
import simpy

from memsim.engine.erase_agent import EraseAgent
from memsim.engine.ops import prepare_ops, preset_costs
from memsim.engine.refresh_agent import REFRESH, URGENT, RefreshAgent
from memsim.engine.sched import QueuePolicy, front_columns, settle
from memsim.engine.stream import LatencyStream
from memsim.policy.bitops import add_profile
from memsim.policy.refresh import RefreshPlan
from memsim.policy.write.bits import popcount_rows
from memsim.policy.writepath import WritePath
from memsim.seeds import stream
from memsim.tech.array import AddressMap
from memsim.tech.cell import CellTech
from memsim.workload.chunk import Chunk

PRESET = -3        # queue-item index marking a hint's pre-programming
REFRESH_KEYS = 1 << 62   # first key of refresh programs' keyed MLC draws (writes count from 0)


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
    read_pj: float = 0.0             # read_bits x read energy per bit (set at the end)
    set_pj: float = 0.0              # set_cells x SET energy per cell (set at the end)
    reset_pj: float = 0.0
    # Energy is counted in cells and bits and priced once at the end, so the
    # sum does not depend on whether it was counted per chunk or per write.
    read_bits: int = 0               # bits read: reads, pre-reads, move source reads
    set_cells: int = 0               # SET pulses of every write and move (SLC)
    reset_cells: int = 0
    mlc_pj: float = 0.0              # program-and-verify energy of multi-level cells
    refresh_pj: float = 0.0          # refresh reads and reprogramming
    erase_pj: float = 0.0            # block erase-ahead: cleaner moves and bulk initialization
    user_set_cells: int = 0
    user_reset_cells: int = 0
    move_cells: int = 0
    bank_busy_ns: np.ndarray = field(default_factory=lambda: np.empty(0))
    refresh_busy_ns: float = 0.0     # bank time spent on refresh operations, ns
    power_wait_ns: float = 0.0       # time writes waited for programming current, ns
    cancellations: int = 0
    cancelled_pj: float = 0.0        # programming energy of aborted writes, pJ
    cancelled_cells: int = 0         # cells programmed by aborted writes
    pauses: int = 0
    presets: int = 0                 # lines pre-programmed from hints
    preset_pj: float = 0.0
    preset_cells: int = 0
    hint_hits: int = 0               # user writes that found their line pre-programmed
    row_hits: int = 0                # user reads served from the open row (engine/rows.py)
    # Queue policies (engine/sched.py): counted where the bank serves or admits requests.
    write_row_hits: int = 0          # fr_fcfs: user writes to the open row
    requests_passed: int = 0         # fr_fcfs: requests served after younger ones passed them
    max_times_passed: int = 0        # fr_fcfs: most passes one request waited through (<= row_hit_cap)
    writes_coalesced: int = 0        # user writes replaced in the queue before they started
    reads_forwarded: int = 0         # reads answered from the write queue
    stream: LatencyStream = field(default_factory=LatencyStream)   # latency and occupancy statistics

    @property
    def requests(self) -> int:
        return self.reads + self.writes


def price_energy(tot: TimingTotals, cell: CellTech) -> None:
    """Energy of the counted bits and cells (once, at the end of a run)."""
    tot.read_pj = tot.read_bits * cell.read_pj
    tot.set_pj = tot.set_cells * cell.set_pj
    tot.reset_pj = tot.reset_cells * cell.reset_pj


class _Wake(simpy.Event):
    """An event the source can fire at a future time (a scheduled wake-up)."""

    def at(self, delay: float) -> None:
        self._ok = True
        self._value = None
        self.env.schedule(self, delay=delay)


class _Prepared:
    """One chunk, ready for simulated time: admission entries as tuples."""

    __slots__ = ("arrival", "base", "entries", "finish", "front", "lat", "op", "users")

    def __init__(self, n: int) -> None:
        # Plain lists: the bank loop writes one element per request, and list
        # item assignment is several times cheaper than numpy's.
        nan = float("nan")
        self.lat = [nan] * n
        self.finish = [nan] * n
        self.arrival: list[float] = []
        self.op = np.zeros(n, np.int8)
        self.entries: list = []
        self.users = 0
        self.base = 0           # global index of the chunk's first request
        self.front = None       # per request: row, line and write cost (queue policies only)


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

    name = "reference"

    def __init__(self, cfg, source: Iterable[Chunk], path: WritePath,
                 refresh: RefreshPlan | None = None, rng: np.random.Generator | None = None) -> None:
        self.cfg = cfg
        self.source = source
        self.path = path
        self.refreshes_costed = 0
        self.cell = CellTech.from_config(cfg.cell)
        a = cfg.array
        self.amap = AddressMap.from_config(a)
        self.line_bits = a.line_bytes * 8
        self.closed = cfg.workload.arrival == "closed"
        # A plain list while running (cheap item updates); numpy at the end.
        self.totals = TimingTotals(bank_busy_ns=[0.0] * self.amap.total_banks)
        self.plan = refresh
        self.rng = rng if rng is not None else stream(cfg.run.seed, "refresh")
        self.agent: RefreshAgent | None = None
        c, p = cfg.controller, cfg.power
        # Cells one round may drive: the bank's budget, or less if the shared
        # budget is smaller.
        self.round_budget_ua = min(a.bank_budget_ua, p.budget_ua) if p.budget_ua > 0 else a.bank_budget_ua
        self.out_of_place = path.scheme.out_of_place
        self.hint_mode = c.hint_preset
        self.cost_at_service = self.out_of_place or self.hint_mode
        path.defer_user_wear = self.cost_at_service      # user wear counted at service
        self.preset: dict[int, bool] = {}          # lines pre-programmed from a hint, not yet written
        # Closed loop with refresh: write times are known only at hand-over,
        # so write items must carry their physical line (full layout).
        self.closed_refresh = self.closed and refresh is not None and refresh.policy != "none"
        self.extended = (c.write_cancel or c.write_pause or p.budget_ua > 0 or self.out_of_place
                         or self.hint_mode or self.closed_refresh)
        self.erase = EraseAgent(self) if self.out_of_place else None
        self.open_rows = np.full(self.amap.total_banks, -1, np.int64)   # row each bank's last read opened
        self.policy = QueuePolicy(c, self.amap.total_banks)

    # ------------------------------------------------------------ preparation
    def _prepare(self, chunk: Chunk) -> _Prepared:
        """Op columns of a chunk (see :mod:`memsim.engine.ops`) as admission entries."""
        ops = prepare_ops(self, chunk)
        n = ops.op.size
        prep = _Prepared(n)
        prep.op[:] = ops.op
        prep.arrival = ops.arrival.tolist()
        # Admission entries in arrival order: (time, is_read, bank, item).
        # Read item: (local index, channel, row, physical line).  Write item:
        # local index (-1 for a move), channel, service ns, uses bus, current
        # uA, pre-read ns, RESET rounds, SET rounds, programming pJ, cells,
        # physical line.
        order = ops.order
        nr = ops.n_reads
        w_cols = [ops.w_req.tolist(), ops.w_ch.tolist(), ops.service.tolist(), ops.uses_bus.tolist(),
                  ops.current.tolist(), ops.pre.tolist(), ops.rr.tolist(), ops.sr.tolist(),
                  ops.pj.tolist(), ops.cells.tolist(), ops.w_phys.tolist()]
        if ops.alt is not None:
            o_ns, o_set, o_reset = ops.alt
            w_cols.append(list(zip(o_ns.tolist(), o_set.tolist(), o_reset.tolist(),
                                   ops.n_set.tolist(), ops.n_reset.tolist())))
        if not self.extended:
            w_cols = w_cols[:4]        # the plain bank loop needs only these
        items = (list(zip(ops.r_idx.tolist(), ops.r_ch.tolist(), ops.r_row.tolist(), ops.r_phys.tolist()))
                 + list(zip(*w_cols)))
        # Entries carry (prep, item) so the source hands them to a bank's
        # inbox as they are (no tuple per request on the hot path).
        paired = list(zip(repeat(prep), items))
        ordered = itemgetter(*order.tolist())(paired) if len(paired) > 1 else tuple(paired)
        prep.entries = list(zip(ops.t.tolist(), (order < nr).tolist(),
                                np.concatenate([ops.r_bank, ops.w_bank])[order].tolist(), ordered))
        prep.users = ops.users
        if self.policy.active:
            prep.front = front_columns(ops)
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
        self.fq = [deque() for _ in range(nb)]      # refresh operations
        self.hq = [deque() for _ in range(nb)]      # write hints: (time, preset item)
        self.idle: list = [None] * nb
        self.space: list = [None] * nb
        self.slot = None
        self.bus_free = [0.0] * self.cfg.array.channels
        self.in_flight = 0
        self.source_done = False
        self.prepared: list[_Prepared] = []
        self.done: list[int] = []       # requests in completion order
        self.refresh_running = 0
        if self.plan is not None:
            self.agent = RefreshAgent(self, self.plan, self.rng)
        env.process(self._source())
        for b in range(nb):
            env.process(self._bank(b))
        p = self.cfg.power
        self.pools = []
        if p.budget_ua > 0:
            n_pools = self.cfg.array.channels if p.scope == "channel" else 1
            self.pools = [simpy.Container(env, capacity=p.budget_ua, init=p.budget_ua)
                          for _ in range(n_pools)]
        if self.agent is not None and self.plan.active and np.isfinite(self.plan.scan_ns):
            self.refresh_running = nb
            for b in range(nb):
                env.process(self._refresh_scan(b))
        # The run allocates millions of short-lived tuples and events that
        # reference counting frees; the cyclic collector would only rescan
        # the long-lived prepared chunks over and over.  Pause it for the run.
        was_enabled = gc.isenabled()
        gc.disable()
        try:
            env.run()
        finally:
            if was_enabled:
                gc.enable()
        return self._finish()

    def _refresh_scan(self, b: int):
        """Simpy process: periodic or drift-triggered refresh scans of bank ``b``."""
        env, scan_ns = self.env, self.plan.scan_ns
        while True:
            yield env.timeout(scan_ns)
            if self.source_done and self.in_flight == 0:
                break
            self.agent.scan_once(b, env.now)
        self.refresh_running -= 1
        for bank in range(len(self.idle)):
            self._wake(bank, env.now)

    def queue_refreshes(self, b: int, ch: np.ndarray, service: np.ndarray, current: np.ndarray,
                        lines: np.ndarray, now: float) -> None:
        """Queue refresh operations (read, reprogram) of ``lines`` at bank ``b``; wake it."""
        fq = self.fq[b]
        # Same item layout as a write (see _prepare); no pause points, no
        # energy (the refresh agent counts it).
        for c_, s_, cur, ph in zip(ch.tolist(), service.tolist(), current.tolist(), lines.tolist()):
            fq.append((None, (REFRESH, c_, s_, False, cur, 0.0, 0, 0, 0.0, 0, ph)))
        self._wake(b, now)

    def _wake(self, b: int, at: float) -> None:
        """Wake bank ``b`` at time ``at`` if it sleeps with nothing to do."""
        ev = self.idle[b]
        if ev is not None:
            self.idle[b] = None
            ev.at(max(0.0, at - self.env.now))

    def _chunks(self) -> Iterator[_Prepared]:
        base = 0
        for chunk in self.source:
            prep = self._prepare(chunk)
            prep.base = base
            base += prep.op.size
            self.prepared.append(prep)
            yield prep

    def _admit(self, b: int) -> None:
        """Move bank ``b``'s inbox entries that have arrived into its queues."""
        ib, now = self.inbox[b], self.env.now
        rq, wq = self.rq[b], self.wq[b]
        while ib and ib[0][0] <= now:
            _, is_read, _, pi = ib.popleft()
            if is_read:
                self.rpend[b] -= 1
            else:
                self.wpend[b] -= 1
            if self.policy.active:
                self._enqueue(b, is_read, pi)
            elif is_read:
                rq.append(pi)
            else:
                wq.append(pi)

    def _enqueue(self, b: int, is_read: bool, entry) -> None:
        """Queue an arrived request under the queue policies (see :mod:`memsim.engine.sched`)."""
        pol = self.policy
        if is_read:
            if pol.forwards(b, entry):
                prep, item = entry
                self._answer(prep, item[0], prep.arrival[item[0]] + pol.forward_ns)
            else:
                self.rq[b].append(entry)
            return
        old = pol.coalesce_into(b, entry, self.wq[b], not self.cost_at_service)
        if old is not None:
            o_prep, o_idx = old[0], old[1][0]
            # The replaced write programs no cells: take back what the write path counted.
            f = o_prep.front
            self.path.line_writes[f[1][o_idx]] -= 1
            if not self.path.defer_user_wear:
                self.path.ledger.add("user", f[1][o_idx], -(f[2][o_idx] + f[3][o_idx]))
            prep, item = entry
            self._answer(o_prep, o_idx, prep.arrival[item[0]])

    def _answer(self, prep, idx: int, finish: float) -> None:
        """Complete a request without a bank access (forwarded or replaced) at ``finish``."""
        prep.finish[idx] = finish
        prep.lat[idx] = finish - prep.arrival[idx]
        self.done.append(prep.base + idx)
        self.in_flight -= 1
        if self.slot is not None:
            ev, self.slot = self.slot, None
            ev.succeed()

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
        idle = self.idle
        for prep in self._chunks():
            arrival = prep.arrival
            if not closed:
                # Open loop: every request of the chunk is in flight from its
                # arrival on; counting them at once is enough for the refresh
                # scans, which only ask whether any is left.
                self.in_flight += prep.users
            for entry in prep.entries:
                t, is_read, b, pi = entry
                if closed:
                    item = pi[1]
                    if is_read or item[0] >= 0:
                        while self.in_flight >= limit:
                            self.slot = env.event()
                            # Banks holding writes back (idle_writes off)
                            # must serve them now, or nothing completes.
                            for bank in range(len(idle)):
                                self._wake(bank, env.now)
                            yield self.slot
                        arrival[item[0]] = env.now
                        self.in_flight += 1
                    t = env.now
                    entry = (t, is_read, b, pi)
                    if not is_read and self.closed_refresh:
                        self.agent.note_writes(np.array([t]), np.array([item[10]]))
                if is_read:
                    q, cap, pend = rq[b], rcap, rpend
                else:
                    q, cap, pend = wq[b], wcap, wpend
                if len(q) + pend[b] < cap:
                    inbox[b].append(entry)
                    pend[b] += 1
                    if idle[b] is not None:
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
                if self.policy.active:
                    self._enqueue(b, is_read, pi)
                else:
                    q.append(pi)
                self._wake(b, env.now)
        self.source_done = True
        for b in range(len(self.idle)):
            self._wake(b, env.now)

    def _bank(self, b: int):
        env = self.env
        rq, wq, ib, fq, hq = self.rq[b], self.wq[b], self.inbox[b], self.fq[b], self.hq[b]
        rpend, wpend, space = self.rpend, self.wpend, self.space
        scrub = self.agent.on_read if (self.agent is not None and self.plan.policy == "scrub") else None
        tot = self.totals
        extended = self.extended
        erase = self.erase
        c = self.cfg.controller
        high, low, idle_writes = c.drain_high, c.drain_low, c.idle_writes
        burst = self.cfg.array.burst_ns
        read_ns, hit_ns = self.cell.read_ns, self.cfg.array.row_hit_ns
        bus_free = self.bus_free
        busy = self.totals.bank_busy_ns
        timeout = env.timeout
        draining = False
        open_row = -1
        streak = 0          # refreshes served in a row while reads waited
        policy = self.policy if self.policy.active else None
        while True:
            now = env._now
            # Admit what has arrived (inlined: this loop is the hot path).
            if policy is not None:
                self._admit(b)
            while ib and ib[0][0] <= now:
                _, is_read, _, pi = ib.popleft()
                if is_read:
                    rq.append(pi)
                    rpend[b] -= 1
                else:
                    wq.append(pi)
                    wpend[b] -= 1
            if draining and len(wq) <= low:
                draining = False
            if not draining and len(wq) >= high:
                draining = True
            if fq and not draining and (not rq or (len(fq) >= URGENT and streak < URGENT)):
                # Refresh when no read waits, or when refreshes pile up; at
                # most URGENT of them in a row while reads wait.
                prep, item = fq.popleft()
                streak = streak + 1 if rq else 0
                if extended:
                    yield from self._write(b, prep, item, False, True)
                    continue
                dur = item[2]
                idx = item[0]
                tot.refresh_busy_ns += dur
            elif draining or (wq and not rq and (idle_writes or self.slot is not None
                                                 or (self.source_done and not ib))):
                if policy is None:
                    prep, item = wq.popleft()
                else:
                    (prep, item), open_row = policy.pick(b, wq, open_row, True)
                if extended:
                    if space[b] is not None:
                        sp, space[b] = space[b], None
                        sp.succeed()
                    yield from self._write(b, prep, item, draining, False)
                    continue
                idx, ch, service, uses_bus = item
                if uses_bus:
                    start = bus_free[ch] if bus_free[ch] > now else now
                    bus_free[ch] = start + burst
                    dur = start + burst - now + service
                else:
                    dur = service
            elif rq:
                if policy is None:
                    prep, (idx, ch, row, phys) = rq.popleft()
                else:
                    (prep, (idx, ch, row, phys)), _ = policy.pick(b, rq, open_row, False)
                streak = 0
                if scrub is not None:
                    scrub(b, phys, now)
                start = now + (hit_ns if (row >= 0 and row == open_row) else read_ns)
                open_row = row
                if bus_free[ch] > start:
                    start = bus_free[ch]
                bus_free[ch] = start + burst
                dur = start + burst - now
            elif hq and hq[0][0] <= now:
                # Idle with a hint in hand: pre-program its line.
                yield from self._write(b, None, hq.popleft()[1], False, False)
                continue
            elif ib or hq:
                # Idle until the next arrival: clean erase blocks meanwhile.
                if erase is not None and erase.wants_idle_clean(b):
                    yield from erase.clean(b, yield_to_reads=True)
                    continue
                if ib and (not hq or ib[0][0] <= hq[0][0]):
                    # The source hands requests over in time order: nothing
                    # can arrive before the inbox head.
                    yield timeout(ib[0][0] - now)
                else:
                    # Next is a hint, but a request may still be handed over
                    # for an earlier time: sleep until either.
                    ev = self.idle[b] = _Wake(env)
                    yield env.any_of([ev, timeout(hq[0][0] - now)])
                    self.idle[b] = None
                continue
            else:
                if erase is not None and erase.wants_idle_clean(b):
                    yield from erase.clean(b, yield_to_reads=True)
                    continue
                if self.source_done and not wq and not fq and not self.refresh_running:
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
                self.done.append(prep.base + idx)
                self.in_flight -= 1
                if self.slot is not None:
                    ev, self.slot = self.slot, None
                    ev.succeed()

    def _queue_hints(self, hints: Chunk) -> None:
        """Hand write hints to their banks: each becomes a pre-programming
        item (read the line, SET its 0 cells) served when the bank is idle
        (:func:`memsim.engine.ops.preset_costs`)."""
        phys, ch, bank, service, cur, pj, n_set = preset_costs(self, hints)
        hq = self.hq
        for t, b, c_, s_, cu, e, n, p_ in zip(hints.time_ns.tolist(), bank.tolist(), ch.tolist(),
                                              service.tolist(), cur.tolist(), pj.tolist(),
                                              n_set.tolist(), phys.tolist()):
            hq[b].append((t, (PRESET, c_, s_, False, cu, 0.0, 0, 0, e, n, p_)))
            # Wake an idle bank now (not at the hint's time: a request for an
            # earlier time may still come) so it plans its sleep again.
            self._wake(b, self.env.now)

    # ---------------------------------------- the interface agents run on
    @property
    def now(self) -> float:
        """Simulated time, ns."""
        return self.env.now

    def current_limit(self, b: int) -> float | None:
        """Capacity of the current pool bank ``b`` draws from, uA (None: no budget)."""
        return self.pools[self._pool_of(b)].capacity if self.pools else None

    def _pool_of(self, b: int) -> int:
        # Global bank index = channel * banks + bank.
        return b // self.cfg.array.banks if len(self.pools) > 1 else 0

    def take_current(self, b: int, need: float):
        """Event: ``need`` uA of bank ``b``'s pool are held (yield it)."""
        return self.pools[self._pool_of(b)].get(need)

    def give_current(self, b: int, need: float):
        """Event: ``need`` uA given back to bank ``b``'s pool (yield it)."""
        return self.pools[self._pool_of(b)].put(need)

    def hold(self, dt: float):
        """Event: ``dt`` ns have passed (yield it)."""
        return self.env.timeout(dt)

    def add_bank_busy(self, b: int, dt: float) -> None:
        self.totals.bank_busy_ns[b] += dt

    def add_power_wait(self, dt: float) -> None:
        self.totals.power_wait_ns += dt

    def next_read(self, b: int, now: float, end: float) -> float | None:
        """Arrival time of the first read that reaches bank ``b`` before ``end``."""
        return self._next_read(b, now, end)

    def _next_read(self, b: int, now: float, end: float) -> float | None:
        """Arrival time of the first read that reaches bank ``b`` before ``end``."""
        if self.rq[b]:
            return now
        for t, is_read, _, _ in self.inbox[b]:
            if t >= end:
                return None
            if is_read:
                return t
        return None

    def _write(self, b: int, prep, item: tuple, draining: bool, refresh: bool):
        """One write, move or refresh with power budget, cancellation and pausing.

        Cancellation (Qureshi, Franceschini and Lastras-Montano, HPCA 2010):
        outside a drain, a user write is aborted when a read arrives at the
        bank before it has done ``cancel_before`` of its programming; it goes
        back to the head of the write queue and restarts (its data crosses
        the bus again); the work done is wasted and counted in energy and
        wear.  Pausing (same paper): the write stops at the first programming
        round boundary after the read arrives and the rest is re-queued at
        the head of the queue; nothing is wasted.  With a power budget, the
        write first waits until its peak current is free in the shared pool.
        """
        env, tot, c, cell = self.env, self.totals, self.cfg.controller, self.cell
        idx, ch, service, uses_bus, cur, pre, rr, sr, pj, cells, phys = item[:11]
        if len(item) > 11:
            # The bank decides the write's cost now: out of place into an
            # initialized line (block erase) or into a line pre-programmed
            # from a hint is the fast form, anything else the in-place one.
            if self.erase is not None:
                phys, fast = yield from self.erase.prepare_write(b, item[10])
            else:
                fast = self.preset.pop(phys, False)
                tot.hint_hits += fast
            o_ns, o_set, o_reset, i_set, i_reset = item[11]
            if fast:
                service, pre, n_set, n_reset = o_ns, 0.0, o_set, o_reset
            else:
                n_set, n_reset = i_set, i_reset
            tot.set_cells += n_set
            tot.reset_cells += n_reset
            tot.user_set_cells += n_set
            tot.user_reset_cells += n_reset
            self.path.ledger.add("user", phys if self.erase is None else self.erase.base[b] + phys, n_set + n_reset)
            per_reset, per_set = cell.cells_per_round(self.round_budget_ua)
            cur = max(min(n_reset, per_reset) * cell.reset_ua, min(n_set, per_set) * cell.set_ua)
            rr = sr = 0            # no cancellation or pausing of these writes
        if pre > 0 and idx >= 0 and self.cost_at_service:
            tot.read_bits += self.line_bits + self.path.scheme.flag_cells
        t0 = env.now
        pool = self.pools[ch if len(self.pools) > 1 else 0] if self.pools else None
        need = min(cur, pool.capacity) if pool is not None else 0.0
        if need > 0:
            # Wait only when the current is not free now: a budget that never
            # binds must not move the write behind other events of this time.
            got = pool.get(need)
            if not got.triggered:
                yield got
                tot.power_wait_ns += env.now - t0
        now = env.now
        lead = 0.0
        if uses_bus:
            bus_free = self.bus_free
            start = bus_free[ch] if bus_free[ch] > now else now
            bus_free[ch] = start + self.cfg.array.burst_ns
            lead = bus_free[ch] - now
        prog_start = now + lead + pre
        end = now + lead + service
        # The same sum as the plain bank loop (bus lead + service), so that
        # switching on a feature that does not act changes no number.
        dur, again = lead + service, None
        if idx >= 0 and not draining and (c.write_cancel or c.write_pause) and len(item) <= 11:
            t_r = self._next_read(b, now, end)
            if t_r is not None:
                span = end - prog_start
                if c.write_cancel and t_r < prog_start + c.cancel_before * span:
                    stop = max(t_r, now)      # a read that came while we waited for current
                    dur = stop - now
                    done = max(0.0, stop - prog_start) / span if span > 0 else 0.0
                    tot.cancellations += 1
                    tot.cancelled_pj += done * pj
                    wasted = int(round(done * cells))
                    tot.cancelled_cells += wasted
                    self.path.ledger.add("cancelled", phys, wasted)
                    again = (idx, ch, service, True, cur, pre, rr, sr, pj, cells, phys)
                elif c.write_pause and rr + sr > 0 and t_r > prog_start:
                    e = t_r - prog_start
                    rns, sns = cell.reset_ns, cell.set_ns
                    if e < rr * rns:
                        k = -(-e // rns)
                        boundary, left = k * rns, (rr - int(k), sr)
                    else:
                        j = -(-(e - rr * rns) // sns)
                        boundary, left = rr * rns + j * sns, (0, sr - int(j))
                    if left[0] + left[1] > 0:
                        dur = prog_start + boundary - now
                        tot.pauses += 1
                        rest = left[0] * rns + left[1] * sns
                        again = (idx, ch, rest, False, cur, 0.0, left[0], left[1], 0.0, 0, phys)
        self.totals.bank_busy_ns[b] += (now - t0) + dur
        if refresh:
            tot.refresh_busy_ns += dur
        yield env.timeout(dur)
        if need > 0:
            pool.put(need)      # never waits: only what was taken comes back
        if again is not None:
            entry = (prep, again)
            self.wq[b].appendleft(entry)
            if self.policy.fr_fcfs:
                self.policy.resumed.add(id(entry))
        elif idx == PRESET:
            self.preset[phys] = True
            tot.presets += 1
            tot.preset_pj += pj
            tot.preset_cells += cells
            self.path.line_writes[phys] += 1
            self.path.ledger.add("preset", phys, cells)
        elif idx >= 0:
            done_t = env.now
            prep.finish[idx] = done_t
            prep.lat[idx] = done_t - prep.arrival[idx]
            self.done.append(prep.base + idx)
            self.in_flight -= 1
            if self.slot is not None:
                ev, self.slot = self.slot, None
                ev.succeed()

    def policy_counts(self) -> dict:
        """The queue policies' counters (see :func:`memsim.engine.sched.settle`)."""
        pol = self.policy
        return {"row_hits": pol.row_hits, "write_row_hits": pol.write_row_hits,
                "requests_passed": pol.requests_passed, "max_times_passed": pol.max_times_passed,
                "coalesced": pol.coalesced, "forwarded": pol.forwarded,
                "a_set": pol.a_set, "a_reset": pol.a_reset, "a_pj": pol.a_pj, "a_pre": int(pol.a_pre)}

    def refresh_cost(self, lines: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(service ns, energy pJ, cells programmed, current uA) of refreshing ``lines``.

        A refresh reads the line and reprograms its drifting cells: the RESET
        (amorphous) cells of an SLC line, every cell above the lowest level
        of a multi-level line.  Wear is counted on the write path's lines.
        """
        cell, path = self.cell, self.path
        stored = path.stored[lines]
        read_pj = (self.line_bits + path.scheme.flag_cells) * cell.read_pj
        budget = self.round_budget_ua
        if path.mlc is not None:
            # Keyed apart from the writes' keys (high bit set), in refresh order.
            keys = REFRESH_KEYS + self.refreshes_costed + np.arange(len(lines))
            self.refreshes_costed += len(lines)
            cost = path.mlc.cost(np.zeros_like(stored), stored, keys=keys)
            program, energy, cells = cost.program_ns, cost.energy_pj, cost.pulses
            current = np.minimum(cost.cells, max(1, int(budget // cell.reset_ua))) * cell.reset_ua
        else:
            n_reset = self.line_bits - popcount_rows(stored)
            program = cell.program_ns(np.zeros_like(n_reset), n_reset, budget)
            energy = n_reset * cell.reset_pj
            cells = n_reset
            current = np.minimum(n_reset, cell.cells_per_round(budget)[0]) * cell.reset_ua
            if path.cell_profile is not None:
                add_profile(path.cell_profile, ~stored)
        np.add.at(path.line_writes, lines, 1)
        path.ledger.add("refresh", lines if self.erase is None else self.erase.where(lines), cells)
        return program + cell.read_ns, energy + read_pj, cells, current

    def _finish(self) -> TimingTotals:
        tot = self.totals
        if self.prepared:
            tot.latency_ns = np.concatenate([np.asarray(p.lat, float) for p in self.prepared])
            tot.op = np.concatenate([p.op for p in self.prepared])
            tot.finish_ns = np.concatenate([np.asarray(p.finish, float) for p in self.prepared])
            tot.arrival_ns = np.concatenate([np.asarray(p.arrival, float) for p in self.prepared])
        tot.simulated_ns = float(np.nanmax(tot.finish_ns)) if tot.finish_ns.size else 0.0
        order = np.asarray(self.done, np.int64)
        tot.stream.add(tot.op[order], tot.arrival_ns[order], tot.finish_ns[order])
        tot.bank_busy_ns = np.asarray(tot.bank_busy_ns, dtype=float)
        return self._close_totals(tot)

    def _close_totals(self, tot: TimingTotals) -> TimingTotals:
        """The steps both engines end with: queue-policy counts, energy, agents' totals."""
        if self.policy.active:
            settle(self, tot, self.policy_counts())
        price_energy(tot, self.cell)
        if self.agent is not None:
            self.agent.finish(tot.simulated_ns)
            tot.refresh_pj = self.agent.energy_pj
        if self.erase is not None:
            tot.erase_pj = self.erase.energy_pj
        return tot
