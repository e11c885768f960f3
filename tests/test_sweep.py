"""Sweeps: the sweep file, expansion, seeds, cache and resume, failures, atomic files, statistics."""
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import DEMO, ROOT, SMALL, cli, memsim_subprocess
from scipy import stats as sstats

from memsim.errors import ConfigError
from memsim.experiment import cache as cache_mod
from memsim.experiment.cache import RunCache, config_key, write_frame
from memsim.experiment.sweep import derive_seeds, load_sweep, make_spec, point_stats, run_sweep, sweep

memsim = memsim_subprocess




def write_sweep(folder: Path, body: str, name: str = "s.toml") -> Path:
    p = folder / name
    p.write_text(body.replace("@DEMO@", str(DEMO)))
    return p


# --- the sweep file and its expansion ------------------------------------------------


def test_readme_sweep_example_loads_and_expands():
    # The README shows workloads/sweep_mix_banks.toml; its zipped group moves together.
    spec = load_sweep(ROOT / "workloads" / "sweep_mix_banks.toml")
    pts = spec.points()
    assert len(pts) == 3 * 4 * 3 and len(spec.seeds) == 3
    assert {(p["array.banks"], p["controller.write_queue"]) for p in pts} == {(4, 16), (8, 32), (16, 64)}


def test_example_sweeps_load_and_expand():
    spec = load_sweep(ROOT / "workloads" / "sweep_schemes.toml")
    assert len(spec.points()) == 24 and len(spec.seeds) == 3
    assert spec.varied == ["write.scheme", "workload.read_fraction", "workload.data"]
    # the last grid key varies fastest
    assert spec.points()[:2] == [
        {"write.scheme": "full_line", "workload.read_fraction": 0.5, "workload.data": "flip"},
        {"write.scheme": "full_line", "workload.read_fraction": 0.5, "workload.data": "random"}]
    banks = load_sweep(ROOT / "workloads" / "sweep_banks.toml")
    pts = banks.points()
    assert len(pts) == 9
    # zipped keys move together: never 4 banks with a 64-entry queue
    assert {(p["array.banks"], p["controller.write_queue"]) for p in pts} == {(4, 16), (8, 32), (16, 64)}
    assert banks.seeds == derive_seeds(11, 3)  # base_seed defaults to the base config's run.seed


def test_nested_and_dotted_keys_are_the_same(tmp_path):
    a = write_sweep(tmp_path, '[sweep]\nbase = "@DEMO@"\n[grid]\nwrite.scheme = ["full_line"]\n', "a.toml")
    b = write_sweep(tmp_path, '[sweep]\nbase = "@DEMO@"\n[grid.write]\nscheme = ["full_line"]\n', "b.toml")
    c = write_sweep(tmp_path, '[sweep]\nbase = "@DEMO@"\n[grid]\n"write.scheme" = ["full_line"]\n', "c.toml")
    assert load_sweep(a).grid == load_sweep(b).grid == load_sweep(c).grid == {"write.scheme": ["full_line"]}


def test_seeds_are_stable_and_distinct():
    s5 = derive_seeds(2024, 5)
    assert derive_seeds(2024, 3) == s5[:3]  # adding replications keeps the earlier ones
    assert len(set(s5)) == 5
    assert derive_seeds(2025, 3) != s5[:3]
    assert all(isinstance(s, int) and 0 <= s < 2**32 for s in s5)


@pytest.mark.parametrize("body,needle", [
    ('[sweep]\nbase = "@DEMO@"\nreplicas = 3\n', "sweep.replicas"),
    ('[sweep]\nbase = "@DEMO@"\n[grid]\nwrite.shceme = ["a"]\n', "grid.write.shceme"),
    ('[sweep]\nbase = "@DEMO@"\n[grid]\nwrite.scheme = "full_line"\n', "grid.write.scheme"),
    ('[sweep]\nbase = "@DEMO@"\n[grid]\narray.banks = []\n', "grid.array.banks"),
    ('[sweep]\nbase = "@DEMO@"\n[grid]\narray.banks = [4, 4]\n', "grid.array.banks"),
    ('[sweep]\nbase = "@DEMO@"\n[grid]\nrun.seed = [1, 2]\n', "grid.run.seed"),
    ('[sweep]\nbase = "@DEMO@"\n[[zipped]]\narray.banks = [4, 8]\ncontroller.write_queue = [16]\n',
     "zipped[0].controller.write_queue"),
    ('[sweep]\nbase = "@DEMO@"\n[grid]\narray.banks = [4]\n[[zipped]]\narray.banks = [8]\n', "array.banks"),
    ('[sweep]\nbase = "@DEMO@"\n[fixed]\narray.banks = -2\n', "fixed.array.banks"),
    ('[sweep]\nbase = "@DEMO@"\n[fixed]\narray.banks = 4\n[grid]\narray.banks = [8]\n', "fixed.array.banks"),
    ('[sweep]\nbase = "nowhere.toml"\n', "sweep.base"),
    ('[sweep]\nbase = "@DEMO@"\nreplications = 0\n', "sweep.replications"),
    ('[sweep]\nbase = "@DEMO@"\nname = "a b"\n', "sweep.name"),
    ('[sweep]\nbase = "@DEMO@"\nmetrics = "throughput_gbps"\n', "sweep.metrics"),
    ('[sweeps]\nbase = "@DEMO@"\n', "sweeps"),
    ('[sweep\n', "invalid TOML"),
])
def test_bad_sweep_file_names_file_and_key(tmp_path, body, needle):
    p = write_sweep(tmp_path, body, "bad.toml")
    with pytest.raises(ConfigError) as exc:
        load_sweep(p)
    msg = exc.value.one_line()
    assert needle in msg and "bad.toml" in msg and "found" in msg and "allowed" in msg


def test_cli_bad_sweep_one_line_exit_2(tmp_path, capsys, monkeypatch):
    p = write_sweep(tmp_path, '[sweep]\nbase = "@DEMO@"\n[grid]\nwrite.shceme = ["a"]\n', "bad.toml")
    code, _, err = cli(capsys, monkeypatch, "sweep", p, "--out", tmp_path / "o")
    assert code == 2 and err.count("\n") == 1 and "bad.toml: grid.write.shceme" in err
    code, _, err = cli(capsys, monkeypatch, "sweep", tmp_path / "missing.toml")
    assert code == 2 and "missing.toml" in err and err.count("\n") == 1
    ok = write_sweep(tmp_path, '[sweep]\nbase = "@DEMO@"\n[grid]\nwrite.scheme = ["full_line"]\n', "ok.toml")
    code, _, err = cli(capsys, monkeypatch, "sweep", ok, "--workers", "0", "--out", tmp_path / "o")
    assert code == 2 and err == "error: --workers: found 0; allowed: a whole number >= 1\n"


# --- running, cache, resume -----------------------------------------------------------


def small_spec(grid, seeds=2, **kw):
    return make_spec(DEMO, grid, seeds=seeds, fixed=SMALL, metrics=["throughput_gbps", "read_latency_p99_ns"],
                     **kw)


def test_table_shape_and_pool_matches_in_process(tmp_path):
    grid = {"write.scheme": ["full_line", "flip_n_write"], "workload.read_fraction": [0.5, 0.9]}
    a = run_sweep(small_spec(grid), workers=1, progress=False).runs
    b = run_sweep(small_spec(grid), workers=2, out=tmp_path / "o", progress=False).runs
    pd.testing.assert_frame_equal(a, b)
    assert list(a.columns) == ["point", "seed", "write.scheme", "workload.read_fraction",
                               "throughput_gbps", "read_latency_p99_ns", "error", "key"]
    assert len(a) == 8 and not a.duplicated(["point", "seed"]).any() and (a["error"] == "").all()
    # the table on disk is the same, in both formats
    pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "o" / "runs.parquet"), a)
    csv = pd.read_csv(tmp_path / "o" / "runs.csv", keep_default_na=False)
    assert np.allclose(csv["throughput_gbps"], a["throughput_gbps"], rtol=1e-15)
    # each row is a plain run of its config: the same numbers as memsim.simulate
    from memsim import simulate
    row = a.iloc[5]
    s = simulate(DEMO, overrides={**SMALL, "write.scheme": row["write.scheme"],
                                  "workload.read_fraction": row["workload.read_fraction"],
                                  "run.seed": int(row["seed"])}).summary
    assert s["throughput_gbps"] == row["throughput_gbps"]
    assert s["read_latency_p99_ns"] == row["read_latency_p99_ns"]


def test_same_seeds_at_every_point():
    df = sweep(DEMO, {"write.scheme": ["full_line", "flip_n_write"]}, seeds=3, workers=1, fixed=SMALL,
               progress=False)
    assert df.groupby("point")["seed"].apply(list).apply(tuple).nunique() == 1


def test_rerun_reuses_and_grown_grid_reuses(tmp_path):
    out = tmp_path / "o"
    first = run_sweep(small_spec({"write.scheme": ["full_line", "flip_n_write"]}), workers=1, out=out,
                      progress=False)
    assert (first.ran, first.reused) == (4, 0)
    cached = {p: p.stat().st_mtime_ns for p in (out / "cache").glob("*.json")}
    assert len(cached) == 4
    again = run_sweep(small_spec({"write.scheme": ["full_line", "flip_n_write"]}), workers=1, out=out,
                      progress=False)
    assert (again.ran, again.reused) == (0, 4)
    pd.testing.assert_frame_equal(again.runs, first.runs)
    grown = run_sweep(small_spec({"write.scheme": ["full_line", "data_comparison", "flip_n_write"]}),
                      workers=1, out=out, progress=False)
    assert (grown.ran, grown.reused) == (2, 4)
    assert {p: p.stat().st_mtime_ns for p in cached} == cached  # not rewritten
    old = first.runs.set_index(["write.scheme", "seed"])
    new = grown.runs.set_index(["write.scheme", "seed"]).loc[old.index]
    assert (new["throughput_gbps"] == old["throughput_gbps"]).all()
    # more replications reuse the earlier seeds
    more = run_sweep(small_spec({"write.scheme": ["full_line", "data_comparison", "flip_n_write"]}, seeds=3),
                     workers=1, out=out, progress=False)
    assert (more.ran, more.reused) == (3, 6)


def test_cache_key_ignores_placement_only():
    from memsim.experiment.run import resolve
    a = resolve(DEMO).model_dump()
    b = resolve(DEMO, {"run.name": "other", "run.out_dir": "elsewhere"}).model_dump()
    c = resolve(DEMO, {"array.banks": 4}).model_dump()
    d = resolve(DEMO, {"run.seed": 8}).model_dump()
    assert config_key(a) == config_key(b)
    assert len({config_key(a), config_key(c), config_key(d), config_key(a, version="9.9")}) == 4


def test_invalid_point_fails_before_any_point_runs(tmp_path):
    spec = small_spec({"array.banks": [8, -3, 4]})
    with pytest.raises(ConfigError) as exc:
        run_sweep(spec, workers=2, out=tmp_path / "o", progress=False)
    msg = exc.value.one_line()
    assert "grid.array.banks" in msg and "found -3" in msg and "\n" not in msg
    assert not (tmp_path / "o").exists()          # nothing ran, nothing written


def test_error_in_run_is_one_line_with_traceback_kept(tmp_path, monkeypatch):
    import memsim.experiment.run as run_mod
    real = run_mod.simulate

    def flaky(config, **kw):
        if config["write"]["scheme"] == "flip_n_write":
            raise RuntimeError("model fell over\nsecond line")
        return real(config, **kw)

    monkeypatch.setattr(run_mod, "simulate", flaky)
    out = run_sweep(small_spec({"write.scheme": ["full_line", "flip_n_write"]}), workers=1,
                    out=tmp_path / "o", progress=False)
    errs = out.runs.set_index("write.scheme")["error"]
    assert (errs.loc["flip_n_write"] == "RuntimeError: model fell over second line").all()
    assert (errs.loc["full_line"] == "").all()
    assert "Traceback" in (tmp_path / "o" / "errors.txt").read_text()
    # not cached, so a fixed model is retried
    monkeypatch.setattr(run_mod, "simulate", real)
    again = run_sweep(small_spec({"write.scheme": ["full_line", "flip_n_write"]}), workers=1,
                      out=tmp_path / "o", progress=False)
    assert (again.ran, again.reused, again.failed) == (2, 2, 0)
    assert not (tmp_path / "o" / "errors.txt").exists()


def test_unknown_metric_fails_before_running(tmp_path):
    spec = make_spec(DEMO, {"write.scheme": ["full_line"]}, seeds=1, fixed=SMALL, metrics=["throughput_gbs"])
    with pytest.raises(ConfigError, match="sweep.metrics.*throughput_gbs.*throughput_gbps"):
        run_sweep(spec, workers=1, out=tmp_path / "o", progress=False)
    assert not (tmp_path / "o").exists()


def test_unknown_metric_still_caught_after_running_without_the_probe(tmp_path):
    spec = make_spec(DEMO, {"write.scheme": ["full_line"]}, seeds=1, fixed=SMALL, metrics=["throughput_gbs"])
    with pytest.raises(ConfigError, match="sweep.metrics.*throughput_gbs.*throughput_gbps"):
        run_sweep(spec, workers=1, out=tmp_path / "o", progress=False, check=False)
    assert len(list((tmp_path / "o" / "cache").glob("*.json"))) == 1  # nothing computed is lost


def test_kept_tables_are_stacked(tmp_path):
    out = run_sweep(small_spec({"write.scheme": ["full_line", "flip_n_write"]}), workers=1,
                    out=tmp_path / "o", progress=False)
    h = pd.read_parquet(tmp_path / "o" / "tables" / "latency_histogram.parquet")
    assert list(h.columns[:3]) == ["point", "seed", "write.scheme"]
    # every run's histogram counts all of its requests
    per_run = h.groupby(["point", "seed"])["count"].sum()
    assert (per_run == SMALL["workload.requests"]).all() and len(per_run) == len(out.runs)


# --- kill and resume through the command line -----------------------------------------

KILL_SWEEP = """
[sweep]
name = "kill_me"
base = "@DEMO@"
replications = 2
metrics = ["throughput_gbps"]

[fixed]
workload.requests = 2500

[grid]
write.scheme = ["full_line", "data_comparison", "flip_n_write"]
workload.read_fraction = [0.5, 0.7, 0.9]
"""


@pytest.mark.slow
def test_killed_sweep_resumes_without_loss_duplication_or_recomputation(tmp_path):
    spec_file = write_sweep(tmp_path, KILL_SWEEP)
    out = tmp_path / "o"
    total = 3 * 3 * 2
    cmd = [sys.executable, "-m", "memsim.cli", "sweep", str(spec_file), "--workers", "2", "--quiet",
           "--out", str(out)]
    proc = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, "PYTHONPATH": str(ROOT)})
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and proc.poll() is None:
        if len(list((out / "cache").glob("*.json"))) >= 3:
            break
        time.sleep(0.02)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    assert not (out / "runs.parquet").exists()
    done = {p.name: p.stat().st_mtime_ns for p in (out / "cache").glob("*.json")}
    assert 3 <= len(done) < total
    assert not list((out / "cache").glob(".*.tmp"))  # no half-written entry left behind
    r = memsim("sweep", str(spec_file), "--workers", "2", "--quiet", "--out", str(out))
    assert r.returncode == 0, r.stderr
    assert f"{total - len(done)} ran, {len(done)} from cache, 0 failed" in r.stdout
    assert {n: (out / "cache" / n).stat().st_mtime_ns for n in done} == done
    df = pd.read_parquet(out / "runs.parquet")
    assert len(df) == total and not df.duplicated(["point", "seed"]).any()
    assert (df["error"] == "").all() and df["throughput_gbps"].notna().all()
    assert len(list((out / "cache").glob("*.json"))) == total


def test_cli_sweep_writes_tables_and_exit_2_on_invalid_points(tmp_path, capsys, monkeypatch):
    spec_file = write_sweep(tmp_path, """
[sweep]
name = "two"
base = "@DEMO@"
replications = 2
metrics = ["throughput_gbps", "energy_per_bit_pj"]
[fixed]
workload.requests = 1500
[grid]
write.scheme = ["full_line", "flip_n_write"]
""")
    code, out, err = cli(capsys, monkeypatch, "sweep", spec_file, "--workers", "1", "--out", tmp_path / "o")
    assert code == 0, err
    assert "4 runs (2 points x 2 seeds)" in out and "flip_n_write" in out
    for name in ("runs.parquet", "runs.csv", "point_stats.parquet", "point_stats.csv", "sweep.json"):
        assert (tmp_path / "o" / name).is_file()
    st = pd.read_csv(tmp_path / "o" / "point_stats.csv")
    assert set(st["metric"]) == {"throughput_gbps", "energy_per_bit_pj"} and len(st) == 4
    bad = write_sweep(tmp_path, spec_file.read_text().replace('"flip_n_write"]', '"magic"]'), "bad.toml")
    code, _, err = cli(capsys, monkeypatch, "sweep", bad, "--workers", "1", "--quiet", "--out", tmp_path / "b")
    assert code == 2 and err.count("\n") == 1
    assert "bad.toml: grid.write.scheme" in err and "'magic'" in err
    assert not (tmp_path / "b").exists()          # no point ran


# --- atomic files ------------------------------------------------------------------------


def test_write_frame_failure_mid_write_leaves_old_file(tmp_path, monkeypatch):
    old = pd.DataFrame({"a": [1, 2, 3]})
    write_frame(old, tmp_path, "t")
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    real_fdopen = os.fdopen

    class HalfWriter:
        def __init__(self, fh):
            self.fh = fh

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            self.fh.close()

        def write(self, data):
            self.fh.write(data[: len(data) // 2])
            self.fh.flush()
            raise OSError("disk full")

    monkeypatch.setattr(os, "fdopen", lambda fd, mode="r", *a, **k: HalfWriter(real_fdopen(fd, mode, *a, **k)))
    with pytest.raises(OSError, match="disk full"):
        write_frame(pd.DataFrame({"a": range(1000)}), tmp_path, "t")
    monkeypatch.setattr(os, "fdopen", real_fdopen)
    after = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    assert after == before  # old files intact, no temp file left
    pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "t.parquet"), old)


def test_cache_entry_written_atomically(tmp_path, monkeypatch):
    c = RunCache(tmp_path)
    c.put_text("k", cache_mod.entry_text("k", {}, {"x": 1}, {}, 0.0))

    def boom(src, dst):
        raise OSError("crash before rename")

    monkeypatch.setattr(os, "replace", boom)
    with pytest.raises(OSError):
        c.put_text("k", cache_mod.entry_text("k", {}, {"x": 2}, {}, 0.0))
    monkeypatch.undo()
    assert c.get("k")["summary"] == {"x": 1}
    assert [p.name for p in tmp_path.iterdir()] == ["k.json"]
    (tmp_path / "bad.json").write_text('{"key": "bad", "summ')  # a torn file counts as missing
    assert c.get("bad") is None
    assert cache_mod.RunCache(tmp_path).get("k", tables=("latency_histogram",)) is None


# --- statistics over seeds -----------------------------------------------------------------


def test_point_stats_match_student_t_interval():
    df = sweep(DEMO, {"write.scheme": ["full_line", "flip_n_write"]}, seeds=4, workers=1, fixed=SMALL,
               metrics=["read_latency_p99_ns", "energy_per_bit_pj"], progress=False)
    st = point_stats(df)
    assert len(st) == 4 and set(st.columns) >= {"mean", "std", "ci_low", "ci_high", "n"}
    for _, row in st.iterrows():
        x = df.loc[df["point"] == row["point"], row["metric"]].to_numpy(float)
        # Student-t interval for a mean: Student (W. S. Gosset), Biometrika 6(1), 1908;
        # reference values from scipy.stats.t.interval.
        lo, hi = sstats.t.interval(0.95, len(x) - 1, loc=x.mean(), scale=sstats.sem(x))
        assert row["n"] == 4
        assert row["mean"] == pytest.approx(x.mean(), rel=1e-12)
        assert row["std"] == pytest.approx(x.std(ddof=1), rel=1e-12)
        assert row["ci_low"] == pytest.approx(lo, rel=1e-9) and row["ci_high"] == pytest.approx(hi, rel=1e-9)


def test_cache_key_follows_content_of_named_files(tmp_path):
    # A config that names an input file (e.g. a trace) must not reuse runs made from older content.
    f = tmp_path / "input.csv"
    f.write_text("a\n")
    cfg = {"workload": {"source": str(f)}, "run": {"seed": 1}}
    k1 = config_key(cfg)
    assert config_key(cfg) == k1
    f.write_text("b\n")
    os.utime(f, ns=(f.stat().st_atime_ns, f.stat().st_mtime_ns + 10**9))
    assert config_key(cfg) != k1


def test_cache_key_follows_model_code(monkeypatch):
    cfg = {"run": {"seed": 1}}
    k = config_key(cfg)
    monkeypatch.setattr(cache_mod, "_CODE", ["another model"])
    assert config_key(cfg) != k
