"""What a process leaves behind: memory after runs, pool workers after a killed sweep,
trace read-ahead threads after errors, and runs that cannot end."""
import gc
import os
import signal
import subprocess
import sys
import threading
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
from conftest import DEMO, ROOT

from memsim.errors import ConfigError, TraceError
from memsim.experiment.run import resolve, simulate
from memsim.policy.refresh import plan_refresh, refresh_load
from memsim.workload.trace import TraceReader

ENV = {**os.environ, "PYTHONPATH": str(ROOT)}


# ---------------------------------------------------------------- memory per process


def test_finished_runs_release_their_memory():
    # Automatic collection off: what a run leaves in reference cycles stays until
    # someone collects, so without the release every run would add its arrays.
    over = {"workload.requests": 1500, "array.lines": 16384}
    gc.collect()
    gc.disable()
    tracemalloc.start()
    try:
        after = []
        for _ in range(4):
            simulate(DEMO, overrides=over)
            after.append(tracemalloc.get_traced_memory()[0])
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
        gc.enable()
    assert peak > 5e6                                    # a run's arrays are megabytes ...
    assert max(after) - min(after) < 0.05 * peak        # ... and none of them outlive it


# ---------------------------------------------------------------- no orphaned pool workers


def _children(pid: int) -> list[int]:
    out = []
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            try:
                fields = (d / "stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if int(fields[1]) == pid:
                out.append(int(d.name))
    return out


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"             # a zombie has exited; only its parent's wait is missing


@pytest.mark.slow
@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs /proc to find the workers")
def test_killed_sweep_leaves_no_worker(tmp_path):
    spec = tmp_path / "long.toml"
    spec.write_text(f'[sweep]\nname = "long"\nbase = "{DEMO}"\nreplications = 4\n'
                    '[fixed]\nworkload.requests = 60000\n'
                    '[grid]\nwrite.scheme = ["full_line", "data_comparison", "flip_n_write"]\n')
    proc = subprocess.Popen([sys.executable, "-m", "memsim.cli", "sweep", str(spec), "--workers", "2",
                             "--quiet", "--out", str(tmp_path / "out")], env=ENV,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        workers: list[int] = []
        deadline = time.monotonic() + 60
        while len(workers) < 2 and time.monotonic() < deadline and proc.poll() is None:
            time.sleep(0.2)
            workers = [p for p in _children(proc.pid) if _alive(p)]
        assert len(workers) >= 2, "the pool did not start"
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        deadline = time.monotonic() + 5
        while any(_alive(p) for p in workers) and time.monotonic() < deadline:
            time.sleep(0.1)
        left = [p for p in workers if _alive(p)]
    finally:
        if proc.poll() is None:
            proc.kill()
    for p in left:
        os.kill(p, signal.SIGKILL)
    assert left == []


# ---------------------------------------------------------------- trace read-ahead threads


def _reader_threads() -> list[threading.Thread]:
    return [t for t in threading.enumerate() if t.name == "memsim-trace-read-ahead"]


@pytest.fixture
def long_trace(tmp_path):
    p = tmp_path / "t.csv"
    rows = "".join(f"{i},{'RW'[i % 2]},{i % 977}\n" for i in range(60000))
    p.write_text("time_ns,op,line\n" + rows)
    return p


def test_reader_thread_ends_on_every_path(tmp_path, long_trace):
    small = {"block_bytes": 4096, "chunk_size": 256}
    # A bad row part-way: the error ends the pass and its thread.
    bad = tmp_path / "bad.csv"
    bad.write_text(long_trace.read_text().replace("\n30000,R,", "\n30000,Q,"))
    with pytest.raises(TraceError):
        for _ in TraceReader(bad, **small):
            pass
    assert _reader_threads() == []
    # A pass left part-way: close(), the context manager, and dropping the iterator.
    r = TraceReader(long_trace, **small)
    it = iter(r)
    next(it)
    assert len(_reader_threads()) == 1
    r.close()
    assert _reader_threads() == []
    with TraceReader(long_trace, **small) as r2:
        next(r2)
        assert len(_reader_threads()) == 1
    assert _reader_threads() == []
    it = iter(TraceReader(long_trace, **small))
    next(it)
    del it
    assert _reader_threads() == []
    assert all(not t.daemon for t in _reader_threads())


@pytest.mark.slow
def test_rejected_trace_exits_cleanly_every_time(tmp_path, long_trace):
    bad = tmp_path / "bad.csv"
    bad.write_text(long_trace.read_text().replace("\n20000,R,", "\nx,R,"))
    codes = []
    for _ in range(40):
        p = subprocess.run([sys.executable, "-m", "memsim.cli", "trace", "info", str(bad)], env=ENV,
                           capture_output=True, text=True, check=False)
        codes.append(p.returncode)
        assert "terminate called" not in p.stderr and p.stderr.count("\n") == 1, p.stderr
    assert codes == [2] * 40


# ---------------------------------------------------------------- a refresh load the banks cannot serve


OVERLOAD = {"cell.preset": "pcm_mlc2", "array.channels": 1, "array.banks": 2, "array.lines": 1024,
            "array.capacity_gib": 4.0, "workload.requests": 100, "refresh.policy": "drift"}


def test_refresh_overload_is_refused_up_front():
    with pytest.raises(ConfigError) as exc:
        simulate(None, overrides=OVERLOAD)
    msg = exc.value.one_line()
    assert msg.startswith("refresh.policy:") and "array.banks" in msg and "array.capacity_gib" in msg


def test_refresh_overload_cli_is_one_line(tmp_path):
    args = [a for k, v in OVERLOAD.items() for a in ("--set", f"{k}={v!r}".replace("'", '"'))]
    p = subprocess.run([sys.executable, "-m", "memsim.cli", "run", str(DEMO), *args, "--out", str(tmp_path / "r")],
                       env=ENV, capture_output=True, text=True, timeout=120, check=False)
    assert p.returncode == 2 and p.stderr.count("\n") == 1 and "refresh.policy" in p.stderr, p.stderr
    assert not (tmp_path / "r").exists()


def test_refresh_load_is_the_device_figure():
    # Utilization of a server = arrival rate x service time; a queue is stable only
    # below 1 (L. Kleinrock, Queueing Systems Vol. 1, Wiley, 1975, ch. 2).  Here the
    # arrival rate per bank is device lines per bank / refresh age.
    service_ns = 4000.0
    loads = []
    for lines in (1024, 4096):
        cfg = resolve(None, {**OVERLOAD, "array.lines": lines})
        plan = plan_refresh(cfg)
        loads.append(refresh_load(plan, np.array([lines // 2, lines // 2]), service_ns))
        device_lines_per_bank = 4 * 2**30 / 64 / 2
        assert loads[-1] == pytest.approx(device_lines_per_bank * service_ns / (plan.age_s * 1e9))
    assert loads[0] == pytest.approx(loads[1])          # not a function of the modeled lines
    # A load below 1 runs (4 banks x 16 channels share the same device).
    s = simulate(None, overrides={**OVERLOAD, "array.channels": 16}).summary
    assert s["requests"] == 100


def test_refresh_count_of_a_run_does_not_depend_on_modeled_lines():
    # Refreshes in a span = device lines x span / refresh interval (ages scale with
    # device lines per modeled line; see memsim/policy/refresh.py): common practice.
    from memsim.config import load_config
    from memsim.policy.refresh import plan_refresh, refresh_ops

    counts = []
    for lines in (4096, 65536):
        cfg = load_config(None, {"cell.preset": "pcm_mlc2", "refresh.policy": "drift",
                                 "array.lines": lines, "array.capacity_gib": 0.25})
        plan = plan_refresh(cfg)
        per_bank = np.full(cfg.array.banks * cfg.array.channels, lines / (cfg.array.banks * cfg.array.channels))
        counts.append(refresh_ops(plan, per_bank, 1e9))
    device_lines = 0.25 * 2**30 / 64
    assert counts[0] == pytest.approx(counts[1], rel=1e-9)
    assert counts[0] == pytest.approx(device_lines * 1.0 / plan.interval_s, rel=1e-6)
