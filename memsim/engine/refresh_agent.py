"""Refresh inside the timing engine: line ages, scans, scrub-on-read.

The agent talks to the engine through ``queue_refreshes`` and
``refresh_cost``; the engine runs the scans and calls :meth:`RefreshAgent.scan_once`.
The agent tracks, per physical line, the simulated time of its last write or
refresh.  Writes are known ahead of simulated time (chunks are prepared in
advance), so they are queued and applied when simulated time reaches them.
Periodic and drift-triggered policies scan each bank every ``scan_ns`` and
queue a refresh (read, then reprogram the drifting cells) for every line that
is due; the bank serves refreshes when no read waits, or before reads once
``URGENT`` of them are waiting.  Scrub-on-read samples the errors a read sees
from the line's raw bit error rate and rewrites the line above a threshold.

Uncorrectable lines are counted as an expectation: every time a line's data
ends its life (rewritten, refreshed, or at the end of the run) the
probability that it was uncorrectable at that age is added.
"""
from __future__ import annotations

from collections import deque

import numpy as np

from memsim.policy.refresh import RefreshPlan

URGENT = 8          # waiting refreshes that take precedence over reads
REFRESH = -2        # queue-item index marking a refresh operation


class RefreshAgent:
    def __init__(self, engine, plan: RefreshPlan, rng: np.random.Generator) -> None:
        self.engine = engine
        self.plan = plan
        self.rng = rng
        path = engine.path
        n = path.n_physical
        self.last = np.zeros(n)
        self.next_due = np.full(n, np.inf)
        if plan.active:
            # Steady state: line ages at the start are spread evenly over one
            # interval; a fresh device starts with every line just written.
            start = (rng.uniform(0.0, plan.threshold_ns, n) if plan.start == "spread"
                     else np.zeros(n))
            self.last = -start
            if plan.policy == "periodic":
                self.next_due = plan.threshold_ns - start
        ch, bank, _ = engine.amap.locate(np.arange(n))
        self.channel = ch
        order = np.argsort(bank, kind="stable")
        splits = np.searchsorted(bank[order], np.arange(engine.amap.total_banks + 1))
        self.lines_by_bank = [order[splits[b]:splits[b + 1]] for b in range(engine.amap.total_banks)]
        self.pending: deque[tuple[np.ndarray, np.ndarray]] = deque()
        self.expected_fail = 0.0
        self.refreshes = 0
        self.per_line = np.zeros(n, dtype=np.int64)     # refreshes of each physical line
        self.rber_sum = 0.0
        self.energy_pj = 0.0
        self.cells = 0

    # ----------------------------------------------------------- line ages
    def note_writes(self, t: np.ndarray, phys: np.ndarray) -> None:
        """Writes of a prepared chunk (arrival times, non-decreasing)."""
        if t.size:
            self.pending.append((np.asarray(t, float), np.asarray(phys, np.int64)))

    def catch_up(self, now: float) -> None:
        """Apply every queued write whose time has come."""
        while self.pending and self.pending[0][0][0] <= now:
            t, p = self.pending[0]
            k = int(np.searchsorted(t, now, side="right"))
            if k < t.size:
                self.pending[0] = (t[k:], p[k:])
            else:
                self.pending.popleft()
            self._apply(t[:k], p[:k])

    def _apply(self, t: np.ndarray, p: np.ndarray) -> None:
        order = np.lexsort((t, p))
        ts, ps = t[order], p[order]
        first = np.r_[True, ps[1:] != ps[:-1]]
        prev = np.where(first, self.last[ps], np.r_[0.0, ts[:-1]])
        self._retire(ts - prev)
        last_of_line = np.r_[ps[1:] != ps[:-1], True]
        self.last[ps[last_of_line]] = ts[last_of_line]

    def _retire(self, sim_age_ns: np.ndarray) -> None:
        if sim_age_ns.size:
            self.expected_fail += float(self.plan.p_fail(self.plan.device_age_s(sim_age_ns)).sum())

    def finish(self, now: float) -> None:
        self.catch_up(np.inf)
        self._retire(np.maximum(now - self.last, 0.0))

    # ------------------------------------------------------------- refresh
    def _queue_refresh(self, b: int, lines: np.ndarray, now: float) -> None:
        eng, plan = self.engine, self.plan
        ages = now - self.last[lines]
        self._retire(ages)
        self.rber_sum += float(plan.rber(plan.device_age_s(ages)).sum())
        self.last[lines] = now
        service, energy, cells, current = eng.refresh_cost(lines)
        self.refreshes += lines.size
        np.add.at(self.per_line, lines, 1)
        self.energy_pj += float(energy.sum())
        self.cells += int(cells.sum())
        # Energy is counted here; the engine queues the operations and wakes the bank.
        eng.queue_refreshes(b, self.channel[lines], service, current, lines, now)

    def scan_once(self, b: int, now: float) -> None:
        """One scan of bank ``b`` at ``now``: queue a refresh for every line due."""
        plan = self.plan
        lines = self.lines_by_bank[b]
        self.catch_up(now)
        if plan.policy == "drift":
            due = lines[self.last[lines] + plan.threshold_ns <= now]
        else:
            due = lines[self.next_due[lines] <= now]
            self.next_due[due] += plan.threshold_ns
        if due.size:
            self._queue_refresh(b, due, now)

    def on_read(self, b: int, phys: int, now: float) -> None:
        """Scrub-on-read: rewrite the line when the read sees too many errors."""
        self.catch_up(now)
        plan = self.plan
        rber = float(plan.rber(plan.device_age_s(now - self.last[phys])))
        if rber > 0 and self.rng.binomial(plan.bits_per_line, rber) > plan.scrub_errors:
            self._queue_refresh(b, np.array([phys]), now)
