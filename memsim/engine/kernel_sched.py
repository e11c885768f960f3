"""Queue policies of the compiled kernel: FR-FCFS order, write coalescing, read forwarding.

The compiled twin of :mod:`memsim.engine.sched` (the reference's readable
version; the rules are explained there).
:func:`memsim.engine.kernel.run_kernel` calls these helpers only where a
queue is taken from or filled, and only when one of the policies is on
(``xs[X_ON]``), so with all of them off the kernel runs exactly as before.
numba's cache does not notice a change here in the kernel that calls these
helpers: after editing this module, touch ``kernel.py`` (or clear
``memsim/engine/__pycache__``).

State lives in two small arrays owned by the fast engine: ``xs`` (integer
parameters and counters) and ``xf`` (float parameter and sum).  Per slot the
kernel's ``si`` table holds the times a waiting request was passed
(``SI_PASSED``) and whether it has been started (``SI_STARTED``: a write that
was cancelled or paused and went back to the queue is no longer replaceable).
"""
from __future__ import annotations

from numba import njit

# ---- xs: integer parameters, counters, then where the kernel keeps what the
# helpers touch (its column and state indices, filled in by the fast engine:
# this module does not import the kernel, the kernel imports it).
X_ON, X_SCHED, X_CAP, X_COALESCE, X_FORWARD, X_CAS, X_MARGIN = range(7)
X_ROW_HITS, X_WROW_HITS, X_PASSED, X_MAX_PASSED, X_COALESCED, X_FORWARDED = range(7, 13)
X_A_SET, X_A_RESET, X_A_PRE, X_ALOG_N, X_WAKE_SRC = range(13, 18)
L_SI_READ, L_SI_REQ, L_SI_ROW, L_SI_PHYS, L_SI_NSET, L_SI_NRESET, L_SI_PASSED, L_SI_STARTED = range(18, 26)
L_SF_T, L_SF_PRE, L_SF_PJ, L_B_ROW, L_DONE_N, L_IN_FLIGHT, L_SLOT_WAIT, L_FREE_TOP = range(26, 34)
N_XS = 34
# ---- xf: float parameter, then the absorbed writes' programming energy
XF_FORWARD_NS, XF_A_PJ = range(2)
N_XF = 2


def layout(xs, kernel) -> None:
    """Record the kernel's column and state indices in ``xs`` (``kernel`` is its module)."""
    k = kernel
    for x, v in ((L_SI_READ, k.SI_READ), (L_SI_REQ, k.SI_REQ), (L_SI_ROW, k.SI_ROW), (L_SI_PHYS, k.SI_PHYS),
                 (L_SI_NSET, k.SI_NSET), (L_SI_NRESET, k.SI_NRESET), (L_SI_PASSED, k.SI_PASSED),
                 (L_SI_STARTED, k.SI_STARTED), (L_SF_T, k.SF_T), (L_SF_PRE, k.SF_PRE), (L_SF_PJ, k.SF_PJ),
                 (L_B_ROW, k.B_ROW), (L_DONE_N, k.DONE_N), (L_IN_FLIGHT, k.IN_FLIGHT),
                 (L_SLOT_WAIT, k.SLOT_WAIT), (L_FREE_TOP, k.FREE_TOP)):
        xs[x] = v


@njit(cache=True)
def _pop(q, qh, qn, b):
    v = q[b, qh[b]]
    qh[b] = (qh[b] + 1) % q.shape[1]
    qn[b] -= 1
    return v


@njit(cache=True)
def _push_back(q, qh, qn, b, v):
    q[b, (qh[b] + qn[b]) % q.shape[1]] = v
    qn[b] += 1


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
def _find_write(wq, wqh, wqn, b, si, phys, xs):
    """Position of a waiting (not started) user write to ``phys`` in bank ``b``'s queue, or -1."""
    cap = wq.shape[1]
    for i in range(wqn[b]):
        e = wq[b, (wqh[b] + i) % cap]
        if si[e, xs[L_SI_PHYS]] == phys and si[e, xs[L_SI_REQ]] >= 0 and si[e, xs[L_SI_STARTED]] == 0:
            return i
    return -1


@njit(cache=True)
def pick(q, qh, qn, b, si, bi, writes, xs):
    """Take the request bank ``b`` serves next from queue ``q`` and return its slot.

    fcfs: the head.  fr_fcfs: the oldest request that hits the open row or
    has been passed ``row_hit_cap`` times, else the head; every older
    request it passes counts one pass.  A user write opens its row.
    """
    open_row = bi[b, xs[L_B_ROW]]
    if xs[X_SCHED] == 0:
        s = _pop(q, qh, qn, b)
    else:
        cap = q.shape[1]
        k = 0
        # A write that went back to the head (cancelled or paused) resumes first,
        # so writes to one line keep their order.
        n = 0 if (writes and si[q[b, qh[b]], xs[L_SI_STARTED]] != 0) else qn[b]
        for i in range(n):
            e = q[b, (qh[b] + i) % cap]
            row = si[e, xs[L_SI_ROW]]
            if (row >= 0 and row == open_row) or si[e, xs[L_SI_PASSED]] >= xs[X_CAP]:
                k = i
                break
        for i in range(k):
            si[q[b, (qh[b] + i) % cap], xs[L_SI_PASSED]] += 1
        s = _remove_at(q, qh, qn, b, k)
        p = si[s, xs[L_SI_PASSED]]
        if p > 0:
            xs[X_PASSED] += 1
            if p > xs[X_MAX_PASSED]:
                xs[X_MAX_PASSED] = p
        si[s, xs[L_SI_PASSED]] = 0
    # Writes carry a row only under fr_fcfs; reads open their row in the kernel's read step.
    row = si[s, xs[L_SI_ROW]]
    if row >= 0 and row == open_row:
        xs[X_WROW_HITS if writes else X_ROW_HITS] += 1
    if writes and row >= 0:
        bi[b, xs[L_B_ROW]] = row
    si[s, xs[L_SI_STARTED]] = 1
    return s


@njit(cache=True)
def _answer(s, finish, sf, si, free, done_f, done_i, ist, xs):
    """Complete request ``s`` outside the bank (answered at ``finish``) and free its slot.

    As the kernel's own completion; a source waiting for a slot is flagged
    in ``xs[X_WAKE_SRC]`` for the kernel to wake (it owns the event heap).
    """
    n = ist[xs[L_DONE_N]]
    done_f[n, 0] = sf[s, xs[L_SF_T]]
    done_f[n, 1] = finish
    done_i[n, 0] = si[s, xs[L_SI_REQ]]
    done_i[n, 1] = 0 if si[s, xs[L_SI_READ]] != 0 else 1
    ist[xs[L_DONE_N]] = n + 1
    ist[xs[L_IN_FLIGHT]] -= 1
    if ist[xs[L_SLOT_WAIT]] != 0:
        ist[xs[L_SLOT_WAIT]] = 0
        xs[X_WAKE_SRC] = 1
    top = ist[xs[L_FREE_TOP]]
    free[top] = s
    ist[xs[L_FREE_TOP]] = top + 1


@njit(cache=True)
def enqueue(b, s, sf, si, free, rq, rqh, rqn, wq, wqh, wqn, done_f, done_i, ist, xs, xf, alog):
    """Put an arrived request into its queue: forwarded, or replacing a waiting write."""
    if si[s, xs[L_SI_READ]] != 0:
        if xs[X_FORWARD] != 0 and _find_write(wq, wqh, wqn, b, si, si[s, xs[L_SI_PHYS]], xs) >= 0:
            xs[X_FORWARDED] += 1
            _answer(s, sf[s, xs[L_SF_T]] + xf[XF_FORWARD_NS], sf, si, free, done_f, done_i, ist, xs)
            return
        _push_back(rq, rqh, rqn, b, s)
        return
    if xs[X_COALESCE] != 0 and si[s, xs[L_SI_REQ]] >= 0:
        k = _find_write(wq, wqh, wqn, b, si, si[s, xs[L_SI_PHYS]], xs)
        if k >= 0:
            old = _remove_at(wq, wqh, wqn, b, k)
            xs[X_COALESCED] += 1
            if xs[X_CAS] == 0:
                # Its cells were counted when the write path ran: take them back.
                xs[X_A_SET] += si[old, xs[L_SI_NSET]]
                xs[X_A_RESET] += si[old, xs[L_SI_NRESET]]
                xs[X_A_PRE] += 1 if sf[old, xs[L_SF_PRE]] > 0 else 0
                xf[XF_A_PJ] += sf[old, xs[L_SF_PJ]]
            # The engine takes its wear back from the ledger if the write path recorded it.
            n = xs[X_ALOG_N]
            alog[n, 0] = si[old, xs[L_SI_PHYS]]
            alog[n, 1] = si[old, xs[L_SI_NSET]] + si[old, xs[L_SI_NRESET]]
            xs[X_ALOG_N] = n + 1
            _answer(old, sf[s, xs[L_SF_T]], sf, si, free, done_f, done_i, ist, xs)
    _push_back(wq, wqh, wqn, b, s)


@njit(cache=True)
def admit(b, now, sf, si, free, ib, ibh, ibn, rq, rqh, rqn, wq, wqh, wqn, rpend, wpend,
          done_f, done_i, ist, xs, xf, alog):
    """The kernel's admission (inbox to queues) with the policies: in arrival order."""
    while ibn[b] > 0 and sf[ib[b, ibh[b]], xs[L_SF_T]] <= now:
        s = _pop(ib, ibh, ibn, b)
        if si[s, xs[L_SI_READ]] != 0:
            rpend[b] -= 1
        else:
            wpend[b] -= 1
        enqueue(b, s, sf, si, free, rq, rqh, rqn, wq, wqh, wqn, done_f, done_i, ist, xs, xf, alog)


@njit(cache=True)
def logs_full(n_done, done_cap, xs, alog):
    """True when the completion or absorption log could overflow during the next event.

    One admission may complete every request of a bank's inbox, so the
    policies keep ``xs[X_MARGIN]`` rows free (0 when they are off).
    """
    m = xs[X_MARGIN]
    return n_done + m >= done_cap or (xs[X_COALESCE] != 0 and xs[X_ALOG_N] + m >= alog.shape[0])
