"""Write hints: in-place pre-programming of announced lines."""
import numpy as np
import pytest

from memsim import simulate
from memsim.config import load_config
from memsim.workload.chunk import HINT, READ, WRITE, Chunk
from memsim.workload.synthetic import SyntheticSource
from memsim.workload.trace import write_trace

LIGHT = {"workload.requests": 20000, "array.lines": 8192, "workload.read_fraction": 0.8,
         "workload.interval_ns": 150.0, "workload.data": "random"}


def test_generator_announces_every_write_lead_ns_before():
    cfg = load_config(None, {**LIGHT, "workload.hint_lead_ns": 700.0})
    chunks = list(SyntheticSource(cfg.workload, cfg.footprint, np.random.default_rng(3), 4096))
    c = Chunk.concat(chunks)
    assert np.all(np.diff(c.time_ns) >= 0)
    hints = {(round(t + 700.0, 6), int(n)) for t, n in zip(c.time_ns[c.op == HINT], c.line[c.op == HINT])}
    writes = [(round(t, 6), int(n)) for t, n in zip(c.time_ns[c.op == WRITE], c.line[c.op == WRITE])]
    announced = [w for w in writes if w[0] >= 700.0]
    assert len(hints) == len(announced) and all(w in hints for w in announced)
    assert (c.op != HINT).sum() == cfg.workload.requests


def test_preset_lines_need_only_reset_pulses_and_write_faster():
    # PreSET (Qureshi et al., ISCA 2012): a line brought to all-SET before its
    # write is then written with RESET pulses only, the fast ones.
    base = simulate(None, overrides={**LIGHT, "workload.hint_lead_ns": 2000.0}).summary
    pre = simulate(None, overrides={**LIGHT, "workload.hint_lead_ns": 2000.0,
                                     "controller.hint_preset": True}).summary
    assert base["presets"] == 0 and base["hints"] > 0
    assert pre["hint_coverage"] > 0.9
    assert pre["set_cells_per_write"] < 0.05 * base["set_cells_per_write"]
    assert pre["write_latency_mean_ns"] < base["write_latency_mean_ns"]
    # The pre-programming is paid in energy and wear, and counted.
    assert pre["energy_preset_pj"] > 0 and pre["energy_per_bit_pj"] > base["energy_per_bit_pj"]
    parts = (pre["energy_read_pj"] + pre["energy_set_pj"] + pre["energy_reset_pj"]
             + pre["energy_mlc_program_pj"] + pre["energy_cancelled_pj"] + pre["energy_refresh_pj"]
             + pre["energy_preset_pj"])
    assert pre["energy_pj"] == pytest.approx(parts)
    assert pre["requests"] == base["requests"]


def test_hints_without_writes_are_wasted(tmp_path):
    n = 400
    t = np.arange(n) * 200.0
    op = np.where(np.arange(n) % 2 == 0, HINT, READ).astype(np.int8)
    line = np.arange(n, dtype=np.int64) % 512
    path = tmp_path / "hints.csv"
    write_trace(path, [Chunk(t, op, line)])
    s = simulate(None, overrides={"workload.pattern": "trace", "workload.trace": str(path),
                                   "array.lines": 1024, "controller.hint_preset": True}).summary
    assert s["hints"] == n // 2 and s["presets"] == n // 2
    assert s["hint_hits"] == 0 and s["wasted_presets"] == n // 2 and s["wasted_preset_cells"] > 0
    assert s["writes"] == 0 and (op == WRITE).sum() == 0
