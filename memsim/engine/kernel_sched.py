"""Queue policies of the compiled kernel: FR-FCFS order, write coalescing, read forwarding.

The compiled twin of :mod:`memsim.engine.sched` (the reference's readable
version; the rules are explained there).  :func:`memsim.engine.kernel.run_kernel`
calls these helpers only where a queue is taken from or filled, and only
when one of the policies is on (``xs[X_ON]``), so with all of them off the
kernel runs exactly as before.

State lives in two small arrays owned by the fast engine: ``xs`` (integer
parameters and counters) and ``xf`` (float parameter and sum).  Per slot the
kernel's ``si`` table holds the times a waiting request was passed
(``SI_PASSED``) and whether it has been started (``SI_STARTED``: a write that
was cancelled or paused and went back to the queue is no longer replaceable).
"""
from __future__ import annotations

from numba import njit

# kernel_sched is imported by kernel; kernel's names are looked up when a
# helper is first compiled, by which time both modules are complete.
from memsim.engine import kernel as K

# ---- xs: integer parameters, then counters
X_ON, X_SCHED, X_CAP, X_COALESCE, X_FORWARD, X_CAS, X_MARGIN = range(7)
X_ROW_HITS, X_WROW_HITS, X_PASSED, X_MAX_PASSED, X_COALESCED, X_FORWARDED = range(7, 13)
X_A_SET, X_A_RESET, X_A_PRE, X_ALOG_N = range(13, 17)
N_XS = 17
# ---- xf: float parameter, then the absorbed writes' programming energy
XF_FORWARD_NS, XF_A_PJ = range(2)
N_XF = 2


@njit(cache=True)
def _remove_at(q, qh, qn, b, k):
    """Take the ``k``-th entry of bank ``b``'s ring queue; the older ones keep their order."""
    cap = q.shape[1]
    h = qh[b]
    s = q[b, (h + k) % cap]
    for i in range(k, 0, -1):
        q[b, (h + i) % cap] = q[b, (h + i - 1) % cap]
    qh[b] = (h + 1) % cap
    qn[b] -= 1
    return s


@njit(cache=True)
def _find_write(wq, wqh, wqn, b, si, phys):
    """Position of a waiting (not started) user write to ``phys`` in bank ``b``'s queue, or -1."""
    cap = wq.shape[1]
    for i in range(wqn[b]):
        e = wq[b, (wqh[b] + i) % cap]
        if si[e, K.SI_PHYS] == phys and si[e, K.SI_REQ] >= 0 and si[e, K.SI_STARTED] == 0:
            return i
    return -1


@njit(cache=True)
def pick(q, qh, qn, b, si, bi, writes, xs):
    """Take the request bank ``b`` serves next from queue ``q`` and return its slot.

    fcfs: the head.  fr_fcfs: the oldest request that hits the open row or
    has been passed ``row_hit_cap`` times, else the head; every older
    request it passes counts one pass.  A user write opens its row.
    """
    open_row = bi[b, K.B_ROW]
    if xs[X_SCHED] == 0:
        s = K._q_pop(q, qh, qn, b)
    else:
        cap = q.shape[1]
        k = 0
        for i in range(qn[b]):
            e = q[b, (qh[b] + i) % cap]
            row = si[e, K.SI_ROW]
            if (row >= 0 and row == open_row) or si[e, K.SI_PASSED] >= xs[X_CAP]:
                k = i
                break
        for i in range(k):
            si[q[b, (qh[b] + i) % cap], K.SI_PASSED] += 1
        s = _remove_at(q, qh, qn, b, k)
        p = si[s, K.SI_PASSED]
        if p > 0:
            xs[X_PASSED] += 1
            if p > xs[X_MAX_PASSED]:
                xs[X_MAX_PASSED] = p
        si[s, K.SI_PASSED] = 0
    # Writes carry a row only under fr_fcfs; reads open their row in the kernel's read step.
    row = si[s, K.SI_ROW]
    if row >= 0 and row == open_row:
        xs[X_WROW_HITS if writes else X_ROW_HITS] += 1
    if writes and row >= 0:
        bi[b, K.B_ROW] = row
    si[s, K.SI_STARTED] = 1
    return s


@njit(cache=True)
def _answer(s, finish, now, sf, si, free, done_f, done_i, ist, ht, hs, hp, src):
    """Complete request ``s`` outside the bank (answered at ``finish``) and free its slot."""
    K._complete(s, now, sf, si, done_f, done_i, ist, ht, hs, hp, src)
    done_f[ist[K.DONE_N] - 1, 1] = finish
    K._free(s, free, ist)


@njit(cache=True)
def enqueue(b, s, now, sf, si, free, rq, rqh, rqn, wq, wqh, wqn, done_f, done_i, ist, ht, hs, hp,
            src, xs, xf, alog):
    """Put an arrived request into its queue: forwarded, or replacing a waiting write."""
    if si[s, K.SI_READ] != 0:
        if xs[X_FORWARD] != 0 and _find_write(wq, wqh, wqn, b, si, si[s, K.SI_PHYS]) >= 0:
            xs[X_FORWARDED] += 1
            _answer(s, sf[s, K.SF_T] + xf[XF_FORWARD_NS], now, sf, si, free, done_f, done_i, ist,
                    ht, hs, hp, src)
            return
        K._q_push(rq, rqh, rqn, b, s)
        return
    if xs[X_COALESCE] != 0 and si[s, K.SI_REQ] >= 0:
        k = _find_write(wq, wqh, wqn, b, si, si[s, K.SI_PHYS])
        if k >= 0:
            old = _remove_at(wq, wqh, wqn, b, k)
            xs[X_COALESCED] += 1
            if xs[X_CAS] == 0:
                # Its cells were counted when the write path ran: take them back.
                xs[X_A_SET] += si[old, K.SI_NSET]
                xs[X_A_RESET] += si[old, K.SI_NRESET]
                xs[X_A_PRE] += 1 if sf[old, K.SF_PRE] > 0 else 0
                xf[XF_A_PJ] += sf[old, K.SF_PJ]
            # The engine takes its wear back from the ledger if the write path recorded it.
            n = xs[X_ALOG_N]
            alog[n, 0] = si[old, K.SI_PHYS]
            alog[n, 1] = si[old, K.SI_NSET] + si[old, K.SI_NRESET]
            xs[X_ALOG_N] = n + 1
            _answer(old, sf[s, K.SF_T], now, sf, si, free, done_f, done_i, ist, ht, hs, hp, src)
    K._q_push(wq, wqh, wqn, b, s)


@njit(cache=True)
def admit(b, now, sf, si, free, ib, ibh, ibn, rq, rqh, rqn, wq, wqh, wqn, rpend, wpend,
          done_f, done_i, ist, ht, hs, hp, src, xs, xf, alog):
    """The kernel's admission (inbox to queues) with the policies: in arrival order."""
    while ibn[b] > 0 and sf[ib[b, ibh[b]], K.SF_T] <= now:
        s = K._q_pop(ib, ibh, ibn, b)
        if si[s, K.SI_READ] != 0:
            rpend[b] -= 1
        else:
            wpend[b] -= 1
        enqueue(b, s, now, sf, si, free, rq, rqh, rqn, wq, wqh, wqn, done_f, done_i, ist, ht, hs, hp,
                src, xs, xf, alog)


@njit(cache=True)
def logs_full(n_done, done_cap, xs, alog):
    """True when the completion or absorption log could overflow during the next event.

    One admission may complete every request of a bank's inbox, so the
    policies keep ``xs[X_MARGIN]`` rows free (0 when they are off).
    """
    m = xs[X_MARGIN]
    return n_done + m >= done_cap or (xs[X_COALESCE] != 0 and xs[X_ALOG_N] + m >= alog.shape[0])
