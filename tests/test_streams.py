"""Mixed streams: several generators merged by arrival time, per-stream keys beside the totals."""
from __future__ import annotations

import numpy as np
import pytest
from conftest import memsim_cli

from memsim import simulate
from memsim.config import load_config
from memsim.errors import ConfigError
from memsim.workload.chunk import READ, WRITE, Chunk
from memsim.workload.mix import StreamMerge

TWO = {"streams": [
    {"name": "ledger", "pattern": "zipf", "requests": 4000, "interval_ns": 100.0, "read_fraction": 0.9,
     "footprint_lines": 4096},
    {"name": "journal", "pattern": "sequential", "requests": 1500, "interval_ns": 300.0,
     "read_fraction": 0.0, "offset_lines": 8192, "footprint_lines": 1024}]}


def _cut(ch: Chunk, step: int):
    return [ch.take(slice(s, s + step)) for s in range(0, len(ch), step)]


def test_merge_orders_by_time_and_keeps_each_stream():
    rng = np.random.default_rng(4)
    streams = []
    for j, n in enumerate((3000, 1000, 2000)):
        t = np.floor(np.cumsum(rng.exponential(10.0 * (j + 1), n)))     # equal times within and across
        streams.append(Chunk(t, rng.integers(0, 2, n).astype(np.int8), np.arange(n) + 10_000 * j))
    outs = []
    for step in (5000, 97):
        m = StreamMerge([_cut(s, step) for s in streams], [0, 0, 0])
        merged = Chunk.concat(list(m))
        outs.append((merged, m.stream_of_requests()))
    (a, ta), (b, tb) = outs
    assert np.array_equal(a.time_ns, b.time_ns) and np.array_equal(a.line, b.line)
    assert np.array_equal(ta, tb)
    assert np.all(np.diff(a.time_ns) >= 0)
    for j, s in enumerate(streams):
        assert np.array_equal(a.line[ta == j], s.line)        # every request, in its own order
        assert np.array_equal(a.op[ta == j], s.op)
    # Ties go to the lower stream index.
    same = np.flatnonzero(np.diff(a.time_ns) == 0)
    assert np.all(ta[same] <= ta[same + 1])


def test_offsets_place_each_stream():
    m = StreamMerge([[Chunk([1.0, 2.0], [READ, READ], [0, 1])], [Chunk([1.5], [WRITE], [0])]], [0, 500])
    out = Chunk.concat(list(m))
    assert out.line.tolist() == [0, 500, 1] and m.stream_of_requests().tolist() == [0, 1, 0]


@pytest.mark.parametrize("engine", ["fast", "reference"])
def test_per_stream_keys_add_up_to_the_totals(engine):
    s = simulate(TWO, run__engine=engine).summary
    a, b = "stream_ledger_", "stream_journal_"
    assert s[a + "requests"] == 4000 and s[b + "requests"] == 1500 and s["requests"] == 5500
    assert s[a + "reads"] + s[b + "reads"] == s["reads"]
    assert s[b + "reads"] == 0 and np.isnan(s[b + "read_latency_mean_ns"])
    assert s[a + "throughput_gbps"] + s[b + "throughput_gbps"] == pytest.approx(s["throughput_gbps"])
    # The count-weighted means of the streams are the overall means.
    w = (s[a + "writes"] * s[a + "write_latency_mean_ns"] + s[b + "writes"] * s[b + "write_latency_mean_ns"])
    assert w / s["writes"] == pytest.approx(s["write_latency_mean_ns"], rel=1e-12)
    assert s[a + "read_latency_mean_ns"] == pytest.approx(s["read_latency_mean_ns"], rel=1e-12)


def test_engines_agree_with_streams():
    fast = simulate(TWO, run__engine="fast").summary
    ref = simulate(TWO, run__engine="reference").summary
    for k in ref:
        if k != "engine":
            assert fast[k] == ref[k] or (fast[k] != fast[k] and ref[k] != ref[k]), k


def test_each_stream_keeps_its_rate_and_range():
    cfg = load_config(TWO)
    from memsim.experiment.build import build_source
    src = build_source(cfg, content=False)
    ch = Chunk.concat(list(src))
    tags = src.mix.stream_of_requests()
    for j, st in enumerate(cfg.streams):
        t = ch.time_ns[tags == j]
        # Poisson arrivals: mean gap interval_ns, sd interval_ns / sqrt(n) (common practice).
        assert np.mean(np.diff(t)) == pytest.approx(st.interval_ns, rel=4 / np.sqrt(t.size))
        lines = ch.line[tags == j]
        assert lines.min() >= st.offset_lines and lines.max() < st.offset_lines + st.footprint_lines
    assert np.mean(ch.op[tags == 0] == READ) == pytest.approx(0.9, abs=0.02)


def test_streams_from_a_toml_file(tmp_path):
    p = tmp_path / "mix.toml"
    p.write_text(f'[run]\nname = "two_tenants"\nout_dir = "{tmp_path}"\n'
                 '[[streams]]\nname = "north"\nrequests = 2000\ninterval_ns = 150.0\n'
                 '[[streams]]\nname = "south"\nrequests = 1000\npattern = "sequential"\n'
                 'offset_lines = 30000\nfootprint_lines = 512\n')
    res = memsim_cli("run", str(p))
    assert res.code == 0, res.err
    assert "stream_south_requests" in res.out


@pytest.mark.parametrize("extra, key", [
    ({"streams": [{"name": "a"}, {"name": "a"}]}, "streams[1].name"),
    ({"streams": [{"name": "a", "offset_lines": 65530, "footprint_lines": 100}]}, "streams[0].offset_lines"),
    ({"streams": [{"name": "a"}], "cache": {"enabled": True}, "workload": {"arrival": "closed"}},
     "cache.enabled"),
    ({"streams": [{"name": "a", "pattern": "trace"}]}, "streams[0].trace"),
    ({"streams": [{"name": "a", "pattern": "trace", "trace": "t.csv", "requests": 5}]}, "streams[0].requests"),
    ({"streams": [{"name": "a", "pattern": "trace", "trace": "t.csv", "interval_ns": 5.0}]},
     "streams[0].interval_ns"),
    ({"streams": [{"name": "a", "time_scale": 2.0}]}, "streams[0].time_scale"),
    ({"streams": [{"name": "a", "trace": "t.csv"}]}, "streams[0].trace"),
    ({"streams": [{"name": "a", "interval_ns": -1.0}]}, "streams[0].interval_ns"),
    ({"streams": [{"name": "a"}], "controller": {"hint_preset": True}}, "controller.hint_preset"),
    ({"streams": [{"name": "a"}], "workload": {"pattern": "trace", "trace": "t.csv"}}, "workload.pattern"),
    ({"streams": {"name": "a"}}, "streams"),
])
def test_bad_streams(extra, key):
    with pytest.raises(ConfigError, match=key.replace(".", r"\.").replace("[", r"\[").replace("]", r"\]")):
        load_config(extra)
