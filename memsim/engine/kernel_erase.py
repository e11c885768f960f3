"""Compiled steps of a bank whose work a Python sub-process drives (block erase).

The erase agent (:mod:`memsim.engine.erase_agent`) cleans blocks and places
out-of-place writes in Python, as a generator that yields what the engine's
``take_current``, ``hold`` and ``give_current`` return.  In the fast engine
each of these becomes one pending event of the bank in the kernel's heap,
taken at the moment simpy would schedule it; when the event comes the kernel
returns :data:`~memsim.engine.kernel.BANK_PY` and the engine resumes the
generator.  So the agent's steps keep their place in the event order.
"""
from __future__ import annotations

from numba import njit

from memsim.engine import kernel as K


@njit(cache=True)
def hold(b, dt, bi, ist, fst, ht, hs, hp):
    """Bank ``b`` resumes its sub-process ``dt`` ns from now (a simpy timeout)."""
    bi[b, K.B_KIND] = K.K_PY
    K._push(ht, hs, hp, ist, fst[K.NOW] + dt, b)


@njit(cache=True)
def take_current(p, b, need, bi, bf, pool_level, pq, pqh, pqn, ist, fst, ht, hs, hp):
    """Bank ``b`` asks pool ``p`` for ``need`` uA (a simpy Container get, always waited on).

    The get joins the pool's queue behind waiting writes; once served, its
    event is processed like any other (now if it is served at once).
    """
    bi[b, K.B_KIND] = K.K_PY
    bf[b, K.BF_NEED] = need
    K._q_push(pq, pqh, pqn, p, b)
    if K._trigger_get(p, b, pool_level, pq, pqh, pqn, bf, ist, fst, ht, hs, hp):
        K._push(ht, hs, hp, ist, fst[K.NOW], b)


@njit(cache=True)
def give_current(p, b, need, pf, bi, pool_level, ist, fst, ht, hs, hp):
    """Bank ``b`` returns ``need`` uA to pool ``p`` (a simpy Container put, waited on).

    False if the put would have to wait (not modeled).  The caller serves
    the pool's waiting gets when the event comes, before resuming.
    """
    if pf[K.F_POOL_CAP] - pool_level[p] < need:
        return False
    pool_level[p] += need
    bi[b, K.B_KIND] = K.K_PY
    K._push(ht, hs, hp, ist, fst[K.NOW], b)
    return True


@njit(cache=True)
def serve_pool(p, pool_level, pq, pqh, pqn, bf, ist, fst, ht, hs, hp):
    """A processed put: waiting gets of pool ``p`` are served from the head."""
    K._trigger_get(p, -1, pool_level, pq, pqh, pqn, bf, ist, fst, ht, hs, hp)


@njit(cache=True)
def start_write(b, pi, pf, ist, fst, ht, hs, hp, bi, bf, sf, si, ib, ibh, ibn, rqn,
                bus_free, pool_level, pq, pqh, pqn, clog):
    """The placed write in bank ``b``'s slot starts now (power, bus, programming)."""
    s = bi[b, K.B_SLOT]
    K._write_start(b, s, bi[b, K.B_WDRAIN] != 0, fst[K.NOW], pi, pf, ist, fst, ht, hs, hp, bi, bf,
                   sf, si, ib, ibh, ibn, rqn, bus_free, pool_level, pq, pqh, pqn, clog)
