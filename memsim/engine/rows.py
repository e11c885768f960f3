"""Row-buffer hits of user reads, counted from the request stream.

Both engines serve a bank's reads in arrival order (one FIFO read queue per
bank) and only a read changes a bank's open row (writes, moves and
refreshes leave the row buffer as it is).  Whether a read hits the open row
is therefore decided by the stream alone: it hits when the bank's previous
read opened the same row.  Counting it here, per chunk with numpy, gives
both engines the same count without a counter in either event loop.

This holds only with the queue policies off.  FR-FCFS reorders reads and
lets user writes open rows, and a forwarded read opens none, so with any
policy on the engines count hits where the bank serves each request
(:mod:`memsim.engine.sched`, :mod:`memsim.engine.kernel_sched`) and this
count is not used.
"""
from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True)
def _count(open_rows, bank, row):
    hits = 0
    for i in range(bank.size):
        b = bank[i]
        r = row[i]
        if r >= 0 and r == open_rows[b]:
            hits += 1
        open_rows[b] = r
    return hits


def count_row_hits(open_rows: np.ndarray, bank: np.ndarray, row: np.ndarray) -> int:
    """Hits among reads given in arrival order; ``open_rows`` (per bank, -1 = none) is updated."""
    if bank.size == 0:
        return 0
    return int(_count(open_rows, np.asarray(bank, np.int64), np.asarray(row, np.int64)))
