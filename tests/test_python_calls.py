"""Every command is also a Python call that returns data (README: "From Python")."""
from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
from conftest import DEMO, ROOT

import memsim
from memsim.errors import ConfigError, UserError


def test_make_trace_then_summarize_it(tmp_path):
    out = tmp_path / "t.csv"
    made = memsim.make_trace(DEMO, out, overrides={"workload.requests": 3000})
    assert made["requests"] == made["reads"] + made["writes"] + made["hints"] == 3000
    info = memsim.trace_summary(out)
    # The summary counts what the generator wrote, request for request.
    assert (info["requests"], info["reads"], info["writes"]) == (3000, made["reads"], made["writes"])
    assert info["kind"] == "text" and not info["has_data"]
    assert isinstance(info["reuse_histogram"], pd.DataFrame)
    assert info["reuse_histogram"]["accesses"].sum() + info["reuse_cold_accesses"] == 3000


def test_make_trace_rejects_what_the_cli_rejects(tmp_path):
    with pytest.raises(ConfigError, match="workload.pattern"):
        memsim.make_trace(ROOT / "workloads" / "trace_replay.toml", tmp_path / "t.csv")
    with pytest.raises(UserError, match="suffix"):
        memsim.make_trace(DEMO, tmp_path / "t.txt")


def test_available_lists_the_registries():
    from memsim.policy.leveling import leveler_names
    from memsim.policy.write import scheme_names

    parts = memsim.available()
    assert parts["write_schemes"] == list(scheme_names())
    assert parts["wear_levelers"] == list(leveler_names())
    assert "none" in parts["refresh_policies"] and "pcm_slc" in parts["presets"]


def test_plot_sweep_returns_figures_and_page(tmp_path):
    out = tmp_path / "res"
    memsim.sweep(DEMO, {"write.scheme": ["full_line", "data_comparison"]}, seeds=2,
                 fixed={"workload.requests": 1000}, metrics=["throughput_gbps"], workers=1, out=out,
                 progress=False)
    drawn = memsim.plot_sweep(out)
    assert drawn["report"] == out / "report.md" and drawn["report"].exists()
    assert drawn["figures"] and all(Path(p).exists() and str(p).endswith(".png") for p in drawn["figures"])
