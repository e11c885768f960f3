"""Side-by-side comparison: written settings, the table against single runs, CLI files and errors."""
import os
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from conftest import DEMO, ROOT, SCHEMES, SMALL, cli
from scipy import stats as sstats

from memsim.errors import ConfigError
from memsim.experiment.compare import (
    SHOWN,
    compare,
    make_compare_spec,
    parse_groups,
    settings_from,
    split_top,
    workloads_from,
)
from memsim.experiment.run import simulate
from memsim.experiment.sweep import derive_seeds
from memsim.report.compare_plot import compare_figure, table_metrics
from memsim.report.figures import axis_label

# --- written settings ------------------------------------------------------------------


def test_split_keeps_quoted_and_bracketed_commas():
    assert split_top('a.b=1,c.d="x,y",e.f=[1, 2]') == ["a.b=1", 'c.d="x,y"', "e.f=[1, 2]"]


def test_one_key_with_several_values_gives_one_setting_each():
    groups = settings_from(["write.scheme=full_line, data_comparison,flip_n_write"])
    assert [g.label for g in groups] == ["full_line", "data_comparison", "flip_n_write"]
    assert [g.overrides for g in groups] == [{"write.scheme": s} for s in
                                            ("full_line", "data_comparison", "flip_n_write")]


def test_several_keys_give_one_setting_and_labels_name_it():
    (g,) = parse_groups("low power: write.scheme=flip_n_write,array.bank_budget_ua=19200,"
                        "controller.idle_writes=false", "x")
    assert g.label == "low power" and g.labelled
    # values are TOML literals: numbers and booleans arrive typed
    assert g.overrides == {"write.scheme": "flip_n_write", "array.bank_budget_ua": 19200,
                           "controller.idle_writes": False}
    (base,) = parse_groups("as_configured:", "x")
    assert base.label == "as_configured" and base.overrides == {}


def test_default_labels_name_the_key_when_the_value_alone_says_little():
    groups = settings_from(["array.banks=4,16", "write.scheme=full_line,array.row_lines=0"])
    assert [g.label for g in groups] == ["banks=4", "banks=16", "scheme=full_line,row_lines=0"]
    # two keys ending alike keep their section
    groups = settings_from(["write.scheme=full_line,leveling.scheme=start_gap", "array.banks=4,8"])
    assert [g.label for g in groups] == ["write.scheme=full_line,leveling.scheme=start_gap",
                                         "banks=4", "banks=8"]


def test_python_forms():
    product = settings_from({"write.scheme": ["full_line", "flip_n_write"], "array.banks": [4, 8]})
    assert [g.overrides for g in product] == [
        {"write.scheme": "full_line", "array.banks": 4}, {"write.scheme": "full_line", "array.banks": 8},
        {"write.scheme": "flip_n_write", "array.banks": 4}, {"write.scheme": "flip_n_write", "array.banks": 8}]
    named = settings_from({"plain": {"write": {"scheme": "full_line"}}, "paired": {"write__scheme": "flip_n_write"}})
    assert [(g.label, g.overrides) for g in named] == [("plain", {"write.scheme": "full_line"}),
                                                      ("paired", {"write.scheme": "flip_n_write"})]


@pytest.mark.parametrize("text,needle", [
    ("write.schem=full_line", "unknown key 'write.schem'"),
    ("full_line", "section.key=value"),
    ("write.scheme=full_line,data_comparison,array.banks=4", "one key with several values"),
    ("name: write.scheme=full_line,data_comparison", "label"),
    ("write.scheme=", "a value after each '='"),
    ("write.scheme=a,,b", "section.key=value"),
    ("run.seed=3", "--seeds"),
    ("array.banks=4,4", "distinct values"),
    (": write.scheme=full_line", "empty label"),
])
def test_bad_settings_are_one_config_error(text, needle):
    with pytest.raises(ConfigError) as exc:
        settings_from([text], "--vary")
    assert needle in exc.value.one_line() and exc.value.where.startswith(f"--vary {text!r}")


def test_repeated_label_and_fixed_varied_overlap_are_errors():
    with pytest.raises(ConfigError, match="label 'full_line' again"):
        settings_from(["write.scheme=full_line", "write.scheme=full_line"])
    with pytest.raises(ConfigError, match="either fixed or varied"):
        make_compare_spec(DEMO, [SCHEMES], fixed={"write.scheme": "full_line"})


def test_a_bad_value_is_blamed_on_the_setting_that_set_it():
    spec = make_compare_spec(DEMO, ["write.scheme=full_line,no_such_scheme"], fixed=SMALL, source="--vary")
    from memsim.experiment.compare import plan

    with pytest.raises(ConfigError) as exc:
        plan(spec)
    assert exc.value.where == f"--vary {SCHEMES.replace('data_comparison', 'no_such_scheme')!r}: write.scheme"


def test_workload_files_apply_over_the_base_less_run_placement(tmp_path):
    f = tmp_path / "tidal_random.toml"
    f.write_text('[run]\nname = "other"\nseed = 99\n[workload]\ndata = "random"\n')
    wl = workloads_from([str(f), "busy: workload.interval_ns=10", f"calm:{f}"])
    assert [g.label for g in wl] == ["tidal_random", "busy", "calm"]
    assert wl[0].overrides == {"workload.data": "random"}  # run.name and run.seed dropped
    spec = make_compare_spec(DEMO, [SCHEMES], workloads=[str(f)])
    assert spec.seeds == [7]  # the base config's run.seed, not the workload file's
    with pytest.raises(ConfigError, match="no such file"):
        workloads_from(["missing.toml"])


def test_seed_count_starts_with_the_config_seed():
    spec = make_compare_spec(DEMO, [SCHEMES], seeds=3)
    # Replications beyond the first derive from it the way sweeps do, so more seeds keep the earlier ones.
    assert spec.seeds == [7, *derive_seeds(7, 2)]
    assert make_compare_spec(DEMO, [SCHEMES], seeds=[3, 5]).seeds == [3, 5]


# --- the table against single runs -------------------------------------------------------


@pytest.fixture(scope="module")
def one_seed():
    return compare(DEMO, [SCHEMES], fixed=SMALL, workers=1)


def test_table_shape_and_values_equal_single_runs(one_seed):
    t = one_seed
    metrics = t.attrs["metrics"]
    assert metrics == [m for m in SHOWN if m in metrics] and "throughput_gbps" in metrics
    assert t.shape == (2, 4 + 2 * len(metrics))
    assert list(t["setting"]) == ["full_line", "data_comparison"]
    assert list(t["workload"]) == ["demo", "demo"] and list(t["seeds"]) == [1, 1]
    for scheme, row in zip(("full_line", "data_comparison"), t.itertuples(index=False)):
        single = simulate(DEMO, overrides={**SMALL, "write.scheme": scheme}).summary
        for m in metrics:
            assert getattr(row, m) == single[m], m  # same config, same seed: the same numbers
            assert np.isnan(getattr(row, m + "_ci_half"))  # no interval from one seed


def test_data_comparison_programs_fewer_cells_than_full_line(one_seed):
    cells = one_seed.set_index("setting")["cells_programmed_per_write"]
    # A full-line write programs every cell of the 64-byte line (common practice).
    assert cells["full_line"] == 512
    # A data-comparison write programs only the bits that change (Yang et al., "A low power
    # phase-change random access memory using a data-comparison write scheme", ISCAS 2007);
    # with each bit flipped with probability 0.15 that is 0.15 * 512 = 76.8 cells on average
    # (binomial mean); about 450 writes give a standard error near 0.4 cells.
    assert cells["data_comparison"] < cells["full_line"]
    assert cells["data_comparison"] == pytest.approx(0.15 * 512, abs=3.0)


def test_means_and_intervals_over_seeds_and_workloads():
    t = compare(DEMO, {"write.scheme": ["full_line", "data_comparison"]}, seeds=3, fixed={"workload.requests": 800},
                workloads={"flip": {}, "random": {"workload.data": "random"}}, workers=1,
                metrics=["cells_programmed_per_write", "write_latency_p99_ns"])
    assert t.shape == (4, 4 + 2 * 2)
    assert list(zip(t["workload"], t["setting"])) == [("flip", "full_line"), ("flip", "data_comparison"),
                                                      ("random", "full_line"), ("random", "data_comparison")]
    row = t.iloc[3]
    seeds = [7, *derive_seeds(7, 2)]
    x = np.array([simulate(DEMO, overrides={"workload.requests": 800, "workload.data": "random",
                                            "write.scheme": "data_comparison", "run.seed": s}
                           ).summary["write_latency_p99_ns"] for s in seeds])
    assert row["write_latency_p99_ns"] == pytest.approx(x.mean(), rel=1e-12)
    # Student-t interval of the mean from the reference library (scipy.stats.t.interval).
    lo, hi = sstats.t.interval(0.95, len(x) - 1, loc=x.mean(), scale=sstats.sem(x))
    assert row["write_latency_p99_ns_ci_half"] == pytest.approx((hi - lo) / 2, rel=1e-9)
    # On random data a data-comparison write changes each bit with probability 2 p (1 - p) = 1/2
    # (binomial arithmetic, common practice): about 256 of 512 cells.
    assert row["cells_programmed_per_write"] == pytest.approx(256, abs=6)


def test_figure_draws_the_table(one_seed):
    fig = compare_figure(one_seed)
    metrics = table_metrics(one_seed)
    assert metrics == one_seed.attrs["metrics"]
    assert len(fig.axes) == len(metrics)
    for ax, m in zip(fig.axes, metrics):
        heights = [p.get_height() for p in ax.patches]
        assert heights == pytest.approx(list(one_seed[m]))  # one bar per setting, its mean
        assert ax.get_title() == axis_label(m)  # the unit comes from the name


def test_a_failing_run_stops_the_comparison_with_its_cause(monkeypatch):
    import memsim.experiment.run as run_mod
    from memsim.errors import TraceError, UserError

    def broken(config):
        raise TraceError("ledger.csv:17", "'x'", "a line index")

    monkeypatch.setattr(run_mod, "simulate", broken)
    with pytest.raises(UserError) as exc:  # a user mistake met while running stays one line
        compare(DEMO, [SCHEMES], fixed=SMALL, workers=1)
    assert exc.value.one_line().startswith("workload demo, setting full_line, seed 7: ledger.csv:17: found 'x'")

    def bug(config):
        return 1 / 0

    monkeypatch.setattr(run_mod, "simulate", bug)
    with pytest.raises(RuntimeError, match="ZeroDivisionError"):  # a bug keeps its traceback
        compare(DEMO, [SCHEMES], fixed=SMALL, workers=1)


# --- the command ---------------------------------------------------------------------------


def test_cli_prints_table_and_writes_csv_and_png(tmp_path, capsys, monkeypatch):
    out = tmp_path / "res"
    args = ["compare", DEMO, "--vary", SCHEMES, "--vary", "small banks: array.banks=2,array.row_lines=0",
            "--set", "workload.requests=1000", "--seeds", "2", "--workers", "1", "--out", out, "--quiet"]
    code, stdout, stderr = cli(capsys, monkeypatch, *args)
    assert code == 0, stderr
    assert "small banks: array.banks=2, array.row_lines=0" in stdout
    for label in ("throughput (GB/s)", "read latency p99 (ns)", "energy per bit (pJ)"):
        assert label in stdout
    assert "±" in stdout
    table = pd.read_csv(out / "compare.csv")
    assert list(table["setting"]) == ["full_line", "data_comparison", "small banks"]
    assert (table["seeds"] == 2).all() and table["throughput_gbps_ci_half"].notna().all()
    png = (out / "compare.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 10_000
    again = compare(DEMO, [SCHEMES, "small banks: array.banks=2,array.row_lines=0"], seeds=2,
                    fixed={"workload.requests": 1000}, workers=1)
    assert np.allclose(again[table_metrics(again)].to_numpy(float),
                       table[table_metrics(again)].to_numpy(float), equal_nan=True)
    # A second time every run comes from the cache in the results folder.
    code, stdout, _ = cli(capsys, monkeypatch, *args)
    assert code == 0 and "6 from cache" in stdout and " ran " not in stdout


@pytest.mark.parametrize("vary,needle", [
    ("write.schem=full_line", "unknown key"),
    ("full_line,data_comparison", "section.key=value"),
    ("write.scheme=full_line,data_comparison,array.banks=4", "one key with several values"),
    ("write.scheme=no_such_scheme", "one of full_line"),
])
def test_cli_bad_vary_is_one_line_exit_2(tmp_path, capsys, monkeypatch, vary, needle):
    code, stdout, stderr = cli(capsys, monkeypatch, "compare", DEMO, "--vary", vary, "--out", tmp_path / "r")
    assert code == 2 and stdout == ""
    assert stderr.count("\n") == 1 and stderr.startswith("error: --vary") and needle in stderr
    assert not (tmp_path / "r").exists()


def test_installed_command_bad_vary_exit_2(tmp_path):
    cmd = [sys.executable, "-m", "memsim.cli", "compare", str(DEMO), "--vary", "write.scheme"]
    p = subprocess.run(cmd, check=False, capture_output=True, text=True, cwd=tmp_path,
                       env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert p.returncode == 2 and p.stdout == ""
    assert len(p.stderr.strip().splitlines()) == 1 and "Traceback" not in p.stderr


def test_rows_without_a_lifetime_estimate_are_left_out():
    # A setting whose runs are too short for a lifetime gets no value (NaN in
    # the table, no bar in the figure), never a zero; the other keeps its value.
    t = compare(None, {"workload.requests": [400, 60000]}, workers=1,
                fixed={"array.lines": 64, "workload.read_fraction": 0.0},
                metrics=["lifetime_years", "throughput_gbps"])
    short, long_ = t["lifetime_years"].tolist()
    assert np.isnan(short) and long_ > 0
    fig = compare_figure(t, ["lifetime_years"])
    heights = [p.get_height() for p in fig.axes[0].patches]
    assert sum(np.isfinite(heights)) == 1 and not any(h == 0 for h in heights)
