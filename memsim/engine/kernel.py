"""Compiled event loop of the fast timing engine (numba).

The kernel runs the same controller as the simpy reference
(:mod:`memsim.engine.timing`) and reproduces its event order exactly: one
heap of pending wake-ups keyed by (time, sequence number), the sequence
number taken at the moment simpy would schedule the event, so events at the
same time run in the same order as in simpy.  Each process (the source and
one per bank) waits on at most one event at a time; where the reference
resumes a generator, the kernel stores a resume point.

All state lives in numpy arrays owned by :class:`memsim.engine.fast.FastEngine`,
so the kernel can return to Python when the source needs the next chunk (the
moment the reference prepares it) or more slots, when a refresh scan or a
scrub draw is due, when a write's form must be decided (block erase, hints)
or an erase sub-process resumes (:mod:`memsim.engine.kernel_erase`), and
continue afterwards.
Every float is computed with the same operations in the same order as the
reference, so finish times agree bit for bit.
"""
from __future__ import annotations

import numpy as np
from numba import njit

from memsim.engine import kernel_sched as KS

# ---- integer state (ist)
SEQ, HSIZE, SRC_K, SRC_POS, SRC_RUN, IN_FLIGHT, SRC_DONE, SLOT_WAIT, FREE_TOP = range(9)
CANCELS, PAUSES, CANC_CELLS, CLOG_N, USER_SET, USER_RESET, SRC_B, ERROR = range(9, 17)
SET_CELLS, RESET_CELLS, READ_BITS, DONE_N = range(17, 21)
REFRESH_RUNNING, SCAN_B, SRC_LOGGED, HLOG_N, SCRUB_PHYS, RESUME, HINT_BASE = range(21, 28)
N_IST = 28
# ---- float state (fst)
NOW, SRC_T, POWER_WAIT, CANC_PJ, REFRESH_BUSY = range(5)
N_FST = 5
# ---- integer parameters (pi)
P_NB, P_RCAP, P_WCAP, P_HIGH, P_LOW, P_IDLEW, P_CLOSED, P_LIMIT, P_EXT, P_CANCEL, P_PAUSE, \
    P_NPOOLS, P_CAS, P_PER_RESET, P_PER_SET, P_EXTRA_BITS, P_SCAN_BASE, P_CLOSED_REFRESH, P_URGENT, \
    P_SCRUB, P_PLACE = range(21)
N_PI = 21
# ---- float parameters (pf)
F_BURST, F_READ, F_HIT, F_CANCEL_BEFORE, F_RESET_NS, F_SET_NS, F_POOL_CAP, F_RESET_UA, F_SET_UA, \
    F_SCAN_NS = range(10)
N_PF = 10
# ---- per-bank integers (bi)
B_KIND, B_SLOT, B_DRAIN, B_ROW, B_IDLE, B_SPACE, B_WDRAIN, B_AGAIN, B_DONE, B_STREAK, B_SCANNED, \
    B_WANT_CLEAN, B_HSLEEP, B_HSEQ, B_WSEQ = range(15)
N_BI = 15
# ---- per-bank floats (bf)
BF_BUSY, BF_T0, BF_NEED = range(3)
N_BF = 3
# ---- slot fields
SF_T, SF_SERVICE, SF_CUR, SF_PRE, SF_PJ, SF_OOP_NS = range(6)
N_SF = 6
SI_READ, SI_REQ, SI_CH, SI_ROW, SI_PHYS, SI_BUS, SI_RR, SI_SR, SI_CELLS, SI_NSET, SI_NRESET, \
    SI_OOP_SET, SI_OOP_RESET = range(13)
SI_PASSED, SI_STARTED = 13, 14       # queue policies (kernel_sched)
N_SI = 15
# ---- resume points of a bank
K_RUN, K_DONE, K_GOT, K_WDONE, K_PY = range(5)     # K_PY: a Python sub-process (erase agent) waits
# ---- resume points of the source
S_NEXT, S_SLOT, S_HAND, S_AFTER_T, S_SPACECHK, S_SPACE = range(6)
# ---- kernel status
BLOCKED, NEED_CHUNK, NEED_SLOTS, FINISHED, FAILED, FLUSH, SCAN, SCRUB, BANK_PY, PLACE_WRITE, \
    IDLE_CLEAN, GROW_HEAP = range(12)
REFRESH = -2          # request field of a refresh operation (as in the reference)
PRESET = -3           # request field of a hint's pre-programming (as in the reference)


@njit(cache=True)
def _push(ht, hs, hp, ist, t, pid):
    """Schedule process ``pid`` at time ``t`` (sequence number taken now)."""
    i = ist[HSIZE]
    ist[HSIZE] = i + 1
    s = ist[SEQ]
    ist[SEQ] = s + 1
    while i > 0:
        parent = (i - 1) >> 1
        if ht[parent] < t or (ht[parent] == t and hs[parent] < s):
            break
        ht[i] = ht[parent]
        hs[i] = hs[parent]
        hp[i] = hp[parent]
        i = parent
    ht[i] = t
    hs[i] = s
    hp[i] = pid


@njit(cache=True)
def _pop(ht, hs, hp, ist):
    t0 = ht[0]
    p0 = hp[0]
    n = ist[HSIZE] - 1
    ist[HSIZE] = n
    if n > 0:
        t = ht[n]
        s = hs[n]
        p = hp[n]
        i = 0
        while True:
            c = 2 * i + 1
            if c >= n:
                break
            if c + 1 < n and (ht[c + 1] < ht[c] or (ht[c + 1] == ht[c] and hs[c + 1] < hs[c])):
                c += 1
            if t < ht[c] or (t == ht[c] and s < hs[c]):
                break
            ht[i] = ht[c]
            hs[i] = hs[c]
            hp[i] = hp[c]
            i = c
        ht[i] = t
        hs[i] = s
        hp[i] = p
    return t0, p0


# Ring buffers: head in [0, cap), count in [0, cap]; a compare instead of
# a modulo (an integer division) on every queue operation.
@njit(cache=True)
def _q_push(q, qh, qn, b, v):
    cap = q.shape[1]
    i = qh[b] + qn[b]
    if i >= cap:
        i -= cap
    q[b, i] = v
    qn[b] += 1


@njit(cache=True)
def _q_push_front(q, qh, qn, b, v):
    h = qh[b] - 1
    if h < 0:
        h += q.shape[1]
    qh[b] = h
    q[b, h] = v
    qn[b] += 1


@njit(cache=True)
def _q_pop(q, qh, qn, b):
    h = qh[b]
    v = q[b, h]
    h += 1
    if h >= q.shape[1]:
        h = 0
    qh[b] = h
    qn[b] -= 1
    return v


@njit(cache=True)
def _q_at(q, qh, b, k):
    i = qh[b] + k
    cap = q.shape[1]
    if i >= cap:
        i -= cap
    return q[b, i]


@njit(cache=True)
def _wake(b, at, bi, ist, fst, ht, hs, hp):
    """Wake bank ``b`` at ``at`` if it sleeps with nothing to do."""
    if bi[b, B_IDLE] != 0:
        bi[b, B_IDLE] = 0
        bi[b, B_KIND] = K_RUN
        now = fst[NOW]
        d = at - now
        if bi[b, B_HSLEEP] != 0:
            # Asleep on "woken or the next hint" (simpy any_of): the wake-up
            # is one arm; whichever arm comes first resumes the bank.
            bi[b, B_WSEQ] = ist[SEQ]
            _push(ht, hs, hp, ist, now + (d if d > 0.0 else 0.0), ist[HINT_BASE] + b)
            return
        _push(ht, hs, hp, ist, now + (d if d > 0.0 else 0.0), b)


@njit(cache=True)
def _admit(b, now, sf, si, ib, ibh, ibn, rq, rqh, rqn, wq, wqh, wqn, rpend, wpend):
    while ibn[b] > 0 and sf[ib[b, ibh[b]], SF_T] <= now:
        s = _q_pop(ib, ibh, ibn, b)
        if si[s, SI_READ] != 0:
            _q_push(rq, rqh, rqn, b, s)
            rpend[b] -= 1
        else:
            _q_push(wq, wqh, wqn, b, s)
            wpend[b] -= 1


@njit(cache=True)
def _trigger_get(p, me, pool_level, pq, pqh, pqn, bf, ist, fst, ht, hs, hp):
    """simpy Container: serve waiting gets from the head while they fit.

    Bank ``me`` (or -1) is asking now: if it is served, it does not wait
    for an event (the reference does not yield then); True if so.
    """
    served = False
    while pqn[p] > 0:
        b = pq[p, pqh[p]]
        if pool_level[p] >= bf[b, BF_NEED]:
            pool_level[p] -= bf[b, BF_NEED]
            _q_pop(pq, pqh, pqn, p)
            if b == me:
                served = True
            else:
                _push(ht, hs, hp, ist, fst[NOW], b)
        else:
            break
    return served


@njit(cache=True)
def run_kernel(pi, pf, ist, fst, ht, hs, hp, bi, bf, sf, si, free, ib, ibh, ibn, rq, rqh, rqn,
               wq, wqh, wqn, rpend, wpend, bus_free, pool_level, pq, pqh, pqn,
               c_t, c_bank, c_f, c_i, base, done_f, done_i, clog, fq, fqh, fqn, hlog, hq, hqh, hqn,
               xs, xf, alog):
    """Run until the source needs a chunk or slots, or until the end.

    Chunk columns (admission order): ``c_t`` time, ``c_bank``, ``c_f`` =
    (service, current, pre, pj), ``c_i`` = (is read, local request or -1,
    channel, row, physical line, uses bus, RESET rounds, SET rounds, cells,
    SET cells, RESET cells).  ``base`` is the global index of the chunk's
    first request.  Completions go to ``done_f`` (arrival, finish) and
    ``done_i`` (request, op) in completion order; the caller empties them.
    ``xs``, ``xf`` and ``alog`` belong to the queue policies
    (:mod:`memsim.engine.kernel_sched`: FR-FCFS, coalescing, forwarding),
    called only where a queue is filled or taken from.
    """
    nb = pi[P_NB]
    src = nb
    rcap, wcap = pi[P_RCAP], pi[P_WCAP]
    high, low = pi[P_HIGH], pi[P_LOW]
    idle_writes = pi[P_IDLEW] != 0
    closed = pi[P_CLOSED] != 0
    limit = pi[P_LIMIT]
    extended = pi[P_EXT] != 0
    npools = pi[P_NPOOLS]
    burst, read_ns, hit_ns = pf[F_BURST], pf[F_READ], pf[F_HIT]
    n_entries = c_t.shape[0]
    while True:
        if ist[CLOG_N] + 1 >= clog.shape[0] or KS.logs_full(ist[DONE_N], done_f.shape[0], xs, alog):
            return FLUSH              # the caller takes the logs first (two entries per event at most)
        if ist[HSIZE] + 2 * nb + 8 > ht.shape[0]:
            return GROW_HEAP          # void hint timers stay in the heap until their time
        seq = -1
        if ist[SRC_RUN] != 0:
            pid = src
        elif ist[RESUME] != 0:
            # A bank whose Python sub-process ended goes on at this time.
            pid = ist[RESUME] - 1
            ist[RESUME] = 0
        else:
            if ist[HSIZE] == 0:
                return FINISHED
            seq = hs[0]
            t, pid = _pop(ht, hs, hp, ist)
            fst[NOW] = t
        now = fst[NOW]
        if pid >= ist[HINT_BASE]:
            # An arm of a bank's sleep on "woken or the next hint": the first
            # to come triggers the condition (its own event, now); the
            # other one comes to nothing.
            hb = pid - ist[HINT_BASE]
            if bi[hb, B_HSLEEP] != 0 and (seq == bi[hb, B_HSEQ] or seq == bi[hb, B_WSEQ]):
                bi[hb, B_HSLEEP] = 0
                bi[hb, B_IDLE] = 0
                bi[hb, B_KIND] = K_RUN
                _push(ht, hs, hp, ist, now, hb)
            continue
        if pid >= pi[P_SCAN_BASE]:
            # A refresh scan of bank pid - base: its first step only waits.
            sb = pid - pi[P_SCAN_BASE]
            if bi[sb, B_SCANNED] == 0:
                bi[sb, B_SCANNED] = 1
                _push(ht, hs, hp, ist, now + pf[F_SCAN_NS], pid)
                continue
            ist[SCAN_B] = sb
            return SCAN
        if pid > src:
            # A returned current is processed: waiting writes may start.
            _trigger_get(pid - src - 1, -1, pool_level, pq, pqh, pqn, bf, ist, fst, ht, hs, hp)
            continue
        if pid == src:
            # ------------------------------------------------------ source
            ist[SRC_RUN] = 1
            k = ist[SRC_K]
            while True:
                pos = ist[SRC_POS]
                if k == S_NEXT:
                    if pos >= n_entries:
                        ist[SRC_K] = S_NEXT
                        return NEED_CHUNK
                    if closed:
                        if c_i[pos, 0] != 0 or c_i[pos, 1] >= 0:
                            k = S_SLOT
                            continue
                        fst[SRC_T] = now
                    else:
                        fst[SRC_T] = c_t[pos]
                    k = S_HAND
                elif k == S_SLOT:
                    if ist[IN_FLIGHT] >= limit:
                        ist[SLOT_WAIT] = 1
                        # Banks holding writes back must serve them now.
                        for bank in range(nb):
                            _wake(bank, now, bi, ist, fst, ht, hs, hp)
                        ist[SRC_K] = S_SLOT
                        ist[SRC_RUN] = 0
                        break
                    ist[IN_FLIGHT] += 1
                    fst[SRC_T] = now
                    k = S_HAND
                elif k == S_HAND or k == S_SPACECHK:
                    b = c_bank[pos]
                    is_read = c_i[pos, 0] != 0
                    if is_read:
                        qn, cap, pend = rqn, rcap, rpend
                    else:
                        qn, cap, pend = wqn, wcap, wpend
                    if k == S_HAND:
                        if pi[P_CLOSED_REFRESH] != 0 and not is_read and ist[SRC_LOGGED] == 0:
                            # The refresh agent learns the write at hand-over.
                            n = ist[HLOG_N]
                            if n >= hlog.shape[0]:
                                ist[SRC_K] = k
                                return FLUSH
                            hlog[n, 0] = fst[SRC_T]
                            hlog[n, 1] = c_i[pos, SI_PHYS]
                            ist[HLOG_N] = n + 1
                            ist[SRC_LOGGED] = 1
                        if qn[b] + pend[b] < cap:
                            if ist[FREE_TOP] == 0:
                                ist[SRC_K] = k
                                return NEED_SLOTS
                            t = fst[SRC_T]
                            s = _fill(pos, t, base, c_f, c_i, sf, si, free, ist)
                            _q_push(ib, ibh, ibn, b, s)
                            pend[b] += 1
                            if bi[b, B_IDLE] != 0:
                                _wake(b, t, bi, ist, fst, ht, hs, hp)
                            ist[SRC_POS] = pos + 1
                            ist[SRC_LOGGED] = 0
                            k = S_NEXT
                            continue
                        # The queue may be full when this request arrives: go there.
                        t = fst[SRC_T]
                        if t > now:
                            _push(ht, hs, hp, ist, now + (t - now), src)
                            ist[SRC_K] = S_AFTER_T
                            ist[SRC_RUN] = 0
                            break
                        k = S_AFTER_T
                        continue
                    # S_SPACECHK
                    if qn[b] >= cap:
                        bi[b, B_SPACE] = 1
                        ist[SRC_B] = b
                        ist[SRC_K] = S_SPACE
                        ist[SRC_RUN] = 0
                        break
                    if ist[FREE_TOP] == 0:
                        ist[SRC_K] = k
                        return NEED_SLOTS
                    s = _fill(pos, fst[SRC_T], base, c_f, c_i, sf, si, free, ist)
                    if xs[KS.X_ON] != 0:
                        KS.enqueue(b, s, sf, si, free, rq, rqh, rqn, wq, wqh, wqn, done_f, done_i, ist, xs, xf, alog)
                        _wake_source(now, ist, ht, hs, hp, src, xs)
                    elif is_read:
                        _q_push(rq, rqh, rqn, b, s)
                    else:
                        _q_push(wq, wqh, wqn, b, s)
                    _wake(b, now, bi, ist, fst, ht, hs, hp)
                    ist[SRC_POS] = pos + 1
                    ist[SRC_LOGGED] = 0
                    k = S_NEXT
                elif k == S_AFTER_T or k == S_SPACE:
                    b = c_bank[pos]
                    if xs[KS.X_ON] != 0:
                        KS.admit(b, now, sf, si, free, ib, ibh, ibn, rq, rqh, rqn, wq, wqh, wqn, rpend, wpend,
                                 done_f, done_i, ist, xs, xf, alog)
                        _wake_source(now, ist, ht, hs, hp, src, xs)
                    else:
                        _admit(b, now, sf, si, ib, ibh, ibn, rq, rqh, rqn, wq, wqh, wqn, rpend, wpend)
                    k = S_SPACECHK
            continue

        # ------------------------------------------------------------ bank
        b = pid
        kind = bi[b, B_KIND]
        top = True
        scrub_phys = -1
        if kind == K_PY:
            ist[SCAN_B] = b
            return BANK_PY
        if kind == K_DONE:
            s = bi[b, B_SLOT]
            if si[s, SI_REQ] >= 0:
                _complete(s, now, sf, si, done_f, done_i, ist, ht, hs, hp, src)
            _free(s, free, ist)
        elif kind == K_GOT:
            fst[POWER_WAIT] += now - bf[b, BF_T0]
            top = False
            _write_go(b, now, pi, pf, ist, fst, ht, hs, hp, bi, bf, sf, si, ib, ibh, ibn, rqn,
                      bus_free, clog)
        elif kind == K_WDONE:
            need = bf[b, BF_NEED]
            if need > 0:
                # Give the current back; waiting writes get it when the
                # return is processed (a later event at this time).
                p = 0 if npools == 1 else si[bi[b, B_SLOT], SI_CH]
                if pf[F_POOL_CAP] - pool_level[p] >= need:
                    pool_level[p] += need
                else:
                    ist[ERROR] = 1        # a return that must wait: not modeled
                    return FAILED
                _push(ht, hs, hp, ist, now, src + 1 + p)
            s = bi[b, B_SLOT]
            if bi[b, B_AGAIN] != 0:
                _q_push_front(wq, wqh, wqn, b, s)
            else:
                if si[s, SI_REQ] >= 0:
                    _complete(s, now, sf, si, done_f, done_i, ist, ht, hs, hp, src)
                elif si[s, SI_REQ] == PRESET:
                    # The line is pre-programmed: the caller counts it (bank b's next).
                    clog[ist[CLOG_N], 0] = -1 - b
                    clog[ist[CLOG_N], 1] = 0
                    ist[CLOG_N] += 1
                _free(s, free, ist)
        if not top:
            continue
        # ---- the bank's loop
        # (The admission is written out here and in the source step: one
        # shared njit helper taking these arrays halved the benchmark's rate.)
        if xs[KS.X_ON] != 0:
            KS.admit(b, now, sf, si, free, ib, ibh, ibn, rq, rqh, rqn, wq, wqh, wqn, rpend, wpend,
                     done_f, done_i, ist, xs, xf, alog)
            _wake_source(now, ist, ht, hs, hp, src, xs)
        else:
            _admit(b, now, sf, si, ib, ibh, ibn, rq, rqh, rqn, wq, wqh, wqn, rpend, wpend)
        if bi[b, B_DRAIN] != 0 and wqn[b] <= low:
            bi[b, B_DRAIN] = 0
        if bi[b, B_DRAIN] == 0 and wqn[b] >= high:
            bi[b, B_DRAIN] = 1
        draining = bi[b, B_DRAIN] != 0
        if fqn[b] > 0 and not draining and (rqn[b] == 0 or (fqn[b] >= pi[P_URGENT]
                                                            and bi[b, B_STREAK] < pi[P_URGENT])):
            # Refresh when no read waits, or when refreshes pile up; at
            # most URGENT of them in a row while reads wait.
            s = _q_pop(fq, fqh, fqn, b)
            bi[b, B_SLOT] = s
            bi[b, B_STREAK] = bi[b, B_STREAK] + 1 if rqn[b] > 0 else 0
            if extended:
                _write_start(b, s, False, now, pi, pf, ist, fst, ht, hs, hp, bi, bf, sf, si,
                             ib, ibh, ibn, rqn, bus_free, pool_level, pq, pqh, pqn, clog)
                continue
            dur = sf[s, SF_SERVICE]
            fst[REFRESH_BUSY] += dur
        elif draining or (wqn[b] > 0 and rqn[b] == 0
                        and (idle_writes or ist[SLOT_WAIT] != 0 or (ist[SRC_DONE] != 0 and ibn[b] == 0))):
            s = KS.pick(wq, wqh, wqn, b, si, bi, True, xs) if xs[KS.X_ON] != 0 else _q_pop(wq, wqh, wqn, b)
            bi[b, B_SLOT] = s
            if extended:
                if bi[b, B_SPACE] != 0:
                    bi[b, B_SPACE] = 0
                    _push(ht, hs, hp, ist, now, src)
                if pi[P_PLACE] != 0:
                    # The caller decides the write's form: the erase agent places it
                    # (and may clean first), or it finds its line pre-programmed.
                    bi[b, B_WDRAIN] = 1 if draining else 0
                    ist[SCAN_B] = b
                    return PLACE_WRITE
                _write_start(b, s, draining, now, pi, pf, ist, fst, ht, hs, hp, bi, bf, sf, si,
                             ib, ibh, ibn, rqn, bus_free, pool_level, pq, pqh, pqn, clog)
                continue
            ch = si[s, SI_CH]
            if si[s, SI_BUS] != 0:
                start = bus_free[ch] if bus_free[ch] > now else now
                bus_free[ch] = start + burst
                dur = start + burst - now + sf[s, SF_SERVICE]
            else:
                dur = sf[s, SF_SERVICE]
        elif rqn[b] > 0:
            s = KS.pick(rq, rqh, rqn, b, si, bi, False, xs) if xs[KS.X_ON] != 0 else _q_pop(rq, rqh, rqn, b)
            bi[b, B_SLOT] = s
            bi[b, B_STREAK] = 0
            if pi[P_SCRUB] != 0:
                scrub_phys = si[s, SI_PHYS]
            row = si[s, SI_ROW]
            ch = si[s, SI_CH]
            start = now + (hit_ns if (row >= 0 and row == bi[b, B_ROW]) else read_ns)
            bi[b, B_ROW] = row
            if bus_free[ch] > start:
                start = bus_free[ch]
            bus_free[ch] = start + burst
            dur = start + burst - now
        elif hqn[b] > 0 and sf[hq[b, hqh[b]], SF_T] <= now:
            # Idle with a hint in hand: pre-program its line.
            s = _q_pop(hq, hqh, hqn, b)
            bi[b, B_SLOT] = s
            _write_start(b, s, False, now, pi, pf, ist, fst, ht, hs, hp, bi, bf, sf, si,
                         ib, ibh, ibn, rqn, bus_free, pool_level, pq, pqh, pqn, clog)
            continue
        elif ibn[b] > 0 or hqn[b] > 0:
            if bi[b, B_WANT_CLEAN] != 0:
                ist[SCAN_B] = b             # idle: the erase agent cleans a block
                return IDLE_CLEAN
            if ibn[b] > 0 and (hqn[b] == 0 or sf[ib[b, ibh[b]], SF_T] <= sf[hq[b, hqh[b]], SF_T]):
                # Idle until the next arrival (the source hands requests over
                # in time order: nothing can arrive before the inbox head).
                bi[b, B_KIND] = K_RUN
                _push(ht, hs, hp, ist, now + (sf[ib[b, ibh[b]], SF_T] - now), b)
                continue
            # Next is a hint, but a request may still be handed over for an
            # earlier time: sleep until either.
            bi[b, B_IDLE] = 1
            bi[b, B_HSLEEP] = 1
            bi[b, B_HSEQ] = ist[SEQ]
            bi[b, B_WSEQ] = -1
            _push(ht, hs, hp, ist, now + (sf[hq[b, hqh[b]], SF_T] - now), ist[HINT_BASE] + b)
            continue
        else:
            if bi[b, B_WANT_CLEAN] != 0:
                ist[SCAN_B] = b
                return IDLE_CLEAN
            if ist[SRC_DONE] != 0 and wqn[b] == 0 and fqn[b] == 0 and ist[REFRESH_RUNNING] == 0:
                bi[b, B_DONE] = 1
                continue
            bi[b, B_IDLE] = 1
            continue
        if bi[b, B_SPACE] != 0:
            bi[b, B_SPACE] = 0
            _push(ht, hs, hp, ist, now, src)
        bf[b, BF_BUSY] += dur
        bi[b, B_KIND] = K_DONE
        _push(ht, hs, hp, ist, now + dur, b)
        if scrub_phys >= 0:
            # Scrub-on-read decides in Python; what it queues waits for this
            # bank's next turn, so deciding after the read is scheduled
            # changes no event.
            ist[SCAN_B] = b
            ist[SCRUB_PHYS] = scrub_phys
            return SCRUB


@njit(cache=True)
def _wake_source(now, ist, ht, hs, hp, src, xs):
    """A request the queue policies completed freed the slot the source waits for."""
    if xs[KS.X_WAKE_SRC] != 0:
        xs[KS.X_WAKE_SRC] = 0
        _push(ht, hs, hp, ist, now, src)


@njit(cache=True)
def source_done(pi, ist, fst, bi, ht, hs, hp):
    """The stream is exhausted: tell every sleeping bank."""
    ist[SRC_DONE] = 1
    ist[SRC_RUN] = 0
    for b in range(pi[P_NB]):
        _wake(b, fst[NOW], bi, ist, fst, ht, hs, hp)


@njit(cache=True)
def _fill(pos, t, base, c_f, c_i, sf, si, free, ist):
    top = ist[FREE_TOP] - 1
    ist[FREE_TOP] = top
    s = free[top]
    sf[s, SF_T] = t
    sf[s, SF_SERVICE] = c_f[pos, 0]
    sf[s, SF_CUR] = c_f[pos, 1]
    sf[s, SF_PRE] = c_f[pos, 2]
    sf[s, SF_PJ] = c_f[pos, 3]
    sf[s, SF_OOP_NS] = c_f[pos, 4]
    for j in range(N_SI):
        si[s, j] = c_i[pos, j]
    if si[s, SI_REQ] >= 0:
        si[s, SI_REQ] += base
    return s


@njit(cache=True)
def _free(s, free, ist):
    free[ist[FREE_TOP]] = s
    ist[FREE_TOP] += 1


@njit(cache=True)
def _complete(s, now, sf, si, done_f, done_i, ist, ht, hs, hp, src):
    n = ist[DONE_N]
    done_f[n, 0] = sf[s, SF_T]          # admission time = arrival (closed loop: hand-over)
    done_f[n, 1] = now
    done_i[n, 0] = si[s, SI_REQ]
    done_i[n, 1] = 0 if si[s, SI_READ] != 0 else 1
    ist[DONE_N] = n + 1
    ist[IN_FLIGHT] -= 1
    if ist[SLOT_WAIT] != 0:
        ist[SLOT_WAIT] = 0
        _push(ht, hs, hp, ist, now, src)


@njit(cache=True)
def _write_start(b, s, draining, now, pi, pf, ist, fst, ht, hs, hp, bi, bf, sf, si, ib, ibh, ibn, rqn,
                 bus_free, pool_level, pq, pqh, pqn, clog):
    """Begin one write or move: cost decided at service, then wait for current."""
    if pi[P_CAS] != 0 and si[s, SI_REQ] != REFRESH and si[s, SI_REQ] != PRESET:
        # Cost decided at service (hint mode without a pre-programmed line:
        # the in-place form); counted in service order like the reference.
        n_set, n_reset = si[s, SI_NSET], si[s, SI_NRESET]
        ist[SET_CELLS] += n_set
        ist[RESET_CELLS] += n_reset
        ist[USER_SET] += n_set
        ist[USER_RESET] += n_reset
        a = min(n_reset, pi[P_PER_RESET]) * pf[F_RESET_UA]
        c = min(n_set, pi[P_PER_SET]) * pf[F_SET_UA]
        sf[s, SF_CUR] = a if a >= c else c
        si[s, SI_RR] = 0
        si[s, SI_SR] = 0
        if sf[s, SF_PRE] > 0 and si[s, SI_REQ] >= 0:
            ist[READ_BITS] += pi[P_EXTRA_BITS]
    bi[b, B_WDRAIN] = 1 if draining else 0
    bf[b, BF_T0] = now
    need = 0.0
    if pi[P_NPOOLS] > 0:
        cur = sf[s, SF_CUR]
        need = cur if cur < pf[F_POOL_CAP] else pf[F_POOL_CAP]
    bf[b, BF_NEED] = need
    if need > 0:
        p = 0 if pi[P_NPOOLS] == 1 else si[s, SI_CH]
        _q_push(pq, pqh, pqn, p, b)
        bi[b, B_KIND] = K_GOT
        if not _trigger_get(p, b, pool_level, pq, pqh, pqn, bf, ist, fst, ht, hs, hp):
            return                      # wait for the current
    _write_go(b, now, pi, pf, ist, fst, ht, hs, hp, bi, bf, sf, si, ib, ibh, ibn, rqn, bus_free, clog)


@njit(cache=True)
def _write_go(b, now, pi, pf, ist, fst, ht, hs, hp, bi, bf, sf, si, ib, ibh, ibn, rqn, bus_free, clog):
    """The write holds its current: bus, programming, cancellation or pausing."""
    s = bi[b, B_SLOT]
    ch = si[s, SI_CH]
    service, pre = sf[s, SF_SERVICE], sf[s, SF_PRE]
    lead = 0.0
    if si[s, SI_BUS] != 0:
        start = bus_free[ch] if bus_free[ch] > now else now
        bus_free[ch] = start + pf[F_BURST]
        lead = bus_free[ch] - now
    prog_start = now + lead + pre
    end = now + lead + service
    # Bus lead plus service, as in the plain bank loop.
    dur = lead + service
    again = 0
    idx = si[s, SI_REQ]
    if (idx >= 0 and bi[b, B_WDRAIN] == 0 and (pi[P_CANCEL] != 0 or pi[P_PAUSE] != 0)
            and pi[P_CAS] == 0):
        # Arrival of the first read that reaches the bank before the end.
        found = False
        t_r = 0.0
        if rqn[b] > 0:
            found = True
            t_r = now
        else:
            for k in range(ibn[b]):
                e = _q_at(ib, ibh, b, k)
                te = sf[e, SF_T]
                if te >= end:
                    break
                if si[e, SI_READ] != 0:
                    found = True
                    t_r = te
                    break
        if found:
            span = end - prog_start
            if pi[P_CANCEL] != 0 and t_r < prog_start + pf[F_CANCEL_BEFORE] * span:
                stop = t_r if t_r > now else now
                dur = stop - now
                if span > 0:
                    d = stop - prog_start
                    done = (d if d > 0.0 else 0.0) / span
                else:
                    done = 0.0
                ist[CANCELS] += 1
                fst[CANC_PJ] += done * sf[s, SF_PJ]
                wasted = np.int64(np.rint(done * si[s, SI_CELLS]))
                ist[CANC_CELLS] += wasted
                n = ist[CLOG_N]
                if n < clog.shape[0]:
                    clog[n, 0] = si[s, SI_PHYS]
                    clog[n, 1] = wasted
                ist[CLOG_N] = n + 1
                si[s, SI_BUS] = 1
                again = 1
            elif pi[P_PAUSE] != 0 and si[s, SI_RR] + si[s, SI_SR] > 0 and t_r > prog_start:
                rr, sr = si[s, SI_RR], si[s, SI_SR]
                rns, sns = pf[F_RESET_NS], pf[F_SET_NS]
                e = t_r - prog_start
                if e < rr * rns:
                    kk = -((-e) // rns)
                    boundary = kk * rns
                    left0, left1 = rr - np.int64(kk), sr
                else:
                    j = -((-(e - rr * rns)) // sns)
                    boundary = rr * rns + j * sns
                    left0, left1 = 0, sr - np.int64(j)
                if left0 + left1 > 0:
                    dur = prog_start + boundary - now
                    ist[PAUSES] += 1
                    sf[s, SF_SERVICE] = left0 * rns + left1 * sns
                    si[s, SI_BUS] = 0
                    sf[s, SF_PRE] = 0.0
                    si[s, SI_RR] = left0
                    si[s, SI_SR] = left1
                    sf[s, SF_PJ] = 0.0
                    si[s, SI_CELLS] = 0
                    again = 1
    if idx == REFRESH:
        fst[REFRESH_BUSY] += dur
    bi[b, B_AGAIN] = again
    bf[b, BF_BUSY] += (now - bf[b, BF_T0]) + dur
    bi[b, B_KIND] = K_WDONE
    _push(ht, hs, hp, ist, now + dur, b)


@njit(cache=True)
def wake(b, at, bi, ist, fst, ht, hs, hp):
    """Wake bank ``b`` (for the refresh agent)."""
    _wake(b, at, bi, ist, fst, ht, hs, hp)


@njit(cache=True)
def wake_all(nb, bi, ist, fst, ht, hs, hp):
    for b in range(nb):
        _wake(b, fst[NOW], bi, ist, fst, ht, hs, hp)


@njit(cache=True)
def push_event(ht, hs, hp, ist, t, pid):
    _push(ht, hs, hp, ist, t, pid)


@njit(cache=True)
def queue_refreshes(b, ch, service, current, phys, sf, si, free, ist, fq, fqh, fqn, now):
    """Append refresh operations to bank ``b``'s refresh queue (slots must be free)."""
    for k in range(ch.size):
        top = ist[FREE_TOP] - 1
        ist[FREE_TOP] = top
        s = free[top]
        sf[s, SF_T] = now
        sf[s, SF_SERVICE] = service[k]
        sf[s, SF_CUR] = current[k]
        sf[s, SF_PRE] = 0.0
        sf[s, SF_PJ] = 0.0
        for j in range(N_SI):
            si[s, j] = 0
        si[s, SI_REQ] = REFRESH
        si[s, SI_CH] = ch[k]
        si[s, SI_ROW] = -1
        si[s, SI_PHYS] = phys[k]
        _q_push(fq, fqh, fqn, b, s)
