"""Op columns: one chunk of requests prepared for either timing engine.

Everything that does not depend on the order of service is computed here
for a whole chunk with numpy: the leveler's map, banks and rows, the write
path (stored content, bit counts, wear), programming times, current and the
energy known before service.  The reference engine turns the columns into
queue items; the compiled engine copies them into its slot table.

Reads come first in the per-op arrays, then writes (user writes and leveler
moves, in write-path order); ``order`` puts them in admission order (by
position in the chunk; a write's moves follow it).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit

from memsim.engine.rows import count_row_hits
from memsim.policy.write.bits import popcount_rows
from memsim.workload.chunk import HINT, READ, Chunk


@dataclass
class OpColumns:
    """One prepared chunk.

    Per request (chunk order, hints removed): ``op``, ``arrival``.
    Per read ``r_*``; per write ``w_*`` (``w_req`` is the request index of
    a user write, -1 for a move).  ``order`` indexes the concatenation
    reads + writes in admission order; ``t`` is the admission time of each
    op in that order.  ``alt`` holds, for writes whose cost the bank decides
    at service (block erase, hints), the fast form (ns, SET cells, RESET
    cells) and the in-place counts (SET cells, RESET cells).
    """

    op: np.ndarray
    arrival: np.ndarray
    users: int
    r_idx: np.ndarray
    r_ch: np.ndarray
    r_bank: np.ndarray
    r_row: np.ndarray
    r_phys: np.ndarray
    w_req: np.ndarray
    w_ch: np.ndarray
    w_bank: np.ndarray
    w_phys: np.ndarray
    service: np.ndarray
    uses_bus: np.ndarray
    current: np.ndarray
    pre: np.ndarray
    rr: np.ndarray
    sr: np.ndarray
    pj: np.ndarray
    cells: np.ndarray
    n_set: np.ndarray
    n_reset: np.ndarray
    order: np.ndarray
    t: np.ndarray
    alt: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
    w_row: np.ndarray | None = None      # row of each user write (-1 for a move)

    @property
    def n_reads(self) -> int:
        return int(self.r_idx.size)


def prepare_ops(eng, chunk: Chunk) -> OpColumns:
    """Vectorized work for a chunk: remap, bit counts, service times, energy.

    ``eng`` is the engine (either kind): its totals receive the counts and
    energy known before service, its write path is applied to the chunk's
    writes (exactly once per chunk, in stream order), and its refresh agent
    (if any) learns the write times of an open-loop stream.
    """
    tot, cell = eng.totals, eng.cell
    keep = chunk.op != HINT
    tot.hints += int((~keep).sum())
    if not keep.all():
        if eng.hint_mode:
            eng._queue_hints(chunk.take(~keep))
        chunk = chunk.take(keep)
    is_read = chunk.op == READ
    w_idx = np.flatnonzero(~is_read)
    tot.reads += int(is_read.sum())
    tot.writes += int(w_idx.size)

    # Reads see the map as it stands before this chunk's writes.
    r_idx = np.flatnonzero(is_read)
    r_phys = eng.path.leveler.lookup(chunk.line[r_idx])
    r_ch, r_bank, r_row = eng.amap.locate(r_phys)
    if not eng.policy.active:
        # From the stream; with a queue policy on, the engines count hits where they serve.
        tot.row_hits += count_row_hits(eng.open_rows, r_bank, r_row)
    tot.read_bits += r_idx.size * eng.line_bits

    wb = eng.path.apply(chunk.line[w_idx], None if chunk.data is None else chunk.data[w_idx])
    w_ch, w_bank, w_row = eng.amap.locate(wb.phys)
    moves = wb.user < 0
    budget = eng.round_budget_ua
    if wb.program_ns is not None:             # multi-level cells: program-and-verify
        program = wb.program_ns
        pj = wb.program_pj
        tot.mlc_pj += float(pj.sum())
        cells = wb.n_set + wb.n_reset
        per_round = max(1, int(budget // cell.reset_ua))
        current = np.minimum(cells, per_round) * cell.reset_ua
        rr = sr = np.zeros(cells.size, np.int64)           # no pause points inside
    else:
        program = cell.program_ns(wb.n_set, wb.n_reset, budget)
        pj = cell.program_pj(wb.n_set, wb.n_reset)
        if not eng.cost_at_service:  # block erase, hints: counted when the bank decides
            tot.set_cells += int(wb.n_set.sum())
            tot.reset_cells += int(wb.n_reset.sum())
        cells = wb.n_set + wb.n_reset
        per_reset, per_set = cell.cells_per_round(budget)
        rr, sr = -(-wb.n_reset // per_reset), -(-wb.n_set // per_set)
        # A write holds the peak current of its two phases while it programs.
        current = np.maximum(np.minimum(wb.n_reset, per_reset) * cell.reset_ua,
                             np.minimum(wb.n_set, per_set) * cell.set_ua)
    pre_read = eng.path.scheme.pre_read
    # A move reads its source line, then programs the destination.
    pre = np.where(moves | pre_read, cell.read_ns, 0.0)
    service = program + pre
    extra_bits = eng.line_bits + eng.path.scheme.flag_cells
    # Pre-reads of user writes: known now, unless the bank decides at
    # service time (block erase, hints), where a write may skip it.
    user_pre = int((~moves).sum()) if pre_read and not eng.cost_at_service else 0
    tot.read_bits += (int(moves.sum()) + user_pre) * extra_bits
    if not eng.cost_at_service:
        tot.user_set_cells += int(wb.n_set[~moves].sum())
        tot.user_reset_cells += int(wb.n_reset[~moves].sum())
    tot.move_cells += int(wb.n_set[moves].sum() + wb.n_reset[moves].sum())
    tot.move_writes += int(moves.sum())
    tot.meta_writes += wb.meta_writes
    if eng.agent is not None and not eng.closed:
        eng.agent.note_writes(chunk.time_ns[w_idx[wb.after]] if w_idx.size else np.empty(0), wb.phys)
        if eng.agent.plan.policy == "none" and chunk.time_ns.size:
            # Nothing reads line ages during the run: take this chunk's
            # writes now, so pending writes do not pile up over a long run.
            eng.agent.catch_up(float(chunk.time_ns[-1]))

    w_req = np.where(moves, -1, w_idx[np.clip(wb.user, 0, None)] if w_idx.size else 0)
    w_pos = w_idx[wb.after] if w_idx.size else np.empty(0, np.int64)
    pos = np.concatenate([r_idx, w_pos])
    w_pos = np.asarray(w_pos, np.int64)
    if w_pos.size < 2 or bool((w_pos[1:] >= w_pos[:-1]).all()):
        order = _merge_order(r_idx, w_pos)      # both sorted: a merge, not a sort
    else:
        order = np.argsort(pos, kind="stable")
    alt = None
    if eng.out_of_place:
        # Block erase: the cost of the out-of-place write (only the pulse
        # opposite to the initial state, no pre-read) and of the in-place
        # fallback (data-comparison counts); the bank picks at service.
        o_set, o_reset = eng.erase.oop_cost_from_ones(wb.ones)
        alt = (cell.program_ns(o_set, o_reset, budget), o_set, o_reset)
    elif eng.hint_mode:
        # A write to a line pre-programmed to all-SET from a hint needs
        # only RESET pulses for its 0 bits and no pre-read.
        o_reset = eng.line_bits - wb.ones
        o_set = np.zeros_like(o_reset)
        alt = (cell.program_ns(o_set, o_reset, budget), o_set, o_reset)
    return OpColumns(
        op=np.asarray(chunk.op, np.int8), arrival=np.asarray(chunk.time_ns, float),
        users=r_idx.size + int((~moves).sum()),
        r_idx=r_idx, r_ch=r_ch, r_bank=r_bank, r_row=r_row, r_phys=r_phys,
        w_req=np.asarray(w_req, np.int64), w_ch=w_ch, w_bank=w_bank, w_phys=wb.phys,
        service=service, uses_bus=~moves, current=current, pre=pre, rr=rr, sr=sr, pj=pj,
        cells=cells, n_set=wb.n_set, n_reset=wb.n_reset, order=order,
        t=chunk.time_ns[pos[order]], alt=alt, w_row=np.where(moves, -1, w_row))


@njit(cache=True)
def _merge_order(a, b):
    """``np.argsort(np.concatenate([a, b]), kind="stable")`` for sorted ``a`` and ``b``."""
    na, nb = a.size, b.size
    out = np.empty(na + nb, np.int64)
    i = j = 0
    for k in range(na + nb):
        if j >= nb or (i < na and a[i] <= b[j]):
            out[k] = i
            i += 1
        else:
            out[k] = na + j
            j += 1
    return out


def preset_costs(eng, hints: Chunk) -> tuple[np.ndarray, ...]:
    """(phys, channel, bank, service ns, current uA, energy pJ, SET cells) of
    pre-programming each hinted line: read it, SET its 0 cells (both engines).

    References: Qureshi, Franceschini, Jagmohan and Lastras, "PreSET",
    ISCA 2012 (bringing a line to the slow state before its write).
    """
    cell = eng.cell
    phys = eng.path.leveler.lookup(hints.line)
    ch, bank, _ = eng.amap.locate(phys)
    n_set = eng.line_bits - popcount_rows(eng.path.stored[phys])
    per_set = cell.cells_per_round(eng.round_budget_ua)[1]
    service = cell.program_ns(n_set, np.zeros_like(n_set), eng.round_budget_ua) + cell.read_ns
    pj = n_set * cell.set_pj + eng.line_bits * cell.read_pj
    cur = np.minimum(n_set, per_set) * cell.set_ua
    return phys, ch, bank, service, cur, pj, n_set
