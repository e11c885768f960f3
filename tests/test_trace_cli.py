"""Traces end to end: ``memsim trace make`` / ``trace info`` and runs that replay a trace.

The central check: a trace made from a synthetic workload and replayed
through the timing engine gives the same run as the generator itself, number
for number (the source draws from its own random streams, so replaying a
trace leaves every other draw of the run as it was).
"""
from __future__ import annotations

import gzip
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from memsim import simulate
from memsim.cli import entry, main
from memsim.config import parse_assignment
from memsim.experiment.build import build_source, write_stream
from memsim.experiment.run import resolve
from memsim.workload.chunk import READ, WRITE, Chunk
from memsim.workload.trace import read_trace, trace_info

ROOT = Path(__file__).resolve().parents[1]

SPEC = """\
[run]
name = "harbour_crane_log"
seed = {seed}
chunk_requests = 1024

[array]
channels = 1
banks = 4
lines = 4096

[workload]
pattern = "zipf"
zipf_exponent = 0.8
requests = 3000
read_fraction = 0.6
arrival = "poisson"
interval_ns = 40.0
data = "random"
"""


def _spec(tmp_path: Path, seed: int = 5) -> Path:
    p = tmp_path / "spec.toml"
    p.write_text(SPEC.format(seed=seed))
    return p


def _make(spec: Path, out: Path, *extra: str) -> str:
    res = CliRunner().invoke(main, ["trace", "make", str(spec), str(out), *extra])
    assert res.exit_code == 0, res.output + repr(res.exception)
    return res.output


def _user_error(args: list[str], monkeypatch, capsys) -> str:
    """Run the console entry point in-process; return its one stderr line (exit 2)."""
    monkeypatch.setattr(sys, "argv", ["memsim", *args])
    with pytest.raises(SystemExit) as info:
        entry()
    err = capsys.readouterr().err
    assert info.value.code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    return lines[0]


def _overrides(sets: list[str]) -> dict:
    return dict(parse_assignment(s) for s in sets)


def _replay(spec: Path, trace: Path, sets: list[str]) -> dict:
    ov = _overrides(sets)
    return simulate(spec, overrides={**ov, "workload.pattern": "trace", "workload.trace": str(trace)}).summary


def _same_numbers(a: dict, b: dict) -> None:
    keys = [k for k in a if isinstance(a[k], (int, float)) and not isinstance(a[k], bool)]
    assert "read_latency_p99_ns" in keys and "cells_programmed_per_write" in keys
    diff = {k: (a[k], b[k]) for k in keys if not (a[k] == b[k] or (a[k] != a[k] and b[k] != b[k]))}
    assert not diff


# ---------------------------------------------------------------- make + replay = generator

@pytest.mark.parametrize("name,with_data,sets", [
    # gzip text without content: the replay draws content from the data model
    # on the same stream the generator's run used.
    ("t.csv.gz", False, []),
    # Parquet with content; a leveler that draws random keys, and 3-line
    # requests that do not divide the chunk size.
    ("t.parquet", True, ["leveling.scheme=randomized_start_gap", "workload.size_lines=3"]),
    # plain text with content; closed-loop arrivals (times are all 0) and
    # multi-level cells (program-and-verify draws).
    ("t.csv", True, ["workload.arrival=closed", "cell.preset=pcm_mlc2", "workload.data=zeros"]),
    # flip content depends on the stored bits: drawn by the write path at replay.
    ("t.csv", False, ["workload.data=flip", "workload.arrival=onoff", "write.scheme=flip_n_write"]),
])
def test_replay_of_made_trace_is_the_generator_run(tmp_path, name, with_data, sets):
    spec = _spec(tmp_path)
    out = tmp_path / name
    args = [a for s in sets for a in ("--set", s)] + (["--with-data"] if with_data else [])
    text = _make(spec, out, *args)
    assert text.startswith("wrote 3,000 requests")
    generator = simulate(spec, overrides=_overrides(sets)).summary
    replay = _replay(spec, out, sets)
    assert replay["requests"] == 3000
    _same_numbers(generator, replay)
    # The comparison has power: another seed draws other content (and, for
    # the write path, another initial memory), and the numbers move.
    other = _replay(spec, out, sets + ["run.seed=6"])
    assert other["energy_pj"] != generator["energy_pj"]


def test_content_in_trace_overrides_the_data_model(tmp_path):
    spec = _spec(tmp_path)
    out = tmp_path / "d.parquet"
    _make(spec, out, "--with-data")
    generator = simulate(spec).summary
    # At replay the data model would change no bit (flip_fraction 0; its
    # initial content is drawn as for "random"); the trace's content wins,
    # so the run is still the generator's.
    still = ["workload.data=flip", "workload.flip_fraction=0"]
    _same_numbers(generator, _replay(spec, out, still))
    plain = tmp_path / "p.parquet"
    _make(spec, plain)
    # Without content the data model decides: a data-comparison write of
    # unchanged bits programs nothing.
    assert _replay(spec, plain, still)["cells_programmed_per_write"] == 0
    assert generator["cells_programmed_per_write"] > 100


def test_trace_holds_the_generators_requests(tmp_path):
    spec = _spec(tmp_path)
    cfg = resolve(spec)
    want = Chunk.concat(list(build_source(cfg)))
    for name in ("a.csv.gz", "a.parquet"):
        _make(spec, tmp_path / name, "--with-data")
        got = Chunk.concat(list(read_trace(tmp_path / name)))
        np.testing.assert_array_equal(got.time_ns, want.time_ns)     # exact, not approximately
        np.testing.assert_array_equal(got.op, want.op)
        np.testing.assert_array_equal(got.line, want.line)
        w = want.op == WRITE
        np.testing.assert_array_equal(got.data[w], want.data[w])
    # The same spec makes the same bytes (no time stamp in the gzip header).
    first = (tmp_path / "a.csv.gz").read_bytes()
    _make(spec, tmp_path / "a.csv.gz", "--with-data")
    assert (tmp_path / "a.csv.gz").read_bytes() == first
    with gzip.open(tmp_path / "a.csv.gz", "rt") as fh:
        assert fh.readline().startswith("# made by memsim trace make from spec.toml")


def test_write_stream_is_the_runs_writes(tmp_path):
    spec = _spec(tmp_path)
    cfg = resolve(spec)
    src = Chunk.concat(list(build_source(cfg, content=False)))
    writes = src.line[src.op == WRITE]
    endless = write_stream(cfg)
    got = np.concatenate([next(endless) for _ in range(5)])     # goes on past workload.requests
    assert got.size > writes.size
    np.testing.assert_array_equal(got[: writes.size], writes)
    out = tmp_path / "w.csv"
    _make(spec, out)
    cfg_t = resolve(spec, {"workload.pattern": "trace", "workload.trace": str(out)})
    np.testing.assert_array_equal(np.concatenate(list(write_stream(cfg_t))), writes)


# ---------------------------------------------------------------- trace info

def test_info_counts_and_theory(tmp_path):
    spec = tmp_path / "u.toml"
    spec.write_text(SPEC.format(seed=3).replace('"zipf"', '"uniform"')
                    .replace("requests = 3000", "requests = 20000")
                    .replace("lines = 4096", "lines = 256"))
    out = tmp_path / "u.csv.gz"
    _make(spec, out)
    res = CliRunner().invoke(main, ["trace", "info", str(out)])
    assert res.exit_code == 0, res.output
    info, hist = trace_info(out)
    text = res.output
    assert f"requests {info['requests']:,}".replace(" ", "") in text.replace(" ", "")
    for op in ("reads", "writes"):
        assert f"{op}{info[op]:,}" in text.replace(" ", "")
    # Every reuse appears in the printed table, bin by bin.
    rows = [ln.split() for ln in text.splitlines() if ln.strip().endswith("%") and "-" in ln.split()[0]]
    printed = {r[0]: int(r[1].replace(",", "")) for r in rows}
    for lo, hi, count in hist[["distance_lo", "distance_hi", "accesses"]].itertuples(index=False):
        if lo != hi:
            assert printed[f"{lo:,}-{hi:,}"] == count
    src = Chunk.concat(list(build_source(resolve(spec), content=False)))
    assert info["reads"] == int((src.op == READ).sum()) and info["hints"] == 0
    assert info["footprint_lines"] == np.unique(src.line).size
    # Poisson arrivals at 1/interval: the rate over the span is within
    # 5 standard errors (sd of the sum of n exponentials is mean / sqrt(n);
    # common practice).
    n = info["requests"]
    assert info["request_rate_per_s"] == pytest.approx(1e9 / 40.0, rel=5 / np.sqrt(n))
    # Uniform independent references to F lines: in steady state the
    # referenced line's LRU stack distance is uniform on 0..F-1, so a share
    # d / F of reuses has distance below d (the LRU hit ratio C / F of the
    # independent reference model; A. V. Aho, P. J. Denning, J. D. Ullman,
    # "Principles of optimal page replacement", J. ACM 18(1), 1971).
    F = 256
    below_64 = hist.loc[hist["distance_hi"] < 64, "accesses"].sum() / hist["accesses"].sum()
    reuses = hist["accesses"].sum()
    assert below_64 == pytest.approx(64 / F, abs=5 * np.sqrt(0.25 * 0.75 / reuses) + 0.01)


def test_info_on_hand_written_trace_with_hints(tmp_path):
    out = tmp_path / "h.csv"
    out.write_text("# two writes announced ahead, a read\ntime_ns,op,line,size_lines,lead_ns\n"
                   "100,W,8,2,40\n150,R,8,,\n300,H,3,,\n")
    res = CliRunner().invoke(main, ["trace", "info", str(out)])
    assert res.exit_code == 0, res.output
    # 2 writes, 2 hints made from their lead, 1 read, 1 stand-alone hint
    flat = res.output.replace(" ", "")
    assert "requests6\n" in flat and "writes233.3%" in flat and "hints350.0%" in flat
    assert "60.0 .. 300.0 ns" in res.output          # the hint moved 40 ns earlier


# ---------------------------------------------------------------- bad traces

BAD = "time_ns,op,line\n0,R,1\n5,W,2\n7,X,3\n9,R,4\n3,R,5\n12,W,6\n"


def test_bad_trace_in_run_is_one_line_exit_2(tmp_path):
    """Through the installed command: the error raised inside the engine stays one line."""
    (tmp_path / "bad.csv").write_text(BAD)
    cfg = tmp_path / "bad.toml"
    cfg.write_text('[workload]\npattern = "trace"\ntrace = "bad.csv"\n')
    p = subprocess.run([sys.executable, "-m", "memsim.cli", "run", str(cfg), "--out", str(tmp_path / "r")],
                       check=False, capture_output=True, text=True, cwd=tmp_path,
                       env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert p.returncode == 2, p.stderr
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in p.stderr
    assert f"{tmp_path / 'bad.csv'}:4:" in lines[0] and "op 'X'" in lines[0]


def test_skip_bad_counts_in_run_and_info(tmp_path, monkeypatch, capsys):
    bad = tmp_path / "bad.csv"
    bad.write_text(BAD)
    s = simulate(overrides={"workload.pattern": "trace", "workload.trace": str(bad),
                            "workload.skip_bad": True})
    assert s.summary["requests"] == 4             # the op X row and the late row are skipped
    assert s.summary.get("trace_bad_lines") == 2, \
        "simulate() must add source_fields(source) (trace_bad_lines) to the summary"
    res = CliRunner().invoke(main, ["trace", "info", str(bad), "--skip-bad"])
    assert res.exit_code == 0, res.output
    assert "bad lines skipped  " in res.output and res.output.count(f"{bad}:") == 2
    assert "2" == res.output.split("bad lines skipped")[1].split()[0]
    line = _user_error(["trace", "info", str(bad)], monkeypatch, capsys)
    assert f"{bad}:4:" in line


@pytest.mark.parametrize("content,needle", [
    ("time_ns,op,line\n0,R,1\n5,W,5000\n", ":3:"),                 # beyond the footprint (4096 lines)
    ("time_ns,op,lines\n0,R,1\n", ":1:"),                          # bad header
    ("time_ns,op,line,data\n0,W,1,abcd\n", ":2:"),                 # content of the wrong length
])
def test_bad_trace_through_run_names_file_line(tmp_path, monkeypatch, capsys, content, needle):
    bad = tmp_path / "bad.csv"
    bad.write_text(content)
    spec = _spec(tmp_path)
    spec.write_text(SPEC.format(seed=1).replace('"zipf"', f'"trace"\ntrace = "{bad.name}"'))
    line = _user_error(["run", str(spec), "--out", str(tmp_path / "r")], monkeypatch, capsys)
    assert f"{bad}{needle}" in line


def test_missing_trace_and_make_mistakes(tmp_path, monkeypatch, capsys):
    spec = _spec(tmp_path)
    line = _user_error(["run", str(spec), "--set", "workload.pattern=trace", "--set",
                        "workload.trace=/no/such.csv"], monkeypatch, capsys)
    assert "/no/such.csv" in line and "no such file" in line
    line = _user_error(["run", str(spec), "--set", "workload.pattern=trace"], monkeypatch, capsys)
    assert "workload.trace" in line
    line = _user_error(["trace", "make", str(spec), str(tmp_path / "t.txt")], monkeypatch, capsys)
    assert ".csv.gz" in line
    line = _user_error(["trace", "make", str(spec), str(tmp_path / "t.csv"), "--with-data",
                        "--set", "workload.data=flip"], monkeypatch, capsys)
    assert "workload.data" in line and "flip" in line
    line = _user_error(["trace", "make", str(spec), str(tmp_path / "t.csv"), "--set",
                        "workload.pattern=trace"], monkeypatch, capsys)
    assert "workload.pattern" in line and "uniform" in line
    line = _user_error(["trace", "make", str(spec), str(tmp_path / "no" / "t.csv")], monkeypatch, capsys)
    assert "existing folder" in line


# ---------------------------------------------------------------- the example in workloads/

def test_example_trace_replays(tmp_path):
    cfg = ROOT / "workloads" / "trace_replay.toml"
    res = simulate(cfg, workload__skip_bad=False)
    info, _ = trace_info(ROOT / "workloads" / "quayside_ledger.csv.gz")
    assert res.summary["requests"] == info["requests"] == 6000
    assert res.summary["writes"] == info["writes"]

