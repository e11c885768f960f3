"""Block erase-ahead ("block reset") inside the timing engine.

Each bank keeps its own :class:`~memsim.policy.erase.BlockPool` over the
logical lines that map to it.  A user write is placed out of place into a
line of a block that was bulk-initialized to ``erase.init_state``, so it
programs only the cells whose bit differs from that state, with the one pulse
that state calls for (all-SET blocks: RESET pulses only; all-RESET blocks:
SET pulses only), and needs no pre-read.  When no initialized line is free
the write falls back to an in-place data-comparison write, or waits while
the bank cleans (``erase.fallback``).

Cleaning: the bank picks a victim block (greedy, cost-benefit or FIFO),
moves its live lines out of place (a read plus an out-of-place program each)
and bulk-initializes the block: every cell of the block is driven to the
initial state, as many cells per round as the current budget allows.  The
bank cleans in idle time while fewer than ``erase.idle_blocks`` blocks are
free, and in the foreground when the pool falls below ``low_watermark``.
Cleaning competes with user requests for the bank and the current budget and
counts in energy (``energy_erase_pj``) and wear.

The agent runs in either timing engine through a narrow interface: its
sub-processes yield what the engine's ``take_current``, ``hold`` and
``give_current`` return, and read the engine's ``now``, ``current_limit``,
``next_read``, ``add_bank_busy`` and ``add_power_wait``.
"""
from __future__ import annotations

import numpy as np

from memsim.policy.erase import IN_PLACE, OUT_OF_PLACE, WAIT, BlockPool
from memsim.policy.ledger import WearLedger
from memsim.policy.write.bits import popcount_rows


class EraseAgent:
    def __init__(self, engine) -> None:
        self.engine = engine
        cfg = engine.cfg
        e = cfg.erase
        n = cfg.footprint
        _, bank, _ = engine.amap.locate(np.arange(n))
        nb = engine.amap.total_banks
        self.local = np.zeros(n, dtype=np.int64)
        self.members: list[np.ndarray] = []
        self.pools: list[BlockPool] = []
        for b in range(nb):
            m = np.flatnonzero(bank == b)
            self.local[m] = np.arange(m.size)
            self.members.append(m)
            self.pools.append(BlockPool(max(1, m.size), e.block_lines, e.spare_fraction, e.init_state,
                                        e.victim, e.low_watermark, e.fallback))
        self.init_bit = self.pools[0].init_bit
        self.idle_blocks = e.idle_blocks
        cell, budget = engine.cell, engine.round_budget_ua
        self.bits = cfg.array.line_bytes * 8
        # Bulk initialization: every cell of the block, budget-limited rounds.
        if self.init_bit == 1:
            per, pulse_ns, pulse_pj, ua = cell.cells_per_round(budget)[1], cell.set_ns, cell.set_pj, cell.set_ua
        else:
            per, pulse_ns, pulse_pj, ua = cell.cells_per_round(budget)[0], cell.reset_ns, cell.reset_pj, \
                cell.reset_ua
        cells = e.block_lines * self.bits
        self.erase_ns = -(-cells // per) * pulse_ns
        self.erase_pj = cells * pulse_pj
        self.erase_ua = min(per, cells) * ua
        self.line_writes = [np.zeros(p.n_physical, dtype=np.int64) for p in self.pools]
        # The ledger's lines are the pools' physical lines, bank after bank.
        self.base = np.cumsum([0] + [p.n_physical for p in self.pools])[:-1].tolist()
        engine.path.ledger = WearLedger(sum(p.n_physical for p in self.pools))
        self.erases = 0
        self.jobs: list[dict | None] = [None] * nb     # cleaning job in progress per bank
        self.energy_pj = 0.0
        self.cleaner_ns = 0.0
        self.move_writes = 0
        self.move_cells = 0

    # --------------------------------------------------------------- costs
    def oop_cost(self, content: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(SET cells, RESET cells) of writing ``content`` into initialized lines."""
        return self.oop_cost_from_ones(popcount_rows(content))

    def oop_cost_from_ones(self, ones: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The same from the number of 1 bits of each line."""
        if self.init_bit == 1:
            return np.zeros_like(ones), self.bits - ones
        return ones, np.zeros_like(ones)

    def place(self, b: int, logical: int) -> tuple[int, int]:
        pool = self.pools[b]
        phys, mode = pool.place(int(self.local[logical]))
        if mode != WAIT:
            self.line_writes[b][phys] += 1
        return phys, mode

    def where(self, logical: np.ndarray) -> np.ndarray:
        """Ledger line (pool physical line, bank after bank) now holding each logical line."""
        logical = np.asarray(logical, dtype=np.int64)
        _, bank, _ = self.engine.amap.locate(logical)
        out = np.empty(logical.size, dtype=np.int64)
        for i, (lg, b) in enumerate(zip(logical.tolist(), bank.tolist())):
            out[i] = self.base[b] + self.pools[b]._l2p[int(self.local[lg])]
        return out

    def prepare_write(self, b: int, logical: int):
        """Sub-process: find a line for a user write of ``logical`` in bank ``b``.

        Cleans first when the pool is low, and while the fallback makes the
        write wait.  Returns (pool line, whether it is out of place).
        """
        while self.pools[b].need_erase():       # clean first if the pool is low
            if not (yield from self.clean(b)):
                break
        while True:
            # With block erase the leveler is "none": the write path's line
            # is the logical line; the pool places it.
            phys, mode = self.place(b, logical)
            if mode != WAIT:
                return phys, mode == OUT_OF_PLACE
            if not (yield from self.clean(b)):
                raise RuntimeError("block erase: no initialized line and nothing to clean")

    # ------------------------------------------------------------ cleaning
    def wants_idle_clean(self, b: int) -> bool:
        pool = self.pools[b]
        if self.jobs[b] is not None:
            return True
        if pool.free_blocks >= self.idle_blocks:
            return False
        # Only if the victim's live lines fit now; otherwise clean() would
        # refuse and the bank would spin without time passing.
        return pool.can_clean()

    def clean(self, b: int, yield_to_reads: bool = False):
        """Simpy sub-process: clean bank ``b`` (moves, then bulk init).

        The job runs in steps: one step per moved line and one per line of
        the block's bulk initialization.  With ``yield_to_reads`` (idle-time
        cleaning) the bank stops after the step during which a read arrived
        and resumes the job later; foreground cleaning runs to the end.
        Returns False when there was nothing to clean.
        """
        eng = self.engine
        job = self.jobs[b]
        if job is None:
            job = self.jobs[b] = self._start(b)
            if job is None:
                return False
        steps = job["steps"]
        t0 = eng.now
        limit = eng.current_limit(b)
        need = min(self.erase_ua, limit) if limit is not None else 0.0
        if need > 0:
            yield eng.take_current(b, need)
            eng.add_power_wait(eng.now - t0)
        start = eng.now
        t = start
        k = job["next"]
        while k < len(steps):
            t += steps[k]
            k += 1
            if yield_to_reads and eng.next_read(b, start, t) is not None:
                break
        job["next"] = k
        eng.add_bank_busy(b, t - t0)
        yield eng.hold(t - start)
        if need > 0:
            yield eng.give_current(b, need)
        self.cleaner_ns += eng.now - t0
        if k == len(steps):
            self._finish(b, job)
        return True

    def _start(self, b: int) -> dict | None:
        """Pick and map a victim now; return its step durations."""
        eng, cell = self.engine, self.engine.cell
        pool = self.pools[b]
        job = pool.clean()
        if job is None:
            return None
        steps: list[float] = []
        if job.src:
            p2l = pool.p2l
            logical = self.members[b][[p2l[d] for d in job.dst]]
            n_set, n_reset = self.oop_cost(eng.path.stored[logical])
            program = cell.program_ns(n_set, n_reset, eng.round_budget_ua)
            steps += (program + cell.read_ns).tolist()
            self.energy_pj += (float(cell.program_pj(n_set, n_reset).sum())
                               + len(job.src) * self.bits * cell.read_pj)
            self.move_writes += len(job.src)
            self.move_cells += int((n_set + n_reset).sum())
            np.add.at(self.line_writes[b], np.asarray(job.dst), 1)
            eng.path.ledger.add("erase", self.base[b] + np.asarray(job.dst), n_set + n_reset)
        B = pool.block_lines
        steps += [self.erase_ns / B] * B
        return {"block": job.block, "steps": steps, "next": 0}

    def _finish(self, b: int, job: dict) -> None:
        pool = self.pools[b]
        B = pool.block_lines
        blk = job["block"]
        self.line_writes[b][blk * B:(blk + 1) * B] += 1       # bulk init wears every line
        self.engine.path.ledger.add("erase", self.base[b] + np.arange(blk * B, (blk + 1) * B), self.bits)
        pool.mark_initialized(blk)
        self.jobs[b] = None
        self.erases += 1
        self.energy_pj += self.erase_pj

    # ------------------------------------------------------------- summary
    def summary(self) -> dict:
        pools = self.pools
        user = sum(p.user_writes for p in pools)
        moves = sum(p.move_writes for p in pools)
        counts = np.concatenate([p.erase_count for p in pools])
        wear = np.concatenate(self.line_writes).astype(float)
        return {
            "write_amplification": (user + moves) / user if user else float("nan"),
            "erases": self.erases,
            "erases_per_block_mean": float(counts.mean()),
            "erases_per_block_max": int(counts.max()),
            "energy_erase_pj": self.energy_pj,
            "cleaner_ns": self.cleaner_ns,
            "cleaner_moves": self.move_writes,
            "fallbacks_in_place": sum(p.fallbacks_in_place for p in pools),
            "fallback_waits": sum(p.waits for p in pools),
            "erase_wear_max_over_mean": float(wear.max() / wear.mean()) if wear.mean() > 0 else 0.0,
        }


__all__ = ["IN_PLACE", "OUT_OF_PLACE", "WAIT", "EraseAgent"]
