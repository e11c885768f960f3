"""Result files: where they go, who owns a folder, bad output places, strict JSON, modes, cache checksums."""
import json
import os
import stat
from pathlib import Path

import pytest
from conftest import DEMO, cli

from memsim.experiment.cache import RunCache, entry_text
from memsim.experiment.sweep import make_spec, run_sweep
from memsim.metrics.files import atomic_write_text, dumps, loads_strict

SMALL = ("--set", "workload.requests=1500")
LIFETIME_TOML = ('[run]\nname = "c"\n[array]\nlines = 128\n[workload]\nread_fraction = 0.0\n'
                 '[leveling]\nscheme = "start_gap"\n[lifetime]\nwindow_writes = 20000\n')




def snapshot(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def one_line_error(code, stdout, stderr, needle):
    assert code == 2, stderr
    assert stderr.startswith("error: ") and stderr.count("\n") == 1, stderr
    assert "Traceback" not in stderr
    assert needle in stderr, stderr


def sweep_file(tmp_path: Path, name: str = "tiny", points=("full_line", "flip_n_write")) -> Path:
    p = tmp_path / f"{name}.toml"
    p.write_text(f'[sweep]\nname = "{name}"\nbase = "{DEMO}"\nreplications = 1\n'
                 f'[fixed]\nworkload.requests = 800\n[grid]\nwrite.scheme = {json.dumps(list(points))}\n')
    return p


# ---------------------------------------------------------------- bad output places, before any work


def _output_cases(tmp_path: Path):
    """(command line, the path the message must name) for each bad output place."""
    blocker = tmp_path / "occupied"
    blocker.write_text("a colleague's notes\n")
    named = tmp_path / "named"
    named.mkdir()
    (named / "demo").write_text("a file where the results folder would go\n")
    (named / "cache").write_text("a file where the cache folder would go\n")
    life = tmp_path / "life.toml"
    life.write_text(LIFETIME_TOML)
    sweep = sweep_file(tmp_path)
    return {
        "out_dir is a file": (["run", DEMO, *SMALL, "--set", f"run.out_dir={json.dumps(str(blocker))}"],
                              str(blocker)),
        "results folder is a file": (["run", DEMO, *SMALL, "--set", f"run.out_dir={json.dumps(str(named))}"],
                                     str(named / "demo")),
        "--out is a file": (["run", DEMO, *SMALL, "--out", blocker], str(blocker)),
        "--out below a file": (["run", DEMO, *SMALL, "--out", blocker / "deeper" / "r"], str(blocker)),
        "drift --out is a file": (["drift", DEMO, "--out", blocker], str(blocker)),
        "lifetime --out is a file": (["lifetime", life, "--write-rate", "2", "--out", blocker], str(blocker)),
        "sweep --out is a file": (["sweep", sweep, "--workers", "1", "--quiet", "--out", blocker], str(blocker)),
        "sweep cache is a file": (["sweep", sweep, "--workers", "1", "--quiet", "--out", named], str(named / "cache")),
        "trace make into a folder": (["trace", "make", DEMO, named], str(named)),
        "trace make below a file": (["trace", "make", DEMO, blocker / "t.csv"], str(blocker)),
        "compare --out below a file": (["compare", DEMO, "--vary", "write.scheme=full_line,flip_n_write",
                                        *SMALL, "--workers", "1", "--quiet", "--out", blocker / "c"],
                                       str(blocker)),
    }


CASES = ["out_dir is a file", "results folder is a file", "--out is a file", "--out below a file",
         "drift --out is a file", "lifetime --out is a file", "sweep --out is a file",
         "compare --out below a file", "trace make into a folder", "trace make below a file", "sweep cache is a file"]


@pytest.mark.parametrize("case", CASES)
def test_bad_output_place_is_one_line_before_running(tmp_path, capsys, monkeypatch, case):
    args, path = _output_cases(tmp_path)[case]
    before = snapshot(tmp_path)
    code, stdout, stderr = cli(capsys, monkeypatch, *args)
    one_line_error(code, stdout, stderr, path)
    assert stdout == ""                      # refused up front: nothing ran, nothing printed
    assert snapshot(tmp_path) == before      # and nothing changed


@pytest.mark.skipif(os.geteuid() == 0, reason="root may write into any folder")
def test_unwritable_folder_is_refused_up_front(tmp_path, capsys, monkeypatch):
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        code, stdout, stderr = cli(capsys, monkeypatch, "run", DEMO, *SMALL, "--out", locked / "r")
    finally:
        locked.chmod(0o700)
    one_line_error(code, stdout, stderr, str(locked))
    assert stdout == ""


def test_folder_without_write_permission_is_named(tmp_path, monkeypatch):
    from memsim.errors import UserError
    from memsim.metrics import files

    # Root may write anywhere, so the permission answer is stubbed here; the test
    # above checks the real thing for other users.
    monkeypatch.setattr(files.os, "access", lambda path, mode: Path(path) != tmp_path)
    with pytest.raises(UserError) as exc:
        files.check_folder(tmp_path / "a" / "b", "--out")
    assert exc.value.one_line().startswith(f"--out '{tmp_path / 'a' / 'b'}': found folder '{tmp_path}' not writable")


def test_results_that_cannot_be_saved_go_to_a_rescue_folder(tmp_path, capsys, monkeypatch):
    out = tmp_path / "r"
    (out / "latency_histogram.csv").mkdir(parents=True)     # passes the up-front check, fails on save
    code, stdout, stderr = cli(capsys, monkeypatch, "run", DEMO, *SMALL, "--out", out)
    one_line_error(code, stdout, stderr, str(out))
    assert "read_latency_p99_ns" in stdout                   # the computed summary is printed
    rescue = Path(stderr.split("saved to ", 1)[1].split(" instead", 1)[0])
    try:
        doc = loads_strict((rescue / "summary.json").read_text())
        assert doc["summary"]["requests"] == 1500
        assert (rescue / "latency_histogram.csv").is_file()
        assert f"results: {rescue}" in stdout
    finally:
        for p in sorted(rescue.rglob("*"), reverse=True):
            p.unlink() if p.is_file() else p.rmdir()
        rescue.rmdir()


# ---------------------------------------------------------------- one folder per command and config


def test_each_command_has_its_own_folder_and_other_settings_are_refused(tmp_path, capsys, monkeypatch):
    place = ("--set", f"run.out_dir={json.dumps(str(tmp_path))}")
    code, _, err = cli(capsys, monkeypatch, "run", DEMO, *SMALL, *place)
    assert code == 0, err
    run_dir = tmp_path / "demo" / "run"
    first = snapshot(run_dir)
    assert "summary.json" in first
    code, _, err = cli(capsys, monkeypatch, "drift", DEMO, *place)
    assert code == 0, err
    assert (tmp_path / "demo" / "drift" / "summary.json").is_file()
    assert snapshot(run_dir) == first                        # drift did not touch the run's results

    # The same config again replaces its own results without asking.
    code, stdout, err = cli(capsys, monkeypatch, "run", DEMO, *SMALL, *place)
    assert code == 0 and err == ""
    # A --set variant into the same folder is refused before running; the results stay.
    code, stdout, err = cli(capsys, monkeypatch, "run", DEMO, *SMALL, *place, "--set", "array.banks=4")
    one_line_error(code, stdout, err, str(run_dir))
    assert "--replace" in err and "run.name" in err and stdout == ""
    assert loads_strict((run_dir / "summary.json").read_text())["config"]["array"]["banks"] == 8
    # Its own name gives it its own folder; --replace overwrites on purpose.
    code, _, err = cli(capsys, monkeypatch, "run", DEMO, *SMALL, *place, "--set", "array.banks=4",
                       "--set", "run.name=four_banks")
    assert code == 0, err
    assert (tmp_path / "four_banks" / "run" / "summary.json").is_file()
    code, _, err = cli(capsys, monkeypatch, "run", DEMO, *SMALL, *place, "--set", "array.banks=4", "--replace")
    assert code == 0, err
    assert loads_strict((run_dir / "summary.json").read_text())["config"]["array"]["banks"] == 4


def test_results_of_unknown_origin_are_not_overwritten(tmp_path, capsys, monkeypatch):
    out = tmp_path / "old"
    out.mkdir()
    (out / "summary.json").write_text('{"summary": {"throughput_gbps": 1.0}}')
    code, stdout, err = cli(capsys, monkeypatch, "run", DEMO, *SMALL, "--out", out)
    one_line_error(code, stdout, err, str(out))
    assert (out / "summary.json").read_text() == '{"summary": {"throughput_gbps": 1.0}}'


def test_sweep_folder_belongs_to_its_sweep_file(tmp_path, capsys, monkeypatch):
    out = tmp_path / "s"
    a = sweep_file(tmp_path, "same")
    code, _, err = cli(capsys, monkeypatch, "sweep", a, "--workers", "1", "--quiet", "--out", out)
    assert code == 0, err
    first = snapshot(out)
    # The same file, its grid grown: the folder is its own, the finished runs are reused.
    sweep_file(tmp_path, "same", ("full_line", "flip_n_write", "data_comparison"))
    code, stdout, err = cli(capsys, monkeypatch, "sweep", a, "--workers", "1", "--quiet", "--out", out)
    assert code == 0, err
    assert "1 ran, 2 from cache" in stdout
    # Another sweep file with results for the same folder is refused.
    other = tmp_path / "elsewhere"
    other.mkdir()
    b = sweep_file(other, "same")
    kept = snapshot(out)
    code, stdout, err = cli(capsys, monkeypatch, "sweep", b, "--workers", "1", "--quiet", "--out", out)
    one_line_error(code, stdout, err, str(out))
    assert "--replace" in err
    assert snapshot(out) == kept and set(first) <= set(kept)


def test_compare_refuses_another_comparison_in_its_folder(tmp_path, capsys, monkeypatch):
    out = tmp_path / "c"
    base = ["compare", DEMO, *SMALL, "--workers", "1", "--quiet", "--out", out]
    code, _, err = cli(capsys, monkeypatch, *base, "--vary", "write.scheme=full_line,flip_n_write")
    assert code == 0, err
    kept = (out / "compare.csv").read_bytes()
    code, stdout, err = cli(capsys, monkeypatch, *base, "--vary", "array.banks=4,8")
    one_line_error(code, stdout, err, str(out))
    assert (out / "compare.csv").read_bytes() == kept
    code, _, err = cli(capsys, monkeypatch, *base, "--vary", "write.scheme=full_line,flip_n_write")
    assert code == 0, err


# ---------------------------------------------------------------- strict JSON everywhere


def test_every_json_file_written_is_strict(tmp_path, capsys, monkeypatch):
    # read_fraction = 1: no writes, so every write latency is "no value" (NaN in memory).
    reads_only = ("--set", "workload.read_fraction=1.0")
    life = tmp_path / "life.toml"
    life.write_text(LIFETIME_TOML)
    runs = [
        ["run", DEMO, *SMALL, *reads_only, "--out", tmp_path / "run"],
        ["drift", DEMO, "--out", tmp_path / "drift"],
        ["lifetime", life, "--write-rate", "2", "--out", tmp_path / "lifetime"],
        ["sweep", sweep_file(tmp_path), "--workers", "1", "--quiet", "--out", tmp_path / "sweep"],
        ["compare", DEMO, *SMALL, *reads_only, "--vary", "write.scheme=full_line,flip_n_write",
         "--workers", "1", "--quiet", "--out", tmp_path / "compare"],
    ]
    for args in runs:
        code, _, err = cli(capsys, monkeypatch, *args)
        assert code == 0, (args[0], err)
    found = sorted(tmp_path.rglob("*.json"))
    kinds = {p.name for p in found}
    assert {"summary.json", "sweep.json", "compare.json", ".memsim-results.json"} <= kinds
    assert any(p.parent.name == "cache" for p in found)
    for p in found:
        loads_strict(p.read_text())          # raises on NaN, Infinity, -Infinity
    s = loads_strict((tmp_path / "run" / "summary.json").read_text())["summary"]
    assert s["writes"] == 0 and s["write_latency_p99_ns"] is None


def test_strict_dumps_writes_null_for_non_finite():
    import numpy as np

    text = dumps({"a": float("nan"), "b": [np.float64("inf"), -np.inf, 1.5], "c": np.int64(3)})
    assert json.loads(text) == {"a": None, "b": [None, None, 1.5], "c": 3}
    with pytest.raises(ValueError):
        loads_strict('{"x": NaN}')


# ---------------------------------------------------------------- file modes


@pytest.mark.parametrize("mask,mode", [(0o022, 0o644), (0o027, 0o640)])
def test_result_files_follow_the_umask(tmp_path, capsys, monkeypatch, mask, mode):
    old = os.umask(mask)
    try:
        atomic_write_text(tmp_path / "direct" / "x.txt", "x")
        if mask == 0o022:
            code, _, err = cli(capsys, monkeypatch, "drift", DEMO, "--out", tmp_path / "d")
            assert code == 0, err
    finally:
        os.umask(old)
    files = [p for p in tmp_path.rglob("*") if p.is_file()]
    assert len(files) >= (5 if mask == 0o022 else 1)
    for p in files:
        assert stat.S_IMODE(p.stat().st_mode) == mode, p     # what open() would give under the umask


# ---------------------------------------------------------------- cache checksums


def test_cache_entry_edited_by_hand_is_detected_and_rerun(tmp_path):
    spec = make_spec(DEMO, {"write.scheme": ["full_line", "flip_n_write"]}, seeds=1,
                     fixed={"workload.requests": 800}, name="chk")
    first = run_sweep(spec, workers=1, out=tmp_path, progress=False)
    assert first.ran == 2
    entry_file = min((tmp_path / "cache").glob("*.json"))
    doc = json.loads(entry_file.read_text())
    true_value = doc["summary"]["throughput_gbps"]
    doc["summary"]["throughput_gbps"] = 999.0
    entry_file.write_text(json.dumps(doc))
    cache = RunCache(tmp_path / "cache")
    assert cache.get(doc["key"]) is None and cache.rejected == 1
    again = run_sweep(spec, workers=1, out=tmp_path, progress=False)
    assert (again.ran, again.reused) == (1, 1)
    row = again.runs[again.runs["key"] == doc["key"]]
    assert float(row["throughput_gbps"].iloc[0]) == true_value
    assert loads_strict(entry_file.read_text())["summary"]["throughput_gbps"] == true_value


def test_cache_entry_checksum_round_trip(tmp_path):
    import pandas as pd

    c = RunCache(tmp_path)
    t = pd.DataFrame({"lo_ns": [1.5, 2.5], "count": [3, 4]})
    c.put_text("k", entry_text("k", {"run": {"seed": 1}}, {"x": 0.1, "y": float("nan")}, {"h": t}, 0.25))
    got = c.get("k", tables=("h",))
    assert got is not None and got["summary"] == {"x": 0.1, "y": None}
    text = (tmp_path / "k.json").read_text()
    (tmp_path / "k.json").write_text(text.replace('"count"', '"kount"'))
    assert c.get("k") is None
