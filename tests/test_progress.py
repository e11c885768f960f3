"""Progress bars: on a terminal after a delay, never into files or pipes."""
import io
import os
import subprocess
import sys
from pathlib import Path

from memsim.experiment.progress import shown, track

ROOT = Path(__file__).resolve().parents[1]


class _Tty(io.StringIO):
    def isatty(self):
        return True


def test_bar_on_a_terminal():
    out = _Tty()
    with shown(out):
        got = list(track([[1, 2], [3]], 3, "req", "run x", delay_s=0.0))
    assert got == [[1, 2], [3]]
    assert "run x" in out.getvalue() and "req" in out.getvalue()


def test_no_bar_when_not_a_terminal():
    out = io.StringIO()
    with shown(out):
        list(track([[1, 2], [3]], 3, "req", "run x", delay_s=0.0))
    assert out.getvalue() == ""


def test_no_bar_outside_the_command_line():
    out = _Tty()
    list(track([[1]], 1, "req", "run x", delay_s=0.0))
    assert out.getvalue() == ""


def test_cli_run_piped_has_no_bar(tmp_path):
    r = subprocess.run([sys.executable, "-m", "memsim.cli", "run", "workloads/demo.toml", "--set",
                        "workload.requests=3000", "--out", str(tmp_path / "o")],
                       capture_output=True, text=True, cwd=ROOT, env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert r.returncode == 0, r.stderr
    assert "req/s" not in r.stderr and "\r" not in r.stderr
