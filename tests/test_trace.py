"""Tests of the trace format, reader, writer and trace summary."""
from __future__ import annotations

import gzip
import io
import itertools
import os
import re
import tracemalloc
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from memsim.errors import TraceError
from memsim.workload import trace as T
from memsim.workload.chunk import HINT, READ, WRITE, Chunk
from memsim.workload.trace import (
    TraceReader,
    read_trace,
    reuse_distances,
    reuse_histogram,
    trace_info,
    write_trace,
)

HEADER = "time_ns,op,line,size_lines,data,lead_ns"


def _random_chunk(rng: np.random.Generator, n: int, line_bytes: int = 8) -> Chunk:
    """Requests with ties in time and runs of consecutive lines."""
    t = np.cumsum(rng.integers(0, 3, n) * rng.choice([1.0, 0.25, 1e-3], n)) + rng.random() * 7
    op = rng.integers(0, 3, n).astype(np.int8)
    line = rng.integers(0, 1 << 40, n)
    run = rng.random(n) < 0.5                   # continue the previous request's run
    run[0] = False
    for i in np.flatnonzero(run):
        t[i], op[i], line[i] = t[i - 1], op[i - 1], line[i - 1] + 1
    data = rng.integers(0, 256, (n, line_bytes), dtype=np.uint8)
    return Chunk(t, op, line, data)


def _read_all(path: Path | str, **kw) -> tuple[Chunk, TraceReader]:
    r = TraceReader(path, **kw)
    chunks = list(r)
    return Chunk.concat(chunks), r


def _same(a: Chunk, b: Chunk, data: bool = False) -> None:
    np.testing.assert_array_equal(a.time_ns, b.time_ns)
    np.testing.assert_array_equal(a.op, b.op)
    np.testing.assert_array_equal(a.line, b.line)
    if data:
        assert a.data is not None and b.data is not None
        w = a.op == WRITE
        np.testing.assert_array_equal(a.data[w], b.data[w])


# ---------------------------------------------------------------- round trips

@pytest.mark.parametrize("name", ["t.csv", "t.trace.gz", "t.parquet"])
@pytest.mark.parametrize("with_data", [False, True])
def test_round_trip(tmp_path: Path, name: str, with_data: bool) -> None:
    rng = np.random.default_rng(7)
    ch = _random_chunk(rng, 3000)
    parts = [ch.take(slice(0, 1000)), ch.take(slice(1000, 1000)), ch.take(slice(1000, None))]
    path = tmp_path / name
    assert write_trace(path, parts, line_bytes=8, with_data=with_data) == 3000
    for chunk_size in (1, 999, 1 << 20):
        got, r = _read_all(path, chunk_size=chunk_size, line_bytes=8)
        _same(got, ch, with_data)
        assert (got.data is not None) == with_data
        assert r.requests == 3000 and r.bad_lines == 0
    sizes = [len(c) for c in read_trace(path, chunk_size=999, line_bytes=8)]
    assert sizes == [999, 999, 999, 3]
    it = read_trace(path, chunk_size=2000, line_bytes=8)       # also a plain iterator
    assert len(next(it)) == 2000 and len(next(it)) == 1000
    with pytest.raises(StopIteration):
        next(it)


def test_text_merges_runs_and_detects_gzip_by_magic(tmp_path: Path) -> None:
    ch = Chunk([5.0, 5.0, 5.0, 6.0], [WRITE, WRITE, WRITE, READ], [10, 11, 12, 13])
    write_trace(tmp_path / "a.gz", [ch])
    text = gzip.decompress((tmp_path / "a.gz").read_bytes()).decode()
    assert text.splitlines() == ["time_ns,op,line,size_lines", "5,W,10,3", "6,R,13,1"]
    os.replace(tmp_path / "a.gz", tmp_path / "a.csv")      # suffix no longer says gzip
    got, r = _read_all(tmp_path / "a.csv")
    assert r.kind == "gzip"
    _same(got, ch)


def test_hand_written_file(tmp_path: Path) -> None:
    path = tmp_path / "h.csv"
    path.write_bytes(b"\xef\xbb\xbf# a comment before the header\r\n\r\n"
                     b"op,line,time_ns,size_lines,data\r\n"
                     b"R,7,0,,\r\n"
                     b"# inside\n\n"
                     b"W,100,2.5e1,2,000102030405060708090a0b0c0d0e0f\n"
                     b"H,9,25,3,\n"
                     b"R,8,1e2,,")                          # no final newline
    got, r = _read_all(path, line_bytes=8)
    np.testing.assert_array_equal(got.time_ns, [0, 25, 25, 25, 25, 25, 100])
    np.testing.assert_array_equal(got.op, [READ, WRITE, WRITE, HINT, HINT, HINT, READ])
    np.testing.assert_array_equal(got.line, [7, 100, 101, 9, 10, 11, 8])
    assert got.data is not None
    assert got.data[1].tolist() == list(range(8)) and got.data[2].tolist() == list(range(8, 16))
    assert r.columns == ["op", "line", "time_ns", "size_lines", "data"] and r.rows == 4


def _lead_reference(rows: list[tuple[float, str, int, int, float | None]]) -> list[tuple]:
    """Expand rows the slow obvious way: sort by (arrival, file row, hint first)."""
    out = []
    for k, (t, op, line, size, lead) in enumerate(rows):
        for j in range(size):
            if op == "W" and lead is not None:
                out.append((t - lead, k, 0, j, HINT, line + j))
            arrival = t - lead if (op == "H" and lead is not None) else t
            out.append((arrival, k, 1, j, {"R": READ, "W": WRITE, "H": HINT}[op], line + j))
    out.sort(key=lambda x: x[:4])
    return [(x[0], x[4], x[5]) for x in out]


def test_lead_moves_hints_earlier_across_blocks(tmp_path: Path) -> None:
    rng = np.random.default_rng(3)
    rows, t = [], 0.0
    for _ in range(400):
        t += float(rng.choice([0.0, 1.0, 7.5]))
        op = str(rng.choice(["R", "W", "H"]))
        lead = None if op == "R" or rng.random() < 0.3 else float(min(t, rng.integers(0, 50)))
        rows.append((t, op, int(rng.integers(0, 100)), int(rng.integers(1, 4)), lead))
    text = "time_ns,op,line,size_lines,lead_ns\n" + "".join(
        f"{t!r},{op},{line},{size},{'' if lead is None else repr(lead)}\n"
        for t, op, line, size, lead in rows)
    path = tmp_path / "lead.csv"
    path.write_text(text)
    want = _lead_reference(rows)
    for block, chunk_size in ((40, 3), (1000, 17), (1 << 20, 1 << 20)):
        got, _ = _read_all(path, block_bytes=block, chunk_size=chunk_size, max_lead_ns=50)
        assert list(zip(got.time_ns.tolist(), got.op.tolist(), got.line.tolist())) == want
        assert (np.diff(got.time_ns) >= 0).all()


def test_lead_with_content(tmp_path: Path) -> None:
    path = tmp_path / "ld.csv"
    path.write_text(HEADER + "\n"
                    "10,W,5,2,aabbccdd,4\n"          # hint for 5, 6 at 6; writes at 10
                    "11,R,1,,,\n"
                    "12,W,9,1,0102,\n"
                    "13,H,3,1,,13\n")               # hint arriving at 0
    r = TraceReader(path, line_bytes=2, block_bytes=20, chunk_size=2)
    assert r.has_data and r.columns == HEADER.split(",")
    got = Chunk.concat(list(r))
    assert got.time_ns.tolist() == [0, 6, 6, 10, 10, 11, 12]
    assert got.op.tolist() == [HINT, HINT, HINT, WRITE, WRITE, READ, WRITE]
    assert got.line.tolist() == [3, 5, 6, 5, 6, 1, 9]
    assert got.data is not None
    assert got.data[3:5].tolist() == [[0xAA, 0xBB], [0xCC, 0xDD]]
    assert got.data[6].tolist() == [1, 2]
    assert got.data[:3].tolist() == [[0, 0]] * 3   # hints carry no content


def test_example_in_module_docstring(tmp_path: Path) -> None:
    example = T.__doc__.split("Example::")[1].split("Binary form")[0]
    lines = [ln.strip() for ln in example.strip().splitlines()]
    (tmp_path / "ex.csv").write_text("\n".join(lines) + "\n")
    got, _ = _read_all(tmp_path / "ex.csv")
    assert list(zip(got.time_ns.tolist(), got.op.tolist(), got.line.tolist())) == [
        (0.0, READ, 4096), (60.0, HINT, 17), (60.0, HINT, 18), (100.0, WRITE, 17),
        (100.0, WRITE, 18), (150.5, READ, 4097), (300.0, HINT, 900), (1200.0, READ, 4096)]


# ---------------------------------------------------------------- bad input

BAD_ROWS = [
    ("1,R,5,1,,,", "fields"),
    ("x,R,5,1,,", "time_ns 'x'"),
    ("-1,R,5,1,,", "time_ns '-1'"),
    ("1e999,R,5,1,,", "time_ns"),
    ("1,Q,5,1,,", "op 'Q'"),
    ("1,r,5,1,,", "op 'r'"),
    ("1,R,-5,1,,", "line '-5'"),
    ("1,R,5.5,1,,", "line '5.5'"),
    ("1,R,5,0,,", "size_lines '0'"),
    ("1,R,5,99999,,", "size_lines"),
    ("1,R,5,1,,3", "lead_ns '3' on op 'R'"),
    ("1,H,5,1,,3", "lead_ns"),                 # lead longer than the time since 0
    ("1,W,5,1,,", "no content"),
    ("1,W,5,1,00ff,", "4 characters"),
    ("1,R,5,1,00,", "2 characters"),
    ("1,W,5,1,zz00000000000000,", "16 characters"),
    ("0.5,R,5,1,,", "after time_ns 1"),
    ("1,R,5,1,,\x00", "lead_ns"),
    ("1, R,5,1,,", "op ' R'"),
]


@pytest.mark.parametrize("bad,needle", BAD_ROWS)
@pytest.mark.parametrize("where", [1, 1500])       # small block (slow) or inside a big one
def test_bad_row_names_file_line(tmp_path: Path, bad: str, needle: str, where: int) -> None:
    good = [f"1,R,{i},1,," for i in range(3000)]
    lines = good[:where] + [bad] + good[where:]
    path = tmp_path / "bad.csv"
    path.write_text("# comment\n" + HEADER + "\n" + "\n".join(lines) + "\n")
    lineno = 2 + where + 1
    with pytest.raises(TraceError) as exc:
        list(read_trace(path, line_bytes=8, footprint=10_000))
    assert exc.value.where == f"{path}:{lineno}"
    assert needle in exc.value.found, exc.value.found
    assert exc.value.allowed
    r = TraceReader(path, line_bytes=8, footprint=10_000, skip_bad=True)
    got = Chunk.concat(list(r))
    assert r.bad_lines == 1 and len(got) == 3000 and r.rows == 3001
    assert r.bad_examples[0].startswith(f"{path}:{lineno}: found")


def test_footprint_checks_whole_span(tmp_path: Path) -> None:
    path = tmp_path / "f.csv"
    path.write_text("time_ns,op,line,size_lines\n0,R,6,4\n1,R,7,4\n")
    with pytest.raises(TraceError, match=r"f.csv:3: found line '7' \(size_lines 4\).*footprint 10"):
        list(read_trace(path, footprint=10))


def test_skip_bad_counts_and_keeps_order_rule(tmp_path: Path) -> None:
    path = tmp_path / "s.csv"
    path.write_text("time_ns,op,line\n1,R,1\n9,X,2\n2,R,3\n1.5,R,4\n3,W,5\n" + "a" * 70 + "\n")
    r = TraceReader(path, skip_bad=True)
    got = Chunk.concat(list(r))
    # 9,X is bad for its op, so it does not raise the time bar; 1.5 < 2 is bad.
    assert got.line.tolist() == [1, 3, 5] and r.bad_lines == 3
    assert len(r.bad_examples) == 3 and ":3:" in r.bad_examples[0]


def test_over_long_line(tmp_path: Path) -> None:
    path = tmp_path / "long.csv"
    path.write_bytes(b"time_ns,op,line\n0,R,1\n" + b"7" * (3 << 20) + b"\n1,R,2\n")
    for block in (1 << 16, 8 << 20):
        with pytest.raises(TraceError, match=r"long.csv:3: found a line longer than"):
            list(TraceReader(path, block_bytes=block))
        r = TraceReader(path, block_bytes=block, skip_bad=True)
        assert Chunk.concat(list(r)).line.tolist() == [1, 2] and r.bad_lines == 1


@pytest.mark.parametrize("content,where,needle", [
    (b"", ":1", "no header"),
    (b"# only a comment\n", ":1", "no header"),
    (b"time_ns,op\n0,R\n", ":1", "without line"),
    (b"#c\ntime_ns,op,line,addr\n", ":2", "column 'addr'"),
    (b"time_ns,op,line,op\n", ":1", "repeated"),
    (b"\x00\x01\x02garbage", ":1", "column"),
])
def test_bad_header(tmp_path: Path, content: bytes, where: str, needle: str) -> None:
    path = tmp_path / "h.csv"
    path.write_bytes(content)
    with pytest.raises(TraceError) as exc:
        list(read_trace(path, skip_bad=True))
    assert exc.value.where == f"{path}{where}" and needle in exc.value.found


def test_missing_and_corrupt_files(tmp_path: Path) -> None:
    with pytest.raises(TraceError, match="no such file"):
        read_trace(tmp_path / "nope.csv")
    with pytest.raises(TraceError, match="directory"):
        read_trace(tmp_path)
    ch = _random_chunk(np.random.default_rng(1), 20000)
    write_trace(tmp_path / "c.csv.gz", [ch])
    raw = (tmp_path / "c.csv.gz").read_bytes()
    (tmp_path / "c.csv.gz").write_bytes(raw[: len(raw) // 2])
    with pytest.raises(TraceError, match="gzip"):
        list(read_trace(tmp_path / "c.csv.gz"))
    write_trace(tmp_path / "c.parquet", [ch])
    raw = (tmp_path / "c.parquet").read_bytes()
    (tmp_path / "c.parquet").write_bytes(raw[: len(raw) // 2])
    with pytest.raises(TraceError, match="Parquet"):
        list(read_trace(tmp_path / "c.parquet"))


def test_parquet_bad_rows_and_schema(tmp_path: Path) -> None:
    path = tmp_path / "b.parquet"
    pq.write_table(pa.table({"time_ns": [0.0, 1.0, 2.0, 1.5], "op": pa.array([0, 5, 1, 0], pa.int8()),
                             "line": pa.array([1, 2, 3, 4], pa.int64())}), path)
    with pytest.raises(TraceError) as exc:
        list(read_trace(path))
    assert exc.value.where == f"{path}:row 2" and "op" in exc.value.found
    r = TraceReader(path, skip_bad=True)
    assert Chunk.concat(list(r)).line.tolist() == [1, 3] and r.bad_lines == 2
    pq.write_table(pa.table({"time_ns": [0.0], "op": pa.array([0], pa.int8())}), path)
    with pytest.raises(TraceError, match="no column 'line'"):
        list(read_trace(path))
    write_trace(path, [_random_chunk(np.random.default_rng(2), 10)], line_bytes=8, with_data=True)
    with pytest.raises(TraceError, match=r"fixed_size_binary\[64\]"):
        list(read_trace(path, line_bytes=64))


# ---------------------------------------------------------------- fuzzing

_NEAR = "0123456789.eE+-,RWHabcdef"


def _near_valid_line() -> st.SearchStrategy[str]:
    num = st.one_of(st.integers(0, 10**6).map(str), st.floats(0, 1e6).map(repr),
                    st.text(_NEAR, max_size=6))
    return st.tuples(num, st.sampled_from(["R", "W", "H", "", "X", "RW"]), num,
                     st.one_of(st.just(""), st.integers(-1, 5).map(str), st.text(_NEAR, max_size=3)),
                     st.one_of(st.just(""), st.just("00" * 8), st.just("0f" * 16),
                               st.text("0123456789abcdefg", max_size=34)),
                     st.one_of(st.just(""), num)).map(",".join)


_GARBAGE = st.one_of(
    _near_valid_line(),
    st.text(st.characters(codec="utf-8", exclude_characters="\n"), max_size=40),
    st.text(",0123456789 \t\r#.eE+-RWHxn", max_size=30),
)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(lines=st.lists(_GARBAGE, min_size=0, max_size=40), crlf=st.booleans())
def test_fuzz_only_trace_errors_naming_file_line(tmp_path: Path, lines: list[str],
                                                 crlf: bool) -> None:
    nl = "\r\n" if crlf else "\n"
    path = tmp_path / "fuzz.csv"
    path.write_bytes((HEADER + nl + nl.join(lines) + nl).encode("utf-8", "surrogatepass"))
    n_lines = 1 + len(lines)
    try:
        list(read_trace(path, line_bytes=8, max_lead_ns=1e5))
    except TraceError as exc:
        m = re.fullmatch(re.escape(str(path)) + r":(\d+)", exc.where)
        assert m and 2 <= int(m.group(1)) <= n_lines + 1, exc.where
        assert exc.found and exc.allowed
    # Skipping never raises and never depends on where blocks are cut.
    outs = []
    for block in (16, 1 << 20):
        got, r = _read_all(path, line_bytes=8, max_lead_ns=1e5, skip_bad=True,
                           block_bytes=block, chunk_size=5)
        outs.append((got.time_ns.tolist(), got.op.tolist(), got.line.tolist(), r.bad_lines))
    assert outs[0] == outs[1]


@settings(max_examples=300, deadline=None)
@given(lines=st.lists(_near_valid_line(), min_size=1, max_size=20))
def test_fast_and_line_parsers_agree(lines: list[str]) -> None:
    cols = HEADER.split(",")
    raw = [ln.encode() for ln in lines]
    buf = b"".join(r + b"\n" for r in raw)
    fast = T._lex_fast(pa.py_buffer(buf), cols, len(raw))
    slow = T._lex_slow(raw, cols)
    if fast is None:
        # pyarrow may only refuse a block with a byte outside its alphabet or
        # a row the line parser also finds malformed
        assert slow.err.any() or buf.translate(None, T._ALLOWED)
        return
    assert not slow.err.any()
    for name in ("time", "op", "line", "size", "lead", "hexd", "hexoff"):
        np.testing.assert_array_equal(getattr(fast, name), getattr(slow, name), err_msg=name)


def test_number_grammar_matches_pyarrow_exhaustively() -> None:
    # Over the bytes a fast-path block may hold, pyarrow's float64/int64
    # parsing accepts exactly _FLOAT_RE / _INT_RE (all strings up to 4 chars).
    alpha = "01.eE+-a"
    strings = ["".join(p) for k in range(1, 5) for p in itertools.product(alpha, repeat=k)]
    for typ, rx in ((pa.float64(), T._FLOAT_RE), (pa.int64(), T._INT_RE)):
        opts = pacsv.ConvertOptions(column_types={"x": typ}, null_values=[""])
        for s in strings:
            try:
                pacsv.read_csv(io.BytesIO(f"x\n{s}\n".encode()), convert_options=opts)
                ok = True
            except pa.ArrowInvalid:
                ok = False
            assert ok == bool(rx.match(s)), (typ, s)


# ---------------------------------------------------------------- writer

def test_writer_is_atomic_and_checks_chunks(tmp_path: Path) -> None:
    path = tmp_path / "w.csv"
    path.write_text("old content\n")

    def chunks():
        yield Chunk([1.0, 2.0], [0, 0], [1, 2])
        yield Chunk([1.0], [0], [3])                         # goes back in time

    with pytest.raises(ValueError, match="non-decreasing"):
        write_trace(path, chunks())
    assert path.read_text() == "old content\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["w.csv"]
    with pytest.raises(ValueError, match="with_data"):
        write_trace(tmp_path / "d.parquet", [Chunk([1.0], [1], [1])], with_data=True)
    assert write_trace(path, []) == 0
    assert path.read_text() == "time_ns,op,line,size_lines\n"
    assert len(Chunk.concat(list(read_trace(path)))) == 0


def test_reading_memory_is_bounded(tmp_path: Path) -> None:
    # 600k requests (~10 MB of arrays) read in 4k chunks: the numpy/Python
    # memory traced while streaming must stay far below the whole trace.
    rng = np.random.default_rng(5)
    n = 600_000
    ch = Chunk(np.cumsum(rng.random(n)), rng.integers(0, 3, n), rng.integers(0, 1 << 20, n))
    write_trace(tmp_path / "m.csv", [ch])
    tracemalloc.start()
    count = 0
    for c in TraceReader(tmp_path / "m.csv", chunk_size=4096, block_bytes=1 << 16):
        count += len(c)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert count == n
    assert peak < 2_000_000, peak


# ---------------------------------------------------------------- summary

def _mattson(lines: list[int]) -> list[int]:
    # LRU stack distance by the stack algorithm of Mattson, Gecsei, Slutz and
    # Traiger, "Evaluation techniques for storage hierarchies", IBM Systems
    # Journal 9(2), 1970: depth of the line in the LRU stack, -1 if absent.
    stack: list[int] = []
    out = []
    for x in lines:
        if x in stack:
            d = len(stack) - 1 - stack.index(x)
            stack.remove(x)
        else:
            d = -1
        out.append(d)
        stack.append(x)
    return out


@settings(max_examples=100, deadline=None)
@given(st.lists(st.integers(0, 12), max_size=300))
def test_reuse_distance_matches_stack_algorithm(lines: list[int]) -> None:
    assert reuse_distances(np.array(lines, np.int64)).tolist() == _mattson(lines)


def test_reuse_histogram_bins() -> None:
    h = reuse_histogram(np.array([-1, 0, 0, 1, 2, 3, 4, 7, 8, 1000]))
    assert h.distance_lo.tolist()[:5] == [0, 1, 2, 4, 8]
    assert h.distance_hi.tolist()[:5] == [0, 1, 3, 7, 15]
    assert h.accesses.tolist()[:5] == [2, 1, 2, 2, 1] and h.accesses.sum() == 9
    assert h.distance_lo.iloc[-1] <= 1000 <= h.distance_hi.iloc[-1]
    assert h.fraction.sum() == pytest.approx(1.0)


def test_trace_info(tmp_path: Path) -> None:
    rng = np.random.default_rng(9)
    n = 20_000
    t = np.cumsum(rng.exponential(4.0, n))
    op = rng.choice(3, n, p=[0.5, 0.4, 0.1]).astype(np.int8)
    line = rng.integers(0, 3000, n)
    write_trace(tmp_path / "i.parquet", [Chunk(t, op, line)])
    info, hist = trace_info(tmp_path / "i.parquet", chunk_size=3000, reuse_window=5000)
    assert info["requests"] == n
    assert (info["reads"], info["writes"], info["hints"]) == tuple(np.bincount(op, minlength=3))
    assert info["footprint_lines"] == np.unique(line).size
    assert info["span_ns"] == pytest.approx(t[-1] - t[0])
    assert info["request_rate_per_s"] == pytest.approx(n / ((t[-1] - t[0]) / 1e9))
    data = line[op != HINT][:5000]
    want = np.array(_mattson(data.tolist()))
    assert info["reuse_window_accesses"] == 5000 and info["reuse_sampled"] is True
    assert info["reuse_cold_accesses"] == int((want < 0).sum())
    assert hist.accesses.sum() == int((want >= 0).sum())
    assert info["reuse_distance_median"] == np.median(want[want >= 0])
