"""The installed command, run in a subprocess."""
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def memsim(*args, cwd=None):
    cmd = [sys.executable, "-m", "memsim.cli", *args]
    return subprocess.run(cmd, capture_output=True, text=True, cwd=cwd or ROOT,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})


def test_run_writes_results(tmp_path):
    out = tmp_path / "r"
    p = memsim("run", "workloads/demo.toml", "--set", "workload.requests=3000", "--out", str(out))
    assert p.returncode == 0, p.stderr
    assert "read_latency_p99_ns" in p.stdout
    doc = json.loads((out / "summary.json").read_text())
    assert doc["summary"]["requests"] == 3000
    assert doc["config"]["workload"]["requests"] == 3000
    assert (out / "summary.csv").exists() and (out / "latency_histogram.csv").exists()


@pytest.mark.parametrize("text,needle", [
    ("[workload]\nrequestz = 5\n", "workload.requestz"),
    ("[array]\nbanks = 'x'\n", "array.banks"),
    ("[cell]\nread_ns = -1.0\n", "cell.read_ns"),
    ("[controller]\ndrain_low = 20\ndrain_high = 10\n", "controller.drain_low"),
    ("[write]\nscheme = 'magic'\n", "write.scheme"),
    ("not toml = = 3\n", "invalid TOML"),
])
def test_bad_config_one_line_exit_2(tmp_path, text, needle):
    cfg = tmp_path / "bad.toml"
    cfg.write_text(text)
    p = memsim("run", str(cfg))
    assert p.returncode == 2
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and needle in lines[0] and "bad.toml" in lines[0] or needle in lines[0]
    assert "Traceback" not in p.stderr


def test_bad_set_and_missing_file():
    p = memsim("run", "workloads/demo.toml", "--set", "array.banks=-3")
    assert p.returncode == 2 and p.stderr.count("\n") == 1 and "--set array.banks" in p.stderr
    p = memsim("run", "no_such.toml")
    assert p.returncode == 2 and "no_such.toml" in p.stderr
    p = memsim("run", "workloads/demo.toml", "--bogus")
    assert p.returncode == 2 and p.stderr.count("\n") == 1


def test_list_comes_from_registries():
    p = memsim("list")
    assert p.returncode == 0
    for name in ("full_line", "data_comparison", "flip_n_write", "pcm_slc"):
        assert name in p.stdout
