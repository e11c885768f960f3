"""Streams from traces, streams behind the DRAM cache, streams in a closed loop, one stream's setting varied."""
from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import memsim_cli
from scipy import optimize, stats

from memsim import simulate
from memsim.config import load_config
from memsim.engine.stream import GRID
from memsim.errors import ConfigError
from memsim.experiment.build import build_source
from memsim.experiment.compare import compare
from memsim.workload.chunk import WRITE, Chunk


def _trace(path, n=3000, seed=1, lines=2048, gap_ns=80.0, data_bytes=0):
    rng = np.random.default_rng(seed)
    t = np.cumsum(rng.exponential(gap_ns, n))
    ops = np.where(rng.random(n) < 0.3, "W", "R")
    line = rng.integers(0, lines, n)
    with open(path, "w") as f:
        f.write("time_ns,op,line" + (",data\n" if data_bytes else "\n"))
        for i in range(n):
            row = f"{t[i]:.3f},{ops[i]},{line[i]}"
            if data_bytes:
                row += "," + (rng.bytes(data_bytes).hex() if ops[i] == "W" else "")
            f.write(row + "\n")
    return t, ops, line


def _mean_latency(s, p):
    return (s[p + "reads"] * np.nan_to_num(s[p + "read_latency_mean_ns"])
            + s[p + "writes"] * np.nan_to_num(s[p + "write_latency_mean_ns"])) / s[p + "requests"]


# ---------------------------------------------------------------- trace streams

def test_one_trace_stream_is_the_trace_run(tmp_path):
    p = tmp_path / "t.csv"
    _trace(p)
    alone = simulate({"workload": {"pattern": "trace", "trace": str(p)}}).summary
    mix = simulate({"streams": [{"name": "t", "pattern": "trace", "trace": str(p)}]}).summary
    shared = [k for k in alone if k in mix and k != "wall_s"]
    assert len(shared) > 50
    for k in shared:
        assert alone[k] == mix[k] or (alone[k] != alone[k] and mix[k] != mix[k]), k
    assert mix["stream_t_requests"] == mix["requests"] == 3000


def test_trace_stream_offset_scale_and_start(tmp_path):
    p = tmp_path / "t.csv"
    t, ops, line = _trace(p, n=1500)
    cfg = load_config({"streams": [
        {"name": "t", "pattern": "trace", "trace": str(p), "offset_lines": 4096, "time_scale": 0.25,
         "start_ns": 5000.0, "footprint_lines": 2048},
        {"name": "g", "requests": 800, "footprint_lines": 1024, "start_ns": 2000.0, "arrival": "fixed",
         "interval_ns": 10.0}]})
    src = build_source(cfg, content=False)
    ch = Chunk.concat(list(src))
    tags = src.mix.stream_of_requests()
    np.testing.assert_allclose(ch.time_ns[tags == 0], np.round(t, 3) * 0.25 + 5000.0, rtol=1e-12)
    assert ch.line[tags == 0].tolist() == (line + 4096).tolist()
    assert (ch.op[tags == 0] == WRITE).tolist() == (ops == "W").tolist()
    assert ch.line[tags == 1].max() < 1024
    np.testing.assert_allclose(ch.time_ns[tags == 1], 2000.0 + 10.0 * np.arange(1, 801))
    assert np.all(np.diff(ch.time_ns) >= 0)


def test_trace_stream_scaled_rate_is_the_throughput(tmp_path):
    # A lightly loaded system passes what arrives: the stream's throughput is
    # its arrival rate, n / span (Little's law's flow balance; Little, Oper.
    # Res. 1961).  Halving time_scale doubles the rate.
    p = tmp_path / "t.csv"
    t, _, _ = _trace(p, n=4000, gap_ns=400.0)
    for scale in (1.0, 0.5):
        s = simulate({"streams": [{"name": "t", "pattern": "trace", "trace": str(p), "time_scale": scale}]}).summary
        rate = 4000 / (t[-1] * scale)
        assert s["stream_t_throughput_gbps"] == pytest.approx(rate * 64, rel=0.01)


def test_trace_content_passes_and_synthetic_writes_get_their_own(tmp_path):
    p = tmp_path / "d.csv"
    _trace(p, n=1600, data_bytes=64)
    base = {"streams": [{"name": "t", "pattern": "trace", "trace": str(p)},
                        {"name": "g", "requests": 1900, "read_fraction": 0.2, "offset_lines": 4096}]}
    src = build_source(load_config(base))
    a = Chunk.concat(list(src))
    ta = src.mix.stream_of_requests()
    w = a.op == WRITE
    rows = [r.split(",") for r in p.read_text().splitlines()[1:]]
    trace_data = np.array([list(bytes.fromhex(r[3])) for r in rows if r[1] == "W"], np.uint8)
    assert a.data is not None and np.array_equal(a.data[w & (ta == 0)], trace_data)
    assert a.data[w & (ta == 1)].any(axis=1).all()        # drawn content (random data) on every write
    with pytest.raises(ConfigError, match="workload.data"):
        build_source(load_config(base, {"workload.data": "flip"}))
    fast = simulate(base, run__engine="fast").summary
    ref = simulate(base, run__engine="reference").summary
    assert all(fast[k] == ref[k] or fast[k] != fast[k] for k in ref if k not in ("engine", "wall_s"))


def test_bad_trace_in_a_stream_is_one_line_exit_2(tmp_path):
    p = tmp_path / "t.csv"
    _trace(p, n=300)
    lines = p.read_text().splitlines()
    lines[99] = "12x,R,5"                          # file line 100
    p.write_text("\n".join(lines) + "\n")
    cfg = tmp_path / "mix.toml"
    cfg.write_text(f'[run]\nname = "m"\nout_dir = "{tmp_path}"\n[[streams]]\nname = "replay"\n'
                   'pattern = "trace"\ntrace = "t.csv"\n[[streams]]\nname = "gen"\nrequests = 500\n')
    res = memsim_cli("run", str(cfg))
    assert res.code == 2
    err = res.err.strip()
    assert "\n" not in err and f"{p}:100" in err and "time_ns" in err and "Traceback" not in err
    cfg.write_text(cfg.read_text().replace('"t.csv"', '"gone.csv"'))
    res = memsim_cli("run", str(cfg))
    assert res.code == 2 and "gone.csv" in res.err and "\n" not in res.err.strip()


def test_skipped_rows_of_trace_streams_are_counted(tmp_path):
    p = tmp_path / "t.csv"
    _trace(p, n=300)
    text = p.read_text().splitlines()
    text[10] = "bad,row,here"
    text[20] = "1,Q,3"
    p.write_text("\n".join(text) + "\n")
    s = simulate({"workload": {"skip_bad": True},
                  "streams": [{"name": "t", "pattern": "trace", "trace": str(p)}, {"name": "g", "requests": 50}]})
    assert s.summary["trace_bad_lines"] == 2 and s.summary["stream_t_requests"] == 298


# ---------------------------------------------------------------- theory checks

def test_two_poisson_streams_superpose_and_obey_littles_law():
    # The superposition of independent Poisson processes is Poisson with the
    # summed rate (Kingman, "Poisson Processes", Oxford 1993, superposition theorem; from memory): merged
    # gaps are exponential with mean 1 / (l1 + l2).
    cfg = {"array": {"lines": 8192}, "streams": [
        {"name": "a", "requests": 20000, "interval_ns": 200.0, "footprint_lines": 4096},
        {"name": "b", "requests": 10000, "interval_ns": 400.0, "offset_lines": 4096}]}
    c = load_config(cfg)
    ch = Chunk.concat(list(build_source(c, content=False)))
    span = min(20000 * 200.0, 10000 * 400.0) * 0.9          # both streams still running
    gaps = np.diff(ch.time_ns[ch.time_ns < span])
    rate = 1 / 200.0 + 1 / 400.0
    assert gaps.mean() == pytest.approx(1 / rate, rel=4 / math.sqrt(gaps.size))
    assert stats.kstest(gaps, "expon", args=(0, 1 / rate)).pvalue > 1e-3
    s = simulate(cfg).summary
    # Total throughput is the offered rate when the banks keep up (flow balance).
    assert s["throughput_gbps"] == pytest.approx(30000 * 64 / s["simulated_ns"], rel=1e-12)
    assert s["stream_a_throughput_gbps"] + s["stream_b_throughput_gbps"] == pytest.approx(s["throughput_gbps"])
    assert s["requests"] / s["simulated_ns"] == pytest.approx(rate, rel=0.03)
    # Little's law per stream, L = X W (Little, Oper. Res. 1961): the stream's
    # time-average occupancy (sampled on the grid) against its throughput x
    # mean latency.
    # The occupancy is sampled on a grid of step at most 2 span / GRID; a
    # request of latency W < step is seen by W / step samples on average, so
    # the estimate's relative sd is about sqrt(step / (n W)) (binomial count).
    step = 2 * s["simulated_ns"] / GRID
    for p in ("stream_a_", "stream_b_"):
        x = s[p + "requests"] / s["simulated_ns"]
        w = _mean_latency(s, p)
        sd = math.sqrt(step / (s[p + "requests"] * w))
        assert s[p + "mean_in_system"] == pytest.approx(x * w, rel=4 * sd)
    assert s["stream_a_mean_in_system"] + s["stream_b_mean_in_system"] == pytest.approx(s["mean_in_system"],
                                                                                          rel=0.01)


def test_uniform_streams_behind_a_cache_hit_at_c_over_f():
    # Independent uniform references over F lines, a cache of C lines: every
    # line equally likely to be cached, hit rate C / F (independent reference
    # model; King, IFIP Congress 1971, from memory).  Two streams over the same F lines: each
    # stream sees C / F too.
    cap, f = 512, 2048
    s = simulate({"array": {"lines": 4096}, "cache": {"enabled": True, "capacity_lines": cap, "ways": cap},
                  "streams": [{"name": "a", "requests": 40000, "interval_ns": 100.0, "footprint_lines": f},
                              {"name": "b", "requests": 20000, "interval_ns": 200.0, "footprint_lines": f,
                               "read_fraction": 0.3}]}).summary
    # Hits are rarer while the cache fills: it holds C distinct lines after
    # about F ln(F / (F - C)) requests (coupon collector, common practice),
    # which shifts a stream's rate by at most that share of all requests; the
    # rest is binomial noise, sd sqrt(h (1 - h) / n).
    fill = f * math.log(f / (f - cap)) / 60000
    for p, n in (("stream_a_", 40000), ("stream_b_", 20000)):
        sd = math.sqrt(cap / f * (1 - cap / f) / n)
        assert s[p + "cache_hit_rate"] == pytest.approx(cap / f, abs=4 * sd + fill)
    assert s["stream_a_requests"] + s["stream_b_requests"] == s["overall_requests"]
    hits = s["stream_a_cache_hit_rate"] * 40000 + s["stream_b_cache_hit_rate"] * 20000
    assert hits / 60000 == pytest.approx(s["cache_hit_rate"], rel=1e-12)


def test_disjoint_streams_behind_lru_match_che_approximation():
    # LRU under independent references: line i is cached with probability
    # 1 - exp(-q_i T), T solving sum_i (1 - exp(-q_i T)) = C (Che, Tung and
    # Wang, IEEE JSAC 2002; from memory).  Stream a: 512 lines at rate 1/100; stream b:
    # 2048 lines at rate 1/50; cache 256 lines, fully associative.
    cap, f1, f2, l1, l2 = 256, 512, 2048, 1 / 100, 1 / 50
    s = simulate({"array": {"lines": 8192}, "cache": {"enabled": True, "capacity_lines": cap, "ways": cap},
                  "streams": [
                      {"name": "a", "requests": 30000, "interval_ns": 100.0, "footprint_lines": f1,
                       "read_fraction": 1.0},
                      {"name": "b", "requests": 60000, "interval_ns": 50.0, "offset_lines": 4096,
                       "footprint_lines": f2, "read_fraction": 1.0}]}).summary
    q1, q2 = l1 / (l1 + l2) / f1, l2 / (l1 + l2) / f2
    t = optimize.brentq(lambda t: f1 * -math.expm1(-q1 * t) + f2 * -math.expm1(-q2 * t) - cap, 1.0, 1e9)
    assert s["stream_a_cache_read_hit_rate"] == pytest.approx(-math.expm1(-q1 * t), abs=0.01)
    assert s["stream_b_cache_read_hit_rate"] == pytest.approx(-math.expm1(-q2 * t), abs=0.01)
    # Host view per stream: hits at hit_ns, misses when their fill completes.
    assert s["stream_a_read_latency_p50_ns"] >= 50.0


def test_closed_loop_with_streams_keeps_the_window_full():
    # One window of workload.outstanding requests over all streams.  Little's
    # law on the closed system, N = X R (Little, Oper. Res. 1961): the streams'
    # X_j R_j add up to the window.
    n = 8
    cfg = {"workload": {"arrival": "closed", "outstanding": n}, "streams": [
        {"name": "a", "requests": 6000, "interval_ns": 100.0, "read_fraction": 0.9},
        {"name": "b", "requests": 3000, "interval_ns": 200.0, "read_fraction": 0.5, "offset_lines": 32768}]}
    s = simulate(cfg).summary
    little = sum(s[p + "requests"] / s["simulated_ns"] * _mean_latency(s, p) for p in ("stream_a_", "stream_b_"))
    assert little == pytest.approx(n, rel=0.01)
    assert s["stream_a_mean_in_system"] + s["stream_b_mean_in_system"] == pytest.approx(n, rel=0.02)
    # The streams' own arrival processes set the issue order: while both run,
    # a issues twice as often as b.
    src = build_source(load_config(cfg), content=False)
    list(src)
    tags = src.mix.stream_of_requests()[:6000]
    assert np.mean(tags == 0) == pytest.approx(2 / 3, abs=0.03)
    ref = simulate(cfg, run__engine="reference").summary
    assert all(ref[k] == s[k] or s[k] != s[k] for k in ref if k not in ("engine", "wall_s"))


def test_cache_with_closed_loop_streams_is_refused():
    with pytest.raises(ConfigError, match="cache.enabled"):
        load_config({"workload": {"arrival": "closed"}, "cache": {"enabled": True}, "streams": [{"name": "a"}]})


# ---------------------------------------------------------------- one stream's setting

TWO = {"run": {"name": "two"}, "streams": [
    {"name": "web", "requests": 3000, "interval_ns": 200.0, "footprint_lines": 8192},
    {"name": "batch", "requests": 1000, "interval_ns": 200.0, "offset_lines": 16384}]}


def test_overrides_of_one_stream_by_name_and_by_index():
    a = load_config(TWO, {"streams.batch.interval_ns": 50.0, "streams[0].read_fraction": 0.25})
    assert a.streams[1].interval_ns == 50.0 and a.streams[0].read_fraction == 0.25
    assert a.streams[0].interval_ns == 200.0
    s = simulate(TWO, overrides={"streams.web.interval_ns": 400.0}).summary
    # The web stream spans n x interval (Poisson: sd interval sqrt(n), common practice).
    assert s["simulated_ns"] == pytest.approx(3000 * 400.0, rel=4 / math.sqrt(3000))


@pytest.mark.parametrize("key, found", [
    ("streams.nosuch.interval_ns", "no stream named 'nosuch'"),
    ("streams[2].interval_ns", "stream index 2"),
    ("streams[0].speed", "unknown stream field 'speed'"),
    ("streams[0].name", "unknown stream field 'name'"),
    ("streams.interval_ns", "unknown key"),
])
def test_bad_stream_keys(key, found):
    with pytest.raises(ConfigError, match=found.replace("[", r"\[")):
        load_config(TWO, {key: 1.0})


def test_compare_varies_one_stream(tmp_path):
    table = compare(TWO, ["streams.web.interval_ns=100,400"], workers=1, out=tmp_path / "c",
                    metrics=["simulated_ns", "stream_web_throughput_gbps"])
    t = table.set_index("setting")
    assert list(t.index) == ["interval_ns=100", "interval_ns=400"]
    for label, gap in (("interval_ns=100", 100.0), ("interval_ns=400", 400.0)):
        # The web stream's rate is 1 / interval: its throughput 64 B / interval
        # while it runs (Poisson, sd 1/sqrt(n) relative; common practice).
        span = t.loc[label, "simulated_ns"]
        assert span == pytest.approx(max(3000 * gap, 1000 * 200.0), rel=0.1)
        assert t.loc[label, "stream_web_throughput_gbps"] == pytest.approx(3000 * 64 / span, rel=1e-9)


def test_compare_and_sweep_cli_with_stream_keys(tmp_path):
    base = tmp_path / "two.toml"
    base.write_text('[run]\nname = "two"\n[[streams]]\nname = "web"\nrequests = 1500\ninterval_ns = 200.0\n'
                    '[[streams]]\nname = "batch"\nrequests = 500\noffset_lines = 30000\n')
    res = memsim_cli("compare", str(base), "--vary", "streams[1].read_fraction=0.0,1.0", "--workers", "1",
                     "--quiet", "--metric", "stream_batch_reads", "--out", str(tmp_path / "c"))
    assert res.code == 0, res.err
    res = memsim_cli("compare", str(base), "--vary", "streams.nope.interval_ns=1,2", "--out", str(tmp_path / "d"))
    assert res.code == 2 and "no stream named 'nope'" in res.err and "\n" not in res.err.strip()
    sweep = tmp_path / "sw.toml"
    sweep.write_text('[sweep]\nbase = "two.toml"\nmetrics = ["stream_batch_reads"]\n'
                     '[grid]\n"streams[1].read_fraction" = [0.0, 1.0]\n')
    res = memsim_cli("sweep", str(sweep), "--workers", "1", "--quiet", "--out", str(tmp_path / "s"))
    assert res.code == 0, res.err
    import pandas as pd
    runs = pd.read_csv(tmp_path / "s" / "runs.csv")
    assert runs.groupby("streams[1].read_fraction")["stream_batch_reads"].mean().tolist() == [0, 500]
    sweep.write_text(sweep.read_text().replace("streams[1]", "streams[7]"))
    res = memsim_cli("sweep", str(sweep), "--out", str(tmp_path / "s2"))
    assert res.code == 2 and "streams[7]" in res.err and "stream index 7" in res.err


def test_compare_workload_files_bring_their_own_streams(tmp_path):
    (tmp_path / "sub").mkdir()
    _trace(tmp_path / "sub" / "t.csv", n=800)
    base = tmp_path / "base.toml"
    base.write_text('[run]\nname = "b"\n[workload]\nrequests = 500\n')
    wl = tmp_path / "sub" / "pair.toml"
    wl.write_text('[[streams]]\nname = "replay"\npattern = "trace"\ntrace = "t.csv"\n'
                  '[[streams]]\nname = "gen"\nrequests = 300\noffset_lines = 4096\n')
    table = compare(base, ["controller.write_cancel=false,true"], workloads=[str(wl)], workers=1,
                    metrics=["stream_replay_requests", "stream_gen_requests"])
    assert table["stream_replay_requests"].tolist() == [800, 800]
    assert table["stream_gen_requests"].tolist() == [300, 300]


def test_trace_made_from_a_mix_replays_to_the_same_run(tmp_path):
    import memsim
    mix = {"array": {"lines": 8192}, "streams": [
        {"name": "a", "requests": 2000, "pattern": "zipf", "footprint_lines": 4096},
        {"name": "b", "requests": 1000, "interval_ns": 300.0, "offset_lines": 4096, "read_fraction": 0.1}]}
    made = memsim.make_trace(mix, tmp_path / "mix.csv")
    assert made["requests"] == 3000 and made["streams"] == 2
    a = simulate(mix).summary
    b = simulate({"array": {"lines": 8192}, "workload": {"pattern": "trace", "trace": str(tmp_path / "mix.csv")}}
                 ).summary
    shared = [k for k in b if k in a and k != "wall_s"]
    assert len(shared) > 50
    assert all(a[k] == b[k] or (a[k] != a[k] and b[k] != b[k]) for k in shared)
