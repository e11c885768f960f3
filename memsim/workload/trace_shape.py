"""Shaping parsed rows into request chunks: expansion, hint leads, fixed-size output.

Used by :class:`memsim.workload.trace_reader.TraceReader`.  A row of
``size_lines = k`` becomes ``k`` requests; a row with a lead gets its hint
moved earlier (:class:`_LeadMerger` holds requests back until no later row
can put a hint before them); :class:`_Emitter` hands out chunks of exactly
the requested size.
"""
from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from memsim.workload.chunk import HINT, WRITE, Chunk
from memsim.workload.trace_format import _NIBBLE, _ranges, _Rows


class _Emitter:
    """Collects requests and hands them out in chunks of exactly ``size``."""

    def __init__(self, size: int) -> None:
        self.size = size
        self.parts: list[Chunk] = []
        self.count = 0

    def push(self, t: np.ndarray, op: np.ndarray, line: np.ndarray,
             data: np.ndarray | None) -> Iterator[Chunk]:
        if t.size == 0:
            return
        self.parts.append(Chunk(t, op, line, data))
        self.count += t.size
        if self.count >= self.size:
            whole = Chunk.concat(self.parts) if len(self.parts) > 1 else self.parts[0]
            n_full = (len(whole) // self.size) * self.size
            for s in range(0, n_full, self.size):
                yield whole.take(slice(s, s + self.size))
            rest = whole.take(slice(n_full, None))
            self.parts = [rest] if len(rest) else []
            self.count = len(rest)

    def flush(self) -> Iterator[Chunk]:
        if self.count:
            yield Chunk.concat(self.parts)
        self.parts, self.count = [], 0


class _LeadMerger:
    """Holds back requests until no later row can put a hint before them."""

    def __init__(self, with_data: bool, line_bytes: int) -> None:
        self.cols: list[np.ndarray] = [np.zeros(0), np.zeros(0, np.int8), np.zeros(0, np.int64),
                                       np.zeros(0, np.int64), np.zeros(0, np.int8)]
        self.data = np.zeros((0, line_bytes), np.uint8) if with_data else None

    def push(self, cols: list[np.ndarray], data: np.ndarray | None,
             threshold: float) -> tuple[list[np.ndarray], np.ndarray | None]:
        merged = [np.concatenate([a, b]) for a, b in zip(self.cols, cols)]
        t, _, _, row, sub = merged
        order = np.lexsort((sub, row, t))       # time, then file row, hint before write
        merged = [a[order] for a in merged]
        mdata = None if data is None else np.concatenate([self.data, data])[order]
        cut = int(np.searchsorted(merged[0], threshold, side="left"))
        self.cols = [a[cut:] for a in merged]
        if mdata is not None:
            self.data = mdata[cut:]
        return [a[:cut] for a in merged], None if mdata is None else mdata[:cut]

    def flush(self) -> tuple[list[np.ndarray], np.ndarray | None]:
        cols, data = self.cols, self.data
        self.cols = [a[:0] for a in cols]
        self.data = None if data is None else data[:0]
        return cols, data


def _decode_hex(rows: _Rows, idx: np.ndarray, line_bytes: int) -> np.ndarray:
    """Content of the rows ``idx`` (validated hex) as (lines, line_bytes) uint8."""
    start = rows.hexoff[idx]
    length = rows.hexoff[idx + 1] - start
    digits = _NIBBLE[rows.hexd[_ranges(start, length)]]
    return ((digits[0::2] << 4) | digits[1::2]).reshape(-1, line_bytes)


def _expand(rows: _Rows, sel: np.ndarray, line_bytes: int, has_data: bool,
            with_lead: bool) -> tuple[list[np.ndarray], np.ndarray | None]:
    """Requests of the good rows ``sel``: [time, op, line, row, sub], data."""
    size = rows.size[sel]
    op_r, t_r, lead_r = rows.op[sel], rows.time[sel].copy(), rows.lead[sel]
    if with_lead:
        has = ~np.isnan(lead_r)
        shift = has & (op_r == HINT)
        t_r[shift] -= lead_r[shift]
    if (size == 1).all():
        rep = None
        t, op, line, row = t_r, op_r, rows.line[sel], rows.lineno[sel]
    else:
        rep = np.repeat(np.arange(sel.size), size)
        t, op, row = t_r[rep], op_r[rep], rows.lineno[sel][rep]
        line = rows.line[sel][rep] + (np.arange(rep.size) - np.repeat(np.cumsum(size) - size, size))
    data = None
    if has_data:
        data = np.zeros((t.size, line_bytes), np.uint8)
        is_w = op_r == WRITE
        if is_w.any():
            data[is_w if rep is None else is_w[rep]] = _decode_hex(rows, sel[is_w], line_bytes)
    sub = np.ones(t.size, np.int8)
    cols = [t, op, line, row, sub]
    if with_lead:
        extra = has & (op_r == WRITE)
        if extra.any():
            k = size[extra]
            er = np.repeat(np.flatnonzero(extra), k)
            first = np.repeat(rows.line[sel][extra] - (np.cumsum(k) - k), k)
            hint = [rows.time[sel][er] - lead_r[er], np.full(er.size, HINT, np.int8),
                    first + np.arange(er.size), rows.lineno[sel][er], np.zeros(er.size, np.int8)]
            cols = [np.concatenate([a, b]) for a, b in zip(cols, hint)]
            if data is not None:
                data = np.concatenate([data, np.zeros((er.size, line_bytes), np.uint8)])
    return cols, data
