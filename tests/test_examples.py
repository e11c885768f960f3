"""Every example in workloads/ runs, and its summary matches the stored one.

This is a regression pin (not a check of the theory; the theory is tested in
the test_engine_* files).  After an intended change of the model, refresh the
pins with ``python tests/test_examples.py --update`` and say why in the commit.
"""
import json
import sys
from pathlib import Path

import pytest

from memsim import simulate
from memsim.config.load import read_toml

ROOT = Path(__file__).resolve().parents[1]
EXPECTED = ROOT / "tests" / "expected"
KEYS = ["requests", "throughput_gbps", "read_latency_mean_ns", "read_latency_p99_ns",
        "write_latency_p99_ns", "energy_per_bit_pj", "cells_programmed_per_write",
        "bank_utilization"]


def run_configs():
    return sorted(p for p in (ROOT / "workloads").glob("*.toml") if "run" in read_toml(p)
                  and "grid" not in read_toml(p))


def pinned(path):
    s = simulate(path).summary
    return {k: s[k] for k in KEYS}


@pytest.mark.parametrize("path", run_configs(), ids=lambda p: p.stem)
def test_example_matches_pin(path):
    want = json.loads((EXPECTED / f"{path.stem}.json").read_text())
    s = simulate(path).summary
    # Every shipped example runs on the compiled engine (none needs the fallback).
    assert s["engine"] == "fast"
    got = {k: s[k] for k in KEYS}
    for k in KEYS:
        assert got[k] == pytest.approx(want[k], rel=1e-6, abs=1e-9, nan_ok=True), k


def _fallbacks(doc):
    from memsim.config import RunConfig
    from memsim.engine.fast import unsupported
    from memsim.experiment.build import build_path
    from memsim.policy.refresh import plan_refresh
    cfg = RunConfig.model_validate(doc)
    return unsupported(cfg, build_path(cfg), plan_refresh(cfg))


@pytest.mark.parametrize("name", ["sweep_banks", "sweep_mix_banks", "sweep_schemes"])
def test_sweep_examples_need_no_fallback(name):
    from memsim.experiment.sweep import load_sweep, plan
    _, tasks, _ = plan(load_sweep(ROOT / "workloads" / f"{name}.toml"))
    assert tasks
    for t in tasks:
        assert _fallbacks(t.config) == []


def test_erase_ahead_comparison_needs_no_fallback():
    # The comparison the header of erase_ahead.toml runs.
    from memsim.experiment.compare import make_compare_spec, plan
    w = ROOT / "workloads"
    spec = make_compare_spec(w / "erase_ahead.toml", "write.scheme=data_comparison,flip_n_write,block_erase",
                             workloads=[w / "erase_ahead_ingest.toml", w / "erase_ahead_lookup.toml"])
    _, tasks = plan(spec)
    assert len(tasks) == 6
    for t in tasks:
        assert _fallbacks(t.config) == []


if __name__ == "__main__" and "--update" in sys.argv:
    EXPECTED.mkdir(exist_ok=True)
    for p in run_configs():
        (EXPECTED / f"{p.stem}.json").write_text(json.dumps(pinned(p), indent=1) + "\n")
        print("pinned", p.stem)
