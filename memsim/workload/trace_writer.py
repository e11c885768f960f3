"""Writing request chunks to a trace file (text, gzip text or Parquet), atomically.

See :mod:`memsim.workload.trace` for the format.  Text rows merge runs of
consecutive lines with equal time and op (``size_lines``); Parquet holds one
row per request.
"""
from __future__ import annotations

import gzip
import json
import os
from collections.abc import Iterable
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pac
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from memsim.workload.chunk import WRITE, Chunk
from memsim.workload.trace_format import (
    _HEX_PAIRS,
    _OP_LETTERS,
    DEFAULT_CHUNK_SIZE,
    FORMAT_VERSION,
    MAX_SIZE_LINES,
    META_KEY,
)


def _check_chunk(ch: Chunk, last: float, line_bytes: int, with_data: bool) -> float:
    n = len(ch)
    if ch.op.size != n or ch.line.size != n:
        raise ValueError("chunk columns differ in length")
    if n == 0:
        return last
    t = ch.time_ns
    if not (np.isfinite(t).all() and t[0] >= max(last, 0) and (np.diff(t) >= 0).all()):
        raise ValueError("chunk times must be finite, >= 0 and non-decreasing")
    if ((ch.op < 0) | (ch.op > 2)).any() or (ch.line < 0).any():
        raise ValueError("chunk op must be 0, 1 or 2 and line >= 0")
    if with_data and (ch.data is None or ch.data.shape != (n, line_bytes)
                      or ch.data.dtype != np.uint8):
        raise ValueError(f"with_data=True needs uint8 data of shape (n, {line_bytes})")
    return float(t[-1])


def _text_table(ch: Chunk, with_data: bool, line_bytes: int) -> pa.Table:
    """One row per run of consecutive lines with equal time and op."""
    t, op, line = ch.time_ns, ch.op, ch.line
    n = len(ch)
    brk = np.ones(n, bool)
    brk[1:] = (t[1:] != t[:-1]) | (op[1:] != op[:-1]) | (line[1:] != line[:-1] + 1)
    starts = np.flatnonzero(brk)
    sizes = np.diff(np.append(starts, n))
    if sizes.max() > MAX_SIZE_LINES:
        brk[(np.arange(n) - np.repeat(starts, sizes)) % MAX_SIZE_LINES == 0] = True
        starts = np.flatnonzero(brk)
        sizes = np.diff(np.append(starts, n))
    cols = {"time_ns": pa.array(t[starts]),
            "op": pac.take(pa.array(_OP_LETTERS), pa.array(op[starts])),
            "line": pa.array(line[starts]), "size_lines": pa.array(sizes)}
    if with_data:
        assert ch.data is not None
        is_w = op[starts] == WRITE
        hexlen = np.where(is_w, 2 * line_bytes * sizes, 0)
        offsets = np.concatenate([[0], np.cumsum(hexlen)]).astype(np.int64)
        digits = _HEX_PAIRS[ch.data[op == WRITE]].tobytes()
        cols["data"] = pa.LargeStringArray.from_buffers(
            len(starts), pa.py_buffer(offsets), pa.py_buffer(digits))
    return pa.table(cols)


def write_trace(path: str | os.PathLike[str], chunks: Iterable[Chunk], line_bytes: int = 64,
                with_data: bool = False, *, compress_level: int = 6, comment: str = "") -> int:
    """Write requests to a trace file, atomically; return the number written.

    The form follows the suffix: ``.parquet``/``.pq`` Parquet, ``.gz`` gzip
    text, anything else plain text.  Text rows merge runs of consecutive
    lines with equal time and op into one row (``size_lines``); hints are
    written as ``H`` rows at their arrival time.  With ``with_data`` the
    content of writes is stored (chunks must carry ``data``).  ``comment``
    (say, where the trace came from) goes into ``#`` lines before the
    header of a text trace, or under ``"comment"`` in a Parquet trace's
    metadata.  The file appears under its name only when complete (temp
    file + ``os.replace``); the same requests give the same bytes (the
    gzip header holds no time stamp).

    Raises
    ------
    ValueError
        If the chunks break the :class:`Chunk` contract (a bug in the caller).
    """
    path = Path(path)
    suffix = path.suffix.lower()
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{os.urandom(4).hex()}.tmp")
    try:
        if suffix in (".parquet", ".pq"):
            n = _write_parquet(tmp, chunks, line_bytes, with_data, comment)
        else:
            n = _write_text(tmp, chunks, line_bytes, with_data,
                            compress_level if suffix == ".gz" else None, comment)
        with open(tmp, "rb") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return n


def _write_text(tmp: Path, chunks: Iterable[Chunk], line_bytes: int, with_data: bool,
                level: int | None, comment: str = "") -> int:
    header = "time_ns,op,line,size_lines" + (",data" if with_data else "")
    head = "".join(f"# {c}\n".replace("# \n", "#\n") for c in comment.splitlines()) + header + "\n"
    n, last = 0, -np.inf
    with open(tmp, "wb") as raw, (
            gzip.GzipFile(filename="", mode="wb", compresslevel=level, fileobj=raw, mtime=0)
            if level is not None else raw) as sink:
        sink.write(head.encode())
        writer = None
        for ch in chunks:
            last = _check_chunk(ch, last, line_bytes, with_data)
            if len(ch) == 0:
                continue
            tab = _text_table(ch, with_data, line_bytes)
            if writer is None:
                writer = pacsv.CSVWriter(sink, tab.schema, write_options=pacsv.WriteOptions(
                    include_header=False, quoting_style="none"))
            writer.write_table(tab)
            n += len(ch)
        if writer is not None:
            writer.close()
    return n


def _write_parquet(tmp: Path, chunks: Iterable[Chunk], line_bytes: int, with_data: bool,
                   comment: str = "") -> int:
    fields = [("time_ns", pa.float64()), ("op", pa.int8()), ("line", pa.int64())]
    if with_data:
        fields.append(("data", pa.binary(line_bytes)))
    info: dict = {"version": FORMAT_VERSION, "line_bytes": line_bytes}
    if comment:
        info["comment"] = comment
    meta = {META_KEY: json.dumps(info).encode()}
    schema = pa.schema(fields, metadata=meta)
    n, last = 0, -np.inf
    pending: list[pa.Table] = []
    held = 0
    with pq.ParquetWriter(tmp, schema, compression="zstd") as writer:
        for ch in chunks:
            last = _check_chunk(ch, last, line_bytes, with_data)
            if len(ch) == 0:
                continue
            arrays = [pa.array(ch.time_ns), pa.array(ch.op), pa.array(ch.line)]
            if with_data:
                assert ch.data is not None
                arrays.append(pa.FixedSizeBinaryArray.from_buffers(
                    pa.binary(line_bytes), len(ch),
                    [None, pa.py_buffer(np.ascontiguousarray(ch.data))]))
            pending.append(pa.Table.from_arrays(arrays, schema=schema))
            held += len(ch)
            n += len(ch)
            if held >= DEFAULT_CHUNK_SIZE:       # row groups of about a million rows
                writer.write_table(pa.concat_tables(pending))
                pending, held = [], 0
        if pending:
            writer.write_table(pa.concat_tables(pending))
    return n
