"""Shared test helpers: paths, small configs, the command line in this process or in a subprocess.

Import the plain names with ``from conftest import DEMO, SMALL, memsim_cli``
(pytest puts this folder on the path); fixtures are found by pytest itself.
"""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path
from typing import NamedTuple

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
WORKLOADS = ROOT / "workloads"
DEMO = WORKLOADS / "demo.toml"
# Small enough for a run in well under a second, large enough for the summary's keys to mean something.
SMALL = {"workload.requests": 1500}
SCHEMES = "write.scheme=full_line,data_comparison"


class CliResult(NamedTuple):
    """Exit code, standard output and standard error of one command."""

    code: int
    out: str
    err: str


def memsim_cli(*args: object) -> CliResult:
    """``memsim ARGS`` in this process with click's runner (no Python start-up).

    Goes through :func:`memsim.cli.entry`, so user errors print their one
    line on stderr and exit with code 2 exactly as the installed command does.
    """
    from click.testing import CliRunner

    from memsim.cli import entry

    runner = CliRunner()
    code = 0
    old_argv = sys.argv
    with runner.isolation() as (out, err, *_):
        sys.argv = ["memsim", *map(str, args)]
        try:
            entry()
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
        finally:
            sys.argv = old_argv
        stdout, stderr = out.getvalue().decode(), err.getvalue().decode()
    return CliResult(code, stdout, stderr)


def cli(capsys: object, monkeypatch: object, *args: object) -> CliResult:
    """:func:`memsim_cli` with the call form older tests use (capsys and monkeypatch are not needed)."""
    return memsim_cli(*args)


def memsim_subprocess(*args: object, cwd: Path | None = None,
                      env: dict[str, str] | None = None) -> subprocess.CompletedProcess:
    """The installed command in a subprocess, for tests where the process itself is the point."""
    cmd = [sys.executable, "-m", "memsim.cli", *map(str, args)]
    return subprocess.run(cmd, check=False, capture_output=True, text=True, cwd=cwd or ROOT,
                          env={**os.environ, "PYTHONPATH": str(ROOT), **(env or {})})


@pytest.fixture
def rng() -> np.random.Generator:
    return np.random.default_rng(12345)
