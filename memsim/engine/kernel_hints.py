"""Compiled hand-over of write hints to the banks (hint pre-programming).

Each hint becomes a pre-programming operation (read the line, SET its 0
cells) in its bank's hint queue, served when the bank is idle and the hint's
time has come (see :meth:`memsim.engine.timing.TimingEngine._queue_hints`).
"""
from __future__ import annotations

from numba import njit

from memsim.engine import kernel as K


@njit(cache=True)
def queue_hint(b, t, ch, service, current, pj, cells, phys, sf, si, free, ist, hq, hqh, hqn):
    """Append one pre-programming of line ``phys`` at time ``t`` to bank ``b``'s hint queue."""
    top = ist[K.FREE_TOP] - 1
    ist[K.FREE_TOP] = top
    s = free[top]
    sf[s, K.SF_T] = t
    sf[s, K.SF_SERVICE] = service
    sf[s, K.SF_CUR] = current
    sf[s, K.SF_PRE] = 0.0
    sf[s, K.SF_PJ] = pj
    sf[s, K.SF_OOP_NS] = 0.0
    for j in range(K.N_SI):
        si[s, j] = 0
    si[s, K.SI_REQ] = K.PRESET
    si[s, K.SI_CH] = ch
    si[s, K.SI_ROW] = -1
    si[s, K.SI_PHYS] = phys
    si[s, K.SI_CELLS] = cells
    K._q_push(hq, hqh, hqn, b, s)
