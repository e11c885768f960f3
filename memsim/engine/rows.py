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


def count_row_hits(open_rows: np.ndarray, bank: np.ndarray, row: np.ndarray) -> int:
    """Hits among reads given in arrival order; ``open_rows`` (per bank, -1 = none) is updated."""
    if bank.size == 0:
        return 0
    order = np.argsort(bank, kind="stable")
    b, r = bank[order], row[order]
    prev = np.empty_like(r)
    prev[1:] = r[:-1]
    first = np.ones(b.size, bool)
    first[1:] = b[1:] != b[:-1]
    prev[first] = open_rows[b[first]]
    hits = int(np.count_nonzero((r >= 0) & (r == prev)))
    last = np.ones(b.size, bool)
    last[:-1] = b[1:] != b[:-1]
    open_rows[b[last]] = r[last]
    return hits
