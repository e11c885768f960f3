"""The trace format's grammar: constants, lexing of text rows, value checks, messages.

The format itself is described in :mod:`memsim.workload.trace`.  Rows of a
parse block are held column-wise in :class:`_Rows`; :func:`_lex` fills them
from text (pyarrow on whole blocks, line by line only where a block fails),
:func:`_check` marks rows whose values break the format and
:func:`_describe` words the message for one bad row.  The reader, the
writer and the tests share these definitions, so text written by memsim is
text memsim accepts.
"""
from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pac
import pyarrow.csv as pacsv

from memsim.workload.chunk import HINT, OP_CODES, OP_NAMES, READ, WRITE

REQUIRED_COLUMNS = ("time_ns", "op", "line")
OPTIONAL_COLUMNS = ("size_lines", "data", "lead_ns")
MAX_SIZE_LINES = 4096
DEFAULT_CHUNK_SIZE = 1 << 20
DEFAULT_MAX_LEAD_NS = 1e6
DEFAULT_BLOCK_BYTES = 8 << 20
META_KEY = b"memsim.trace"
FORMAT_VERSION = 1

_OP_LETTERS = [OP_NAMES[c] for c in (READ, WRITE, HINT)]
assert [OP_CODES[s] for s in _OP_LETTERS] == [0, 1, 2]  # index_in relies on it
_COLUMN_LIST = "time_ns, op, line (required); size_lines, data, lead_ns (optional)"

# Grammar of the fields.  The fast path (pyarrow) and the line-by-line path
# must accept exactly the same rows.  pyarrow's number parsing is laxer than
# ours (spaces, "inf", "nan", "0x10"), so the fast path first checks that a
# block holds only the bytes below; over that alphabet pyarrow's float64 and
# int64 grammars are exactly these two expressions (tested in test_trace.py).
_FLOAT_RE = re.compile(r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?\Z")
_INT_RE = re.compile(r"-?[0-9]+\Z")
_ALLOWED = b"0123456789abcdefABCDEF.+-,RWH\n\r"
_NIBBLE = np.full(256, 255, np.uint8)
for _i, _c in enumerate(b"0123456789abcdef"):
    _NIBBLE[_c] = _i
for _i, _c in enumerate(b"ABCDEF"):
    _NIBBLE[_c] = 10 + _i
_HEX_PAIRS = np.frombuffer(b"".join(b"%02x" % i for i in range(256)), np.uint8).reshape(256, 2)
_SLOW_LINES = 256          # below this many lines a failing piece is parsed line by line
_INT64_MAX = 2**63 - 1

_E_FIELDS, _E_TIME, _E_OP, _E_LINE, _E_SIZE, _E_LEAD, _E_DATA, _E_ORDER, _E_LONG = range(1, 10)


@dataclass
class _Rows:
    """Rows of one parse block, one array entry per row (not yet expanded)."""

    lineno: np.ndarray      # file line (text) or 1-based row (Parquet)
    time: np.ndarray        # float64; nan where unreadable
    op: np.ndarray          # int8; -1 where unknown
    line: np.ndarray        # int64
    size: np.ndarray        # int64
    lead: np.ndarray        # float64; nan = no lead
    hexd: np.ndarray        # uint8, hex digits of all rows concatenated
    hexoff: np.ndarray      # int64, n + 1 offsets into hexd
    err: np.ndarray         # int8 error code, 0 = good

    @staticmethod
    def empty(n: int) -> _Rows:
        return _Rows(np.zeros(n, np.int64), np.full(n, np.nan), np.full(n, -1, np.int8),
                     np.zeros(n, np.int64), np.ones(n, np.int64), np.full(n, np.nan),
                     np.zeros(0, np.uint8), np.zeros(n + 1, np.int64), np.zeros(n, np.int8))

    @staticmethod
    def concat(parts: list[_Rows]) -> _Rows:
        if len(parts) == 1:
            return parts[0]
        hexoff = [np.zeros(1, np.int64)]
        base = 0
        for p in parts:
            hexoff.append(p.hexoff[1:] + base)
            base += int(p.hexoff[-1])
        cat = np.concatenate
        return _Rows(cat([p.lineno for p in parts]), cat([p.time for p in parts]),
                     cat([p.op for p in parts]), cat([p.line for p in parts]),
                     cat([p.size for p in parts]), cat([p.lead for p in parts]),
                     cat([p.hexd for p in parts]), cat(hexoff), cat([p.err for p in parts]))


def _ranges(starts: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """Concatenated ``arange(s, s + n)`` for each (s, n), without a Python loop."""
    total = int(lengths.sum())
    if total == 0:
        return np.zeros(0, np.int64)
    first = np.cumsum(lengths) - lengths
    return np.repeat(starts - first, lengths) + np.arange(total)


# ---------------------------------------------------------------- text lexing

def _arrow_types(cols: list[str]) -> dict[str, pa.DataType]:
    kinds = {"time_ns": pa.float64(), "op": pa.string(), "line": pa.int64(),
             "size_lines": pa.int64(), "data": pa.large_string(), "lead_ns": pa.float64()}
    return {c: kinds[c] for c in cols}


def _filled(col: pa.ChunkedArray | pa.Array, value: float) -> np.ndarray:
    """Column as numpy, nulls replaced by ``value``."""
    if col.null_count:
        col = col.fill_null(value)
    return np.asarray(col.to_numpy())


def _lex_fast(buf: pa.Buffer, cols: list[str], n: int) -> _Rows | None:
    """Parse ``n`` newline-terminated data lines with pyarrow; None if any fails."""
    if buf.to_pybytes().translate(None, _ALLOWED):
        return None
    b = np.frombuffer(buf, np.uint8)
    cr = np.flatnonzero(b == 13)
    if cr.size and not (b[cr + 1] == 10).all():   # buf ends in \n, so cr + 1 is in range
        return None
    try:
        tab = pacsv.read_csv(
            pa.BufferReader(buf),
            read_options=pacsv.ReadOptions(column_names=cols, block_size=4 << 20),
            parse_options=pacsv.ParseOptions(quote_char=False, escape_char=False,
                                             double_quote=False, newlines_in_values=False),
            convert_options=pacsv.ConvertOptions(column_types=_arrow_types(cols),
                                                 null_values=[""], strings_can_be_null=True,
                                                 quoted_strings_can_be_null=False))
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError, pa.ArrowTypeError):
        return None
    if tab.num_rows != n:
        return None
    rows = _Rows.empty(n)
    rows.time = _filled(tab["time_ns"], np.nan)
    rows.op = _filled(pac.index_in(tab["op"], value_set=pa.array(_OP_LETTERS)), -1).astype(np.int8)
    rows.line = _filled(tab["line"], -1)
    if "size_lines" in cols:
        rows.size = _filled(tab["size_lines"], 1)
    if "lead_ns" in cols:
        rows.lead = _filled(tab["lead_ns"], np.nan)
    if "data" in cols:
        arr = tab["data"].combine_chunks().fill_null("")
        off = np.frombuffer(arr.buffers()[1], np.int64, count=n + 1, offset=8 * arr.offset)
        vals = np.frombuffer(arr.buffers()[2], np.uint8) if arr.buffers()[2] else np.zeros(0, np.uint8)
        rows.hexd = vals[off[0]:off[-1]]
        rows.hexoff = off.astype(np.int64) - off[0]
    return rows


def _lex_slow(lines: list[bytes], cols: list[str]) -> _Rows:
    """Parse data lines one by one; lexical errors go into ``err``."""
    n = len(lines)
    rows = _Rows.empty(n)
    pos = {c: i for i, c in enumerate(cols)}
    ncol = len(cols)
    hexparts: list[bytes] = []
    hexlen = np.zeros(n, np.int64)
    for k, raw in enumerate(lines):
        s = raw[:-1].decode("latin-1") if raw.endswith(b"\r") else raw.decode("latin-1")
        f = s.split(",")
        if len(f) != ncol:
            rows.err[k] = _E_FIELDS
            continue
        code = 0
        t = f[pos["time_ns"]]
        if t == "":
            pass                                  # left nan: reported by the value checks
        elif _FLOAT_RE.match(t):
            rows.time[k] = float(t)
        else:
            code = code or _E_TIME
        rows.op[k] = OP_CODES.get(f[pos["op"]], -1)
        v = f[pos["line"]]
        if v == "":
            rows.line[k] = -1
        elif _INT_RE.match(v) and -_INT64_MAX - 1 <= int(v) <= _INT64_MAX:
            rows.line[k] = int(v)
        else:
            code = code or _E_LINE
        if "size_lines" in pos:
            v = f[pos["size_lines"]]
            if v != "":
                if _INT_RE.match(v) and -_INT64_MAX - 1 <= int(v) <= _INT64_MAX:
                    rows.size[k] = int(v)
                else:
                    code = code or _E_SIZE
        if "lead_ns" in pos:
            v = f[pos["lead_ns"]]
            if v != "":
                if _FLOAT_RE.match(v):
                    rows.lead[k] = float(v)
                else:
                    code = code or _E_LEAD
        if "data" in pos:
            # Content is checked with the other values in _check, so a row
            # gets the same verdict whichever path parsed it.
            v = f[pos["data"]]
            hexparts.append(v.encode("latin-1"))
            hexlen[k] = len(v)
        rows.err[k] = code
    rows.hexd = np.frombuffer(b"".join(hexparts), np.uint8)
    rows.hexoff = np.concatenate([[0], np.cumsum(hexlen)])
    return rows


def _lex(buf: bytes, starts: np.ndarray, ends: np.ndarray, cols: list[str]) -> _Rows:
    """Lex data lines ``buf[starts[i]:ends[i]]`` (each followed by ``\\n``).

    Tries pyarrow on the whole block; a failing piece is split in halves
    until pieces are small enough to parse line by line.
    """
    pbuf = pa.py_buffer(buf)
    parts: list[_Rows] = []
    todo = [(0, len(starts))]          # explicit stack, so no closure cycle keeps blocks alive
    while todo:
        lo, hi = todo.pop()
        if hi - lo > _SLOW_LINES:
            got = _lex_fast(pbuf.slice(starts[lo], ends[hi - 1] + 1 - starts[lo]), cols, hi - lo)
            if got is not None:
                parts.append(got)
                continue
            mid = (lo + hi) // 2
            todo += [(mid, hi), (lo, mid)]
            continue
        parts.append(_lex_slow([buf[starts[i]:ends[i]] for i in range(lo, hi)], cols))
    return _Rows.concat(parts)


# ---------------------------------------------------------------- value checks

def _check(rows: _Rows, last_time: float, *, footprint: int | None, max_lead_ns: float,
           line_bytes: int, has_data: bool, data_missing: np.ndarray | None = None) -> np.ndarray:
    """Set ``rows.err`` for rows whose values break the format (vectorized).

    Returns the previous accepted time for each row (used in messages about
    order).  The order rule is the sequential one: a row is good only if its
    time is not before any earlier *good* row, so skipping a bad row never
    makes a later row bad.
    """
    err = rows.err

    def mark(bad: np.ndarray, code: int) -> None:
        err[(err == 0) & bad] = code

    time, op, line, size, lead = rows.time, rows.op, rows.line, rows.size, rows.lead
    with np.errstate(invalid="ignore"):
        mark(~(np.isfinite(time) & (time >= 0)), _E_TIME)
        mark(op < 0, _E_OP)
        mark((size < 1) | (size > MAX_SIZE_LINES), _E_SIZE)
        # line + size - 1 must not overflow int64 when the row is expanded
        span_bad = (line < 0) | (line > _INT64_MAX - (np.clip(size, 1, MAX_SIZE_LINES) - 1))
        if footprint is not None:
            span_bad |= line > footprint - np.clip(size, 1, MAX_SIZE_LINES)
        mark(span_bad, _E_LINE)
        has_lead = ~np.isnan(lead)
        mark(has_lead & ((op == READ) | ~(lead >= 0) | (lead > max_lead_ns) | (lead > time)), _E_LEAD)
    if has_data:
        hexlen = np.diff(rows.hexoff)
        want = np.where(op == WRITE, 2 * line_bytes * size, 0)
        nonhex = np.concatenate([[0], np.cumsum(_NIBBLE[rows.hexd] == 255)])
        mark((hexlen != want) | (nonhex[rows.hexoff[1:]] != nonhex[rows.hexoff[:-1]]), _E_DATA)
    if data_missing is not None:
        mark(data_missing & (op == WRITE), _E_DATA)
    ok = err == 0
    run_max = np.maximum.accumulate(np.where(ok, time, -np.inf)) if len(time) else time
    prev = np.maximum(np.concatenate([[last_time], run_max[:-1]]), last_time)
    mark(time < prev, _E_ORDER)
    return prev


def _describe(code: int, fields: dict[str, str], raw: str, *, cols: list[str], prev: float,
              footprint: int | None, max_lead_ns: float, line_bytes: int,
              max_line: int = 0, binary: bool = False) -> tuple[str, str]:
    """(found, allowed) for one bad row."""
    snippet = repr(raw if len(raw) <= 80 else raw[:77] + "...")
    g = fields.get
    if code == _E_FIELDS:
        return (f"{raw.count(',') + 1} fields in {snippet}",
                f"{len(cols)} comma-separated fields: " + ",".join(cols))
    if code == _E_LONG:
        return (f"a line longer than {max_line} bytes",
                "shorter lines (is this a text trace?)")
    if code == _E_TIME:
        return (f"time_ns {g('time_ns', '')!r}",
                "a finite decimal number >= 0, e.g. 12, 12.5 or 1.25e3")
    if code == _E_OP:
        if binary:
            return f"op {g('op', '')}", "0 (read), 1 (write) or 2 (hint)"
        return f"op {g('op', '')!r}", "R (read), W (write) or H (hint)"
    if code == _E_SIZE:
        return (f"size_lines {g('size_lines', '')!r}",
                f"a whole number 1..{MAX_SIZE_LINES}, or empty for 1")
    if code == _E_LINE:
        lim = "" if footprint is None else f" and line + size_lines <= footprint {footprint}"
        size = g("size_lines") or "1"
        return f"line {g('line', '')!r} (size_lines {size})", f"a whole number >= 0{lim}"
    if code == _E_LEAD:
        return (f"lead_ns {g('lead_ns', '')!r} on op {g('op', '')!r} at time_ns {g('time_ns', '')}",
                ("empty, or on W/H rows a number 0 <= lead_ns <= min(time_ns, max_lead_ns "
                 f"{max_lead_ns:g})"))
    if code == _E_DATA:
        d = g("data", "")
        what = "no content" if d == "" else f"{len(d)} characters of content"
        return (f"{what} on op {g('op', '')!r} with size_lines {g('size_lines') or '1'}",
                (f"on W rows 2 * {line_bytes} * size_lines hex digits (line_bytes "
                 f"{line_bytes}); on R and H rows nothing"))
    if code == _E_ORDER:
        return (f"time_ns {g('time_ns', '')} after time_ns {prev:.17g}",
                "time_ns non-decreasing down the file")
    raise AssertionError(f"unknown error code {code}")
