"""Controller queue policies (reference engine): FR-FCFS, write coalescing, read forwarding.

Scheduling (``controller.scheduler``).  ``fcfs`` serves each of a bank's
two queues (reads, writes) oldest first.  ``fr_fcfs`` (first-ready FCFS,
Rixner, Dally, Kapasi, Mattson and Owens, "Memory Access Scheduling", ISCA
2000) serves the oldest request to the bank's open row first, then the
oldest.  So that nothing starves, a request that younger requests have
passed ``controller.row_hit_cap`` times is served next: the rule is "the
oldest request that hits the open row or has reached the cap, else the
oldest", which guarantees that no request is passed more than the cap.  A
write that was cancelled or paused goes back to the head of its queue and
resumes first, so writes to one line keep their order (the write path has
already applied them in that order).
The reads-first rule and write drains between the two queues are as with
fcfs; the cap counts passes inside one queue.

Row buffer.  Under fcfs only reads use the row buffer (and
:mod:`memsim.engine.rows` counts their hits from the stream).  Under
fr_fcfs a user write also opens its row (its data go through the row
buffer), so a read after it hits; a write to the open row counts as a write
row hit.  A write's time does not depend on the row buffer (its programming
dominates; a pre-reading scheme's pre-read is still priced as an array
read), and leveler moves, refreshes and pre-programming leave the row
buffer as it is.  Hits are counted where the bank serves the request.

Coalescing (``controller.coalesce_writes``).  When a user write reaches its
bank's write queue and an earlier user write to the same physical line
waits there, not yet started, the earlier one is taken out of the queue:
it completes at that moment (the new write's arrival; for its latency it
is done, its data superseded), programs no cells (its cells, energy and
pre-read are taken back from the totals and the wear ledger), and the new
write joins the tail of the queue.  A write that was started (then
cancelled or paused) is never replaced.  The write path runs ahead of
simulated time, so the new write's cells were counted against the
replaced write's data: exact for full-line writes, an approximation for
differential schemes; the per-cell wear profile keeps the replaced
write's cells.

Forwarding (``controller.forward_reads``).  A read that reaches its bank
while a user write to the same line waits in the bank's write queue (not
started) is answered from the queue ``controller.forward_ns`` after its
arrival, without a bank access or an array read.  Both checks happen when
the bank admits the request, in arrival order, against the queue as it
stood at the request's arrival; a closed loop gets its slot back at that
moment.
"""
from __future__ import annotations

from collections import deque

import numpy as np


class QueuePolicy:
    """Per-bank queue order, coalescing and forwarding of one run (reference engine)."""

    def __init__(self, controller, n_banks: int) -> None:
        c = controller
        self.fr_fcfs = c.scheduler == "fr_fcfs"
        self.cap = c.row_hit_cap
        self.coalesce = c.coalesce_writes
        self.forward = c.forward_reads
        self.forward_ns = c.forward_ns
        self.active = self.fr_fcfs or self.coalesce or self.forward
        # Per bank: physical line -> queue entry of the newest user write that waits, not started.
        self.waiting = [{} for _ in range(n_banks)]
        self.passed: dict[int, int] = {}      # id(queue entry) -> times passed while waiting
        self.row_hits = 0
        self.write_row_hits = 0
        self.requests_passed = 0
        self.max_times_passed = 0
        self.coalesced = 0
        self.forwarded = 0
        self.resumed: set[int] = set()        # id(queue entry) of writes put back at the head
        # Cells, energy and pre-reads of replaced writes (summed in the kernel's order).
        self.a_set = self.a_reset = self.a_pre = 0
        self.a_pj = 0.0

    # ------------------------------------------------------------ rows
    def row(self, entry, writes: bool) -> int:
        prep, item = entry
        if not writes:
            return item[2]
        # Only under fr_fcfs do writes use the row buffer.
        return prep.front[0][item[0]] if item[0] >= 0 and self.fr_fcfs else -1

    def pick(self, b: int, q: deque, open_row: int, writes: bool):
        """The entry bank ``b`` serves next from ``q``, and the open row after it."""
        if not self.fr_fcfs:
            entry = q.popleft()
        else:
            k = 0
            # A write that went back to the head (cancelled or paused) resumes
            # first, so writes to one line keep their order.
            resumed = writes and id(q[0]) in self.resumed
            for i, e in enumerate(q if not resumed else ()):
                r = self.row(e, writes)
                if (r >= 0 and r == open_row) or self.passed.get(id(e), 0) >= self.cap:
                    k = i
                    break
            for i in range(k):
                key = id(q[i])
                self.passed[key] = self.passed.get(key, 0) + 1
            entry = q[k]
            del q[k]
            times = self.passed.pop(id(entry), 0)
            if times:
                self.requests_passed += 1
                self.max_times_passed = max(self.max_times_passed, times)
        # Counted here whenever a policy is on: forwarded reads never open a row,
        # so the stream alone (engine/rows.py) no longer decides the hits.
        r = self.row(entry, writes)
        if r >= 0 and r == open_row:
            if writes:
                self.write_row_hits += 1
            else:
                self.row_hits += 1
        if writes and r >= 0:
            open_row = r
        if writes:
            self._started(b, entry)
            self.resumed.discard(id(entry))
        return entry, open_row

    # ------------------------------------------------------------ admission
    def _line(self, entry, writes: bool) -> int:
        prep, item = entry
        return prep.front[1][item[0]] if writes else item[3]

    def _started(self, b: int, entry) -> None:
        prep, item = entry
        if item[0] >= 0:
            line = prep.front[1][item[0]]
            if self.waiting[b].get(line) is entry:
                del self.waiting[b][line]

    def forwards(self, b: int, entry) -> bool:
        """True if the read ``entry`` is answered from bank ``b``'s write queue."""
        if self.forward and self._line(entry, False) in self.waiting[b]:
            self.forwarded += 1
            return True
        return False

    def coalesce_into(self, b: int, entry, wq: deque, count_cost: bool):
        """Queue the write ``entry``; return the waiting write it replaces, if any."""
        prep, item = entry
        if item[0] < 0:
            wq.append(entry)
            return None
        line = prep.front[1][item[0]]
        old = self.waiting[b].get(line) if self.coalesce else None
        if old is not None:
            wq.remove(old)
            self.passed.pop(id(old), None)
            self.coalesced += 1
            if count_cost:
                o_prep, o_item = old
                f, i = o_prep.front, o_item[0]
                self.a_set += f[2][i]
                self.a_reset += f[3][i]
                self.a_pj += f[4][i]
                self.a_pre += f[5][i] > 0
        wq.append(entry)
        if self.coalesce or self.forward:
            self.waiting[b][line] = entry
        return old


def front_columns(ops) -> tuple[list, list, list, list, list, list]:
    """Per request of a chunk (local index): row, physical line, and a write's SET
    cells, RESET cells, programming pJ and pre-read ns (moves have no request)."""
    n = ops.op.size
    row = np.full(n, -1, np.int64)
    phys = np.full(n, -1, np.int64)
    n_set = np.zeros(n, np.int64)
    n_reset = np.zeros(n, np.int64)
    pj = np.zeros(n)
    pre = np.zeros(n)
    row[ops.r_idx], phys[ops.r_idx] = ops.r_row, ops.r_phys
    u = ops.w_req >= 0
    w = ops.w_req[u]
    row[w], phys[w] = ops.w_row[u], ops.w_phys[u]
    n_set[w], n_reset[w], pj[w], pre[w] = ops.n_set[u], ops.n_reset[u], ops.pj[u], ops.pre[u]
    return row.tolist(), phys.tolist(), n_set.tolist(), n_reset.tolist(), pj.tolist(), pre.tolist()


def settle(eng, tot, counts: dict) -> None:
    """Copy the policies' counters into the totals and take back what replaced
    writes and forwarded reads never did (both engines, at the end of a run)."""
    tot.row_hits += counts["row_hits"]
    tot.write_row_hits = counts["write_row_hits"]
    tot.requests_passed = counts["requests_passed"]
    tot.max_times_passed = counts["max_times_passed"]
    tot.writes_coalesced = counts["coalesced"]
    tot.reads_forwarded = counts["forwarded"]
    tot.read_bits -= counts["forwarded"] * eng.line_bits
    if eng.cost_at_service:
        return           # a replaced write was never served, so never counted
    a_set, a_reset = counts["a_set"], counts["a_reset"]
    tot.user_set_cells -= a_set
    tot.user_reset_cells -= a_reset
    if eng.path.mlc is None:
        tot.set_cells -= a_set
        tot.reset_cells -= a_reset
    else:
        tot.mlc_pj -= counts["a_pj"]
    tot.read_bits -= counts["a_pre"] * (eng.line_bits + eng.path.scheme.flag_cells)
