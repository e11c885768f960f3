"""Request traces: the file format, a streaming reader, a writer and a summary.

Text form
---------
Comma-separated text, optionally gzip-compressed.  Compression is detected
from the gzip magic bytes whatever the file is called; the writer compresses
when the name ends in ``.gz``.  Lines starting with ``#`` are comments and
empty lines are ignored, anywhere in the file.  The first other line is the
header: the column names, separated by commas, in any order, each at most
once.  Every following line is one request row with exactly those columns.

==============  ======  ====================================================
column          needed  content of a row
==============  ======  ====================================================
``time_ns``     yes     arrival time in ns, a decimal number >= 0 (``12``,
                        ``12.5``, ``1.25e3``); non-decreasing down the file
``op``          yes     ``R`` read, ``W`` write, ``H`` write hint
``line``        yes     first logical line index, a whole number >= 0
``size_lines``  no      number of consecutive lines, 1..4096; empty means 1
``data``        no      ``W`` rows: the new content of all ``size_lines``
                        lines as ``2 * size_lines * line_bytes`` hex digits;
                        ``R`` and ``H`` rows: empty.  When the column is
                        present every ``W`` row must carry content.
``lead_ns``     no      ``H`` and ``W`` rows: how long before ``time_ns`` the
                        hint reaches the controller; empty means no lead
==============  ======  ====================================================

A row of ``size_lines = k`` stands for ``k`` requests at the same time, for
lines ``line, line + 1, ..., line + k - 1``.

Hints with a lead.  An ``H`` row with ``lead_ns = L`` announces a write
expected at ``time_ns``; the hint request arrives at ``time_ns - L``.  A ``W``
row with ``lead_ns = L`` is a write that was announced: the reader yields a
hint for the same lines at ``time_ns - L`` and the write at ``time_ns``.
``0 <= L <= min(time_ns, max_lead_ns)``.  The file stays sorted by
``time_ns``; the reader moves hints earlier and keeps its output sorted by
arrival time by holding back at most ``max_lead_ns`` of requests.  Requests
with equal arrival times keep file order; a hint made from a ``W`` row comes
just before that row's own requests.

No spaces and no quotes inside a row.  ``time_ns`` and ``lead_ns`` are
decimals with optional sign, fraction and exponent (``7``, ``+2.5``, ``.5``,
``1e3``); ``line`` and ``size_lines`` are whole numbers.  Hex digits may be
upper or lower case.  Lines may end in LF or CRLF; a UTF-8 byte order mark is
ignored.  A line is at most ``max(1 MiB, 3 * 4096 * line_bytes)`` bytes.
Example::

    # reads, a 2-line write announced 40 ns early and a stand-alone hint
    time_ns,op,line,size_lines,lead_ns
    0,R,4096,,
    100,W,17,2,40
    150.5,R,4097,,
    300,H,900,,
    1.2e3,R,4096,,

Binary form
-----------
Parquet (suffix ``.parquet`` or ``.pq``; detected by the ``PAR1`` magic when
reading), one row per request exactly as the reader yields them: sizes are
already expanded and hints sit at their arrival time.  Columns ``time_ns``
float64, ``op`` int8 (0 read, 1 write, 2 hint), ``line`` int64 and optionally
``data`` fixed-size binary of ``line_bytes`` bytes (ignored on non-writes).
The schema metadata key ``memsim.trace`` holds JSON
``{"version": 1, "line_bytes": L}``.

Errors
------
A malformed row raises :class:`memsim.errors.TraceError` naming
``file:line`` (text; 1-based line of the decompressed text) or
``file:row N`` (Parquet), what was found and what is allowed.  With
``skip_bad=True`` such rows are skipped and counted instead
(:attr:`memsim.workload.trace_reader.TraceReader.bad_lines`).  A missing or unreadable header, a corrupt
gzip stream or Parquet file always raise.

Reading is streamed: memory stays bounded by the parse block (8 MiB of text
by default), one output chunk and, with leads, ``max_lead_ns`` worth of
requests, whatever the length of the trace.  Text is parsed by pyarrow's CSV
reader while a helper thread reads and decompresses the next block.  Only a
block that fails is bisected, with pyarrow, down to pieces of a few hundred
lines, which are parsed line by line to find the bad ones.

Summary
-------
:func:`trace_info` gives counts, the read/write/hint mix, the footprint
(distinct lines), time span, request rate and a histogram of reuse
distances (see :func:`reuse_distances`).

Modules
-------
This module holds the format's description and the public names; the code
is in :mod:`~memsim.workload.trace_format` (grammar, lexing, checks,
messages), :mod:`~memsim.workload.trace_shape` (rows to chunks, hint
leads), :mod:`~memsim.workload.trace_reader`,
:mod:`~memsim.workload.trace_writer` and :mod:`~memsim.workload.trace_info`.
"""
from __future__ import annotations

# The grammar's private pieces are re-exported for the tests that check the
# two parse paths agree.
from memsim.workload.trace_format import (  # noqa: F401
    _ALLOWED,
    _FLOAT_RE,
    _INT_RE,
    DEFAULT_BLOCK_BYTES,
    DEFAULT_CHUNK_SIZE,
    DEFAULT_MAX_LEAD_NS,
    FORMAT_VERSION,
    MAX_SIZE_LINES,
    META_KEY,
    OPTIONAL_COLUMNS,
    REQUIRED_COLUMNS,
    _lex_fast,
    _lex_slow,
)
from memsim.workload.trace_info import reuse_distances, reuse_histogram, trace_info
from memsim.workload.trace_reader import TraceReader, read_trace
from memsim.workload.trace_writer import write_trace

__all__ = ["DEFAULT_BLOCK_BYTES", "DEFAULT_CHUNK_SIZE", "DEFAULT_MAX_LEAD_NS", "FORMAT_VERSION",
           "MAX_SIZE_LINES", "META_KEY", "OPTIONAL_COLUMNS", "REQUIRED_COLUMNS", "TraceReader",
           "read_trace", "reuse_distances", "reuse_histogram", "trace_info", "write_trace"]
