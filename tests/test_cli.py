"""The command line: the installed command once in a subprocess, the rest in this process."""
import json

import pytest
from conftest import DEMO, memsim_cli, memsim_subprocess


def test_run_writes_results(tmp_path):
    out = tmp_path / "r"
    p = memsim_subprocess("run", "workloads/demo.toml", "--set", "workload.requests=3000", "--out", str(out))
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
    p = memsim_cli("run", cfg)
    assert p.code == 2
    lines = p.err.strip().splitlines()
    assert len(lines) == 1 and needle in lines[0] and "bad.toml" in lines[0] or needle in lines[0]
    assert "Traceback" not in p.err


def test_bad_set_and_missing_file():
    p = memsim_cli("run", DEMO, "--set", "array.banks=-3")
    assert p.code == 2 and p.err.count("\n") == 1 and "--set array.banks" in p.err
    p = memsim_cli("run", "no_such.toml")
    assert p.code == 2 and "no_such.toml" in p.err
    p = memsim_cli("run", DEMO, "--bogus")
    assert p.code == 2 and p.err.count("\n") == 1


def test_list_comes_from_registries():
    p = memsim_cli("list")
    assert p.code == 0
    for name in ("full_line", "data_comparison", "flip_n_write", "pcm_slc", "cost_benefit", "scrub"):
        assert name in p.out
