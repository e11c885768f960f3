"""The streaming trace reader (text, gzip text, Parquet).

See :mod:`memsim.workload.trace` for the format.  :class:`TraceReader` reads
blocks of whole lines (a helper thread reads and decompresses ahead), lexes
and checks each block with :mod:`memsim.workload.trace_format`, reports or
counts bad rows, and shapes the good ones into chunks with
:mod:`memsim.workload.trace_shape`.  Memory stays bounded by the parse
block, one output chunk and, with hint leads, ``max_lead_ns`` of requests.
"""
from __future__ import annotations

import gzip
import os
import queue
import threading
import weakref
import zlib
from collections.abc import Callable, Generator, Iterator
from contextlib import closing
from functools import partial
from pathlib import Path
from typing import BinaryIO, Self

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from memsim.errors import TraceError
from memsim.workload.chunk import Chunk
from memsim.workload.trace_format import (
    _COLUMN_LIST,
    _E_LONG,
    DEFAULT_BLOCK_BYTES,
    DEFAULT_CHUNK_SIZE,
    DEFAULT_MAX_LEAD_NS,
    MAX_SIZE_LINES,
    OPTIONAL_COLUMNS,
    REQUIRED_COLUMNS,
    _check,
    _describe,
    _filled,
    _lex,
    _Rows,
)
from memsim.workload.trace_shape import _Emitter, _expand, _LeadMerger


def _read_ahead(fh: BinaryIO, size: int, depth: int = 2) -> Iterator[bytes]:
    """``fh.read(size)`` results, read (and decompressed) in a helper thread.

    zlib and file reads release the GIL, so decompression overlaps parsing.
    At most ``depth`` blocks wait in the queue.  Ends after the empty read.

    The helper never outlives the pass: closing or finalizing the generator
    (normal end, an error, ``close()``, garbage collection) stops and joins
    it.  It is not a daemon thread, so interpreter exit waits for it instead
    of killing it in the middle of a read, and it gives up waiting on a full
    queue once the main thread has finished, so that wait is short.
    """
    q: queue.Queue[tuple[bool, bytes | BaseException]] = queue.Queue(maxsize=depth)
    stop = threading.Event()
    main = threading.main_thread()

    def put(item: tuple[bool, bytes | BaseException]) -> bool:
        while not stop.is_set() and main.is_alive():
            try:
                q.put(item, timeout=0.05)
                return True
            except queue.Full:
                continue
        return False

    def work() -> None:
        try:
            while not stop.is_set():
                got = fh.read(size)
                if not put((True, got)) or not got:
                    return
        except Exception as exc:  # noqa: BLE001 - handed to the consumer, which re-raises
            put((False, exc))

    thread = threading.Thread(target=work, name="memsim-trace-read-ahead", daemon=False)
    thread.start()
    try:
        while True:
            ok, item = q.get()
            if not ok:
                assert isinstance(item, BaseException)
                raise item
            assert isinstance(item, bytes)
            yield item
            if not item:
                return
    finally:
        stop.set()
        thread.join()


def _kind_of(path: Path) -> str:
    try:
        with open(path, "rb") as fh:
            magic = fh.read(4)
    except IsADirectoryError:
        raise TraceError(str(path), "a directory", "a trace file") from None
    except FileNotFoundError:
        raise TraceError(str(path), "no such file", "an existing trace file") from None
    except OSError as exc:
        raise TraceError(str(path), f"unreadable file ({exc.strerror})", "a readable trace file") from None
    if magic == b"PAR1":
        return "parquet"
    return "gzip" if magic[:2] == b"\x1f\x8b" else "text"


class TraceReader:
    """A trace file as an iterable of :class:`Chunk` (streamed, re-iterable).

    Parameters
    ----------
    path:
        Text (plain or gzip) or Parquet trace; see the module docstring.
    chunk_size:
        Requests per yielded chunk (the last one may be shorter).
    skip_bad:
        Skip and count malformed rows instead of raising :class:`TraceError`.
    line_bytes:
        Bytes per line; sets the length of ``data`` content.
    footprint:
        If given, every line index must be below it.
    max_lead_ns:
        Largest hint lead accepted; bounds how much the reader holds back.
    block_bytes:
        Text parse block size (memory/speed tuning).

    Attributes
    ----------
    kind:
        ``"text"``, ``"gzip"`` or ``"parquet"``.
    bad_lines, bad_examples, rows, requests:
        Set during iteration: malformed rows skipped, the first few of their
        messages, rows read and requests yielded.
    """

    def __init__(self, path: str | os.PathLike[str], *, chunk_size: int = DEFAULT_CHUNK_SIZE,
                 skip_bad: bool = False, line_bytes: int = 64, footprint: int | None = None,
                 max_lead_ns: float = DEFAULT_MAX_LEAD_NS,
                 block_bytes: int = DEFAULT_BLOCK_BYTES) -> None:
        if chunk_size < 1 or line_bytes < 1 or block_bytes < 1:
            raise ValueError("chunk_size, line_bytes and block_bytes must be >= 1")
        if footprint is not None and footprint < 1:
            raise ValueError("footprint must be >= 1")
        if not max_lead_ns >= 0:
            raise ValueError("max_lead_ns must be >= 0")
        self.path = Path(path)
        self.chunk_size = int(chunk_size)
        self.skip_bad = skip_bad
        self.line_bytes = int(line_bytes)
        self.footprint = footprint
        self.max_lead_ns = float(max_lead_ns)
        self.block_bytes = int(block_bytes)
        self.max_line = max(1 << 20, 3 * MAX_SIZE_LINES * self.line_bytes)
        self.kind = _kind_of(self.path)
        self.bad_lines = 0
        self.bad_examples: list[str] = []
        self.rows = 0
        self.requests = 0
        self._columns: list[str] | None = None
        self._pass: Iterator[Chunk] | None = None
        self._live: weakref.WeakSet[Generator[Chunk, None, None]] = weakref.WeakSet()

    # -- life cycle: every pass owns a read-ahead thread until it ends or is closed
    def close(self) -> None:
        """End every unfinished pass (stopping and joining its read-ahead thread)."""
        self._pass = None
        for gen in list(self._live):
            gen.close()

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __del__(self) -> None:
        try:
            self.close()
        except Exception:  # noqa: BLE001, S110 - nothing to report to during garbage collection
            pass

    # -- shared
    @property
    def columns(self) -> list[str]:
        """Column names in the file (reads the header or schema)."""
        if self._columns is None:
            if self.kind == "parquet":
                self._columns = self._parquet_file().schema_arrow.names
            else:
                with self._open_text() as fh, closing(self._blocks(fh)) as blocks:
                    for block, first in blocks:
                        if self._find_header(block, first) is not None:
                            break
        if self._columns is None:
            raise TraceError(f"{self.path}:1", "no header line",
                             f"a first non-comment line naming the columns: {_COLUMN_LIST}")
        return list(self._columns)

    @property
    def has_data(self) -> bool:
        """Whether the trace carries write content."""
        return "data" in self.columns

    def __iter__(self) -> Iterator[Chunk]:
        """A fresh pass over the file (counters restart)."""
        gen = self._one_pass()
        self._live.add(gen)
        return gen

    def _one_pass(self) -> Generator[Chunk, None, None]:
        self.bad_lines, self.bad_examples, self.rows, self.requests = 0, [], 0, 0
        it = self._iter_parquet() if self.kind == "parquet" else self._iter_text()
        with closing(it):
            for ch in it:
                self.requests += len(ch)
                yield ch

    def __next__(self) -> Chunk:
        """Next chunk of one pass shared by all ``next()`` calls."""
        if self._pass is None:
            self._pass = iter(self)
        return next(self._pass)

    def _bad(self, where: str, found: str, allowed: str, count: int = 1) -> None:
        if not self.skip_bad:
            raise TraceError(where, found, allowed)
        self.bad_lines += count
        if len(self.bad_examples) < 5:
            self.bad_examples.append(TraceError(where, found, allowed).one_line())

    def _report(self, rows: _Rows, prev: np.ndarray,
                row_info: Callable[[int], tuple[str, dict[str, str], str]]) -> None:
        """Raise for the first bad row, or count them all (``skip_bad``).

        ``row_info(k)`` gives where row ``k`` is, its fields and its raw text;
        it is called only for the rows that get a message.
        """
        bad = np.flatnonzero(rows.err)
        if bad.size == 0:
            return
        for k in bad[: 1 if not self.skip_bad else 5 - len(self.bad_examples)]:
            where, fields, raw = row_info(int(k))
            found, allowed = _describe(
                int(rows.err[k]), fields, raw, cols=self._columns or [],
                prev=float(prev[k]), footprint=self.footprint, max_lead_ns=self.max_lead_ns,
                line_bytes=self.line_bytes, max_line=self.max_line,
                binary=self.kind == "parquet")
            self._bad(where, found, allowed, 0)
        self.bad_lines += int(bad.size)

    def _emit_rows(self, rows: _Rows, emitter: _Emitter, merger: _LeadMerger | None,
                   has_data: bool) -> Iterator[Chunk]:
        good = np.flatnonzero(rows.err == 0)
        self.rows += rows.err.size
        if good.size == 0:
            return
        # Expand in slices of about chunk_size requests so that a block of
        # large rows never materializes more than that at once.
        cum = np.cumsum(rows.size[good])
        lo = 0
        while lo < good.size:
            base = cum[lo - 1] if lo else 0
            hi = max(int(np.searchsorted(cum, base + self.chunk_size, side="right")), lo + 1)
            sel = good[lo:hi]
            cols, data = _expand(rows, sel, self.line_bytes, has_data, merger is not None)
            if merger is not None:
                cols, data = merger.push(cols, data, rows.time[sel[-1]] - self.max_lead_ns)
            yield from emitter.push(cols[0], cols[1], cols[2], data)
            lo = hi

    # -- text
    def _open_text(self) -> BinaryIO:
        if self.kind == "gzip":
            return gzip.open(self.path, "rb")
        return open(self.path, "rb")

    def _blocks(self, fh: BinaryIO) -> Iterator[tuple[bytes, int]]:
        """Blocks of whole lines (each ending in \\n) and the number of the first."""
        with closing(_read_ahead(fh, self.block_bytes)) as raw:
            yield from self._whole_lines(raw)

    def _whole_lines(self, raw: Iterator[bytes]) -> Iterator[tuple[bytes, int]]:
        carry = b""
        lineno = 1
        skipping = False                  # inside an over-long line being skipped
        first = True
        while True:
            try:
                got = next(raw)
            except (OSError, EOFError, zlib.error) as exc:
                if self.kind == "gzip":
                    raise TraceError(str(self.path), f"corrupt gzip data near line {lineno} "
                                     f"({exc})", "a complete gzip stream") from None
                raise TraceError(str(self.path), f"a read error near line {lineno} ({exc})",
                                 "a readable file") from None
            if first and got.startswith(b"\xef\xbb\xbf"):
                got = got[3:]             # UTF-8 byte order mark
            first = False
            if skipping:
                cut = got.find(b"\n")
                if cut < 0:
                    if not got:
                        return
                    continue
                got, skipping, lineno = got[cut + 1:], False, lineno + 1
            buf = carry + got
            end = buf.rfind(b"\n") + 1
            if not got:                   # end of file
                if buf:
                    yield buf + b"\n", lineno
                return
            if end == 0 and len(buf) > self.max_line:
                self._bad(f"{self.path}:{lineno}", f"a line longer than {self.max_line} bytes",
                          "shorter lines (is this a text trace?)")
                carry, skipping = b"", True
                continue
            if end:
                block = buf[:end]
                yield block, lineno
                lineno += int(np.count_nonzero(np.frombuffer(block, np.uint8) == 10))
            carry = buf[end:]

    def _find_header(self, block: bytes, first: int) -> int | None:
        """Parse the header if this block has it; return its end offset."""
        pos = 0
        while pos < len(block):
            nl = block.index(b"\n", pos)
            text = block[pos:nl].decode("latin-1").removesuffix("\r")
            lineno = first + block.count(b"\n", 0, pos)
            if text and not text.startswith("#"):
                self._columns = self._parse_header(text, lineno)
                return nl + 1
            pos = nl + 1
        return None

    def _parse_header(self, text: str, lineno: int) -> list[str]:
        where = f"{self.path}:{lineno}"
        names = text.split(",")
        known = REQUIRED_COLUMNS + OPTIONAL_COLUMNS
        for name in names:
            if name not in known:
                raise TraceError(where, f"column {name[:40]!r} in header {text[:80]!r}",
                                 f"columns {_COLUMN_LIST}")
        if len(set(names)) != len(names):
            raise TraceError(where, f"a repeated column in header {text[:80]!r}",
                             "each column at most once")
        missing = [c for c in REQUIRED_COLUMNS if c not in names]
        if missing:
            raise TraceError(where, f"header {text[:80]!r} without {', '.join(missing)}",
                             f"columns {_COLUMN_LIST}")
        return names

    def _iter_text(self) -> Iterator[Chunk]:
        self._columns = None
        cols: list[str] = []
        emitter: _Emitter | None = None
        merger: _LeadMerger | None = None
        last_time = -np.inf
        has_data = False
        with self._open_text() as fh, closing(self._blocks(fh)) as blocks:
            for block, first in blocks:
                if self._columns is None:
                    cut = self._find_header(block, first)
                    if cut is None:
                        continue
                    cols = self._columns or []
                    has_data = "data" in cols
                    emitter = _Emitter(self.chunk_size)
                    if "lead_ns" in cols:
                        merger = _LeadMerger(has_data, self.line_bytes)
                    first += block.count(b"\n", 0, cut)
                    block = block[cut:]
                parsed = self._parse_block(block, first, cols, last_time, has_data)
                if parsed is None:
                    continue
                rows, prev, buf, starts, ends = parsed
                self._report(rows, prev, partial(self._text_row, rows, buf, starts, ends, cols))
                ok = rows.err == 0
                if ok.any():
                    last_time = max(last_time, float(rows.time[ok].max()))
                assert emitter is not None
                yield from self._emit_rows(rows, emitter, merger, has_data)
        if self._columns is None:
            raise TraceError(f"{self.path}:1", "no header line",
                             f"a first non-comment line naming the columns: {_COLUMN_LIST}")
        assert emitter is not None
        if merger is not None:
            rest, data = merger.flush()
            yield from emitter.push(rest[0], rest[1], rest[2], data)
        yield from emitter.flush()

    def _text_row(self, rows: _Rows, buf: bytes, starts: np.ndarray, ends: np.ndarray,
                  cols: list[str], k: int) -> tuple[str, dict[str, str], str]:
        raw = buf[starts[k]:ends[k]].decode("latin-1").removesuffix("\r")
        return f"{self.path}:{rows.lineno[k]}", dict(zip(cols, raw.split(","))), raw

    def _parse_block(self, block: bytes, first: int, cols: list[str], last_time: float,
                     has_data: bool
                     ) -> tuple[_Rows, np.ndarray, bytes, np.ndarray, np.ndarray] | None:
        """Lex and check the data lines of a block; None if it has none.

        Returns the rows, the previous good time of each row, and the data
        lines' buffer with their start and end offsets (for messages).
        """
        b = np.frombuffer(block, np.uint8)
        nl = np.flatnonzero(b == 10)
        if nl.size == 0:
            return None
        starts = np.concatenate([[0], nl[:-1] + 1])
        lens = nl - starts
        head = b[starts]                      # the '\n' itself for an empty line
        skip = (head == 35) | (lens == 0) | ((lens == 1) & (head == 13))
        keep = np.flatnonzero(~skip)
        if keep.size == 0:
            return None
        # Over-long lines are emptied (their newline kept) and marked bad, so
        # the limit holds wherever block boundaries fall.
        too_long = ~skip & (lens > self.max_line)
        if keep.size == nl.size and not too_long.any():
            buf = block
        else:
            mask = np.repeat(~skip & ~too_long, lens + 1)
            mask[nl[too_long]] = True
            buf = b[mask].tobytes()
        flen = np.where(too_long, 0, lens)[keep]
        fends = np.cumsum(flen + 1) - 1
        fstarts = fends - flen
        rows = _lex(buf, fstarts, fends, cols)
        rows.err[too_long[keep]] = _E_LONG
        rows.lineno = first + keep
        prev = _check(rows, last_time, footprint=self.footprint, max_lead_ns=self.max_lead_ns,
                      line_bytes=self.line_bytes, has_data=has_data)
        return rows, prev, buf, fstarts, fends

    # -- parquet
    def _parquet_file(self) -> pq.ParquetFile:
        try:
            # pre_buffer would read ahead every column chunk of the file:
            # memory growing with trace length.
            return pq.ParquetFile(self.path, pre_buffer=False)
        except (pa.ArrowException, OSError) as exc:
            raise TraceError(str(self.path), f"an unreadable Parquet file ({exc})",
                             "a Parquet trace written by memsim") from None

    def _iter_parquet(self) -> Iterator[Chunk]:
        pf = self._parquet_file()
        schema = pf.schema_arrow
        names = schema.names
        self._columns = names
        allowed = "columns time_ns, op, line (required), data (optional)"
        for name in names:
            if name not in ("time_ns", "op", "line", "data"):
                raise TraceError(str(self.path), f"column {name!r}", allowed)
        for name in REQUIRED_COLUMNS:
            if name not in names:
                raise TraceError(str(self.path), f"no column {name!r}", allowed)
        has_data = "data" in names
        if has_data:
            typ = schema.field("data").type
            if not (pa.types.is_fixed_size_binary(typ) and typ.byte_width == self.line_bytes):
                raise TraceError(str(self.path), f"data column of type {typ}",
                                 f"fixed_size_binary[{self.line_bytes}] (line_bytes)")
        emitter = _Emitter(self.chunk_size)
        last_time = -np.inf
        row0 = 1
        try:
            batches = pf.iter_batches(batch_size=1 << 18)
            for batch in batches:
                n = batch.num_rows
                rows = _Rows.empty(n)
                rows.lineno = np.arange(row0, row0 + n)
                try:
                    rows.time = _filled(batch["time_ns"].cast(pa.float64()), np.nan)
                    op = _filled(batch["op"].cast(pa.int64()), -1)
                    rows.line = _filled(batch["line"].cast(pa.int64()), -1)
                except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
                    raise TraceError(str(self.path), f"columns of unusable types ({exc})",
                                     "time_ns float64, op int8, line int64") from None
                rows.op = np.where((op >= 0) & (op <= 2), op, -1).astype(np.int8)
                data = missing = None
                if has_data:
                    col = batch["data"]
                    raw = np.frombuffer(col.buffers()[1], np.uint8)
                    L = self.line_bytes
                    data = raw[col.offset * L:(col.offset + n) * L].reshape(n, L)
                    missing = np.asarray(col.is_null().to_numpy(zero_copy_only=False))
                prev = _check(rows, last_time, footprint=self.footprint,
                              max_lead_ns=self.max_lead_ns, line_bytes=self.line_bytes,
                              has_data=False, data_missing=missing)
                self._report(rows, prev, partial(self._parquet_row, rows, op, missing))
                ok = rows.err == 0
                self.rows += n
                if ok.any():
                    last_time = max(last_time, float(rows.time[ok].max()))
                if ok.all():
                    yield from emitter.push(rows.time, rows.op, rows.line, data)
                else:
                    sel = np.flatnonzero(ok)
                    yield from emitter.push(rows.time[sel], rows.op[sel], rows.line[sel],
                                            None if data is None else data[sel])
                row0 += n
        except (OSError, pa.ArrowException) as exc:
            raise TraceError(str(self.path), f"an unreadable Parquet file ({exc})",
                             "a Parquet trace written by memsim") from None
        yield from emitter.flush()

    def _parquet_row(self, rows: _Rows, op: np.ndarray, missing: np.ndarray | None,
                     k: int) -> tuple[str, dict[str, str], str]:
        fields = {"time_ns": repr(float(rows.time[k])), "op": str(int(op[k])),
                  "line": str(int(rows.line[k])),
                  "data": "" if missing is not None and missing[k] else "x" * 2 * self.line_bytes}
        return f"{self.path}:row {rows.lineno[k]}", fields, f"row {rows.lineno[k]}"


def read_trace(path: str | os.PathLike[str], chunk_size: int = DEFAULT_CHUNK_SIZE,
               skip_bad: bool = False, line_bytes: int = 64, *, footprint: int | None = None,
               max_lead_ns: float = DEFAULT_MAX_LEAD_NS) -> TraceReader:
    """Open a trace for streaming; iterate the result for :class:`Chunk` objects.

    The returned :class:`TraceReader` also reports ``bad_lines`` (rows skipped
    with ``skip_bad=True``) after iteration.  Raises :class:`TraceError` at
    once if the file is missing, and during iteration for malformed content.
    """
    return TraceReader(path, chunk_size=chunk_size, skip_bad=skip_bad, line_bytes=line_bytes,
                       footprint=footprint, max_lead_ns=max_lead_ns)
