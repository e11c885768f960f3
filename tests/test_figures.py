"""Figures and the report page of a sweep: what is drawn is the data, labels carry units."""
import xml.etree.ElementTree as ET

import numpy as np
import pandas as pd
import pytest
from conftest import DEMO, memsim_cli

from memsim.errors import UserError
from memsim.experiment.sweep import make_spec, run_sweep
from memsim.metrics.result import latency_histogram
from memsim.report.figures import (
    axis_label,
    bar_figure,
    cdf_figure,
    line_figure,
    load_results,
    split_unit,
    standard_figures,
)
from memsim.report.page import write_page
from memsim.workload.chunk import READ, WRITE

METRICS = ["throughput_gbps", "read_latency_p99_ns", "energy_per_bit_pj"]


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    out = tmp_path_factory.mktemp("fig") / "res"
    spec = make_spec(DEMO, {"write.scheme": ["full_line", "flip_n_write"]}, seeds=3,
                     zipped=[{"array.banks": [4, 8, 16], "controller.write_queue": [32, 48, 64]}],
                     fixed={"workload.requests": 1500}, metrics=METRICS, name="figs")
    run_sweep(spec, workers=1, out=out, progress=False)
    return out


@pytest.mark.parametrize("name,label", [
    ("read_latency_p99_ns", "read latency p99 (ns)"),
    ("energy_per_bit_pj", "energy per bit (pJ)"),
    ("throughput_gbps", "throughput (GB/s)"),
    ("lifetime_years", "lifetime (years)"),
    ("requests_per_s", "requests (1/s)"),
    ("bank_utilization", "bank utilization"),
    ("workload.interval_ns", "workload.interval_ns (ns)"),
])
def test_axis_labels_carry_units(name, label):
    # Unit suffixes are memsim's naming rule (DESIGN.md): ns, pJ, GB/s, years.
    assert axis_label(name) == label


def test_split_unit_prefers_longest_suffix():
    assert split_unit("requests_per_s") == ("requests", "1/s")
    assert split_unit("wall_s") == ("wall", "s")
    assert split_unit("mean_in_system") == ("mean_in_system", None)


def test_line_figure_draws_means_and_bands(results):
    res = load_results(results)
    assert res.axes == ["write.scheme", "array.banks"]  # write_queue moves with banks
    metric = "read_latency_p99_ns"
    fig = line_figure(res.stats, metric, "array.banks", ["write.scheme"], followers=["controller.write_queue"])
    ax = fig.axes[0]
    st = res.stats[res.stats["metric"] == metric]
    assert len(ax.lines) == 2 and len(ax.collections) == 2
    for line, scheme in zip(ax.lines, ["full_line", "flip_n_write"]):
        want = st[st["write.scheme"] == scheme].sort_values("array.banks")
        assert line.get_label() == f"scheme={scheme}"
        np.testing.assert_array_equal(line.get_xdata(), want["array.banks"].to_numpy(float))
        np.testing.assert_array_equal(line.get_ydata(), want["mean"].to_numpy(float))
    for band, scheme in zip(ax.collections, ["full_line", "flip_n_write"]):
        want = st[st["write.scheme"] == scheme]
        ys = band.get_paths()[0].vertices[:, 1]
        assert ys.min() == pytest.approx(want["ci_low"].min()) and ys.max() == pytest.approx(want["ci_high"].max())
    assert ax.get_xscale() == "log"  # 4, 8, 16 banks: doubling steps
    assert ax.get_ylabel() == "read latency p99 (ns)" and "write_queue" in ax.get_xlabel()


def test_bar_figure_heights_and_error_bars(results):
    res = load_results(results)
    metric = "energy_per_bit_pj"
    fig = bar_figure(res.stats, metric, "write.scheme", ["array.banks"])
    ax = fig.axes[0]
    st = res.stats[res.stats["metric"] == metric]
    heights = [p.get_height() for p in ax.patches]
    want = [st[(st["write.scheme"] == s) & (st["array.banks"] == b)]["mean"].iloc[0]
            for s in ["full_line", "flip_n_write"] for b in [4, 8, 16]]
    np.testing.assert_allclose(heights, want, rtol=1e-12)
    segs = np.concatenate([c.get_segments() for c in ax.collections])  # error bars
    halves = sorted(abs(s[1, 1] - s[0, 1]) / 2 for s in segs)
    np.testing.assert_allclose(halves, sorted(st["ci_half"]), rtol=1e-9)
    assert ax.get_ylabel() == "energy per bit (pJ)"


def test_cdf_from_histogram_is_the_empirical_cdf(rng):
    # The empirical CDF at x is the share of the sample at or below x (common practice);
    # at every bin's upper edge it must equal the share computed from the raw sample.
    lat = np.concatenate([rng.exponential(300.0, 4000), rng.lognormal(7.0, 0.5, 1000)])
    op = np.where(np.arange(lat.size) < 4000, READ, WRITE)
    tab = latency_histogram(lat, op).assign(**{"write.scheme": "full_line"})
    fig = cdf_figure(tab, "latency_histogram", ["write.scheme"], [])
    assert [a.get_title() for a in fig.axes] == ["reads CDF", "writes CDF"]
    for ax, code in zip(fig.axes, (READ, WRITE)):
        (line,) = ax.lines
        x, y = line.get_xdata()[1:], line.get_ydata()[1:]
        sample = lat[op == code]
        want = np.array([(sample < e).mean() for e in x])
        np.testing.assert_allclose(y, want, atol=1e-12)
        assert y[-1] == 1.0 and line.get_ydata()[0] == 0.0
        assert ax.get_xscale() == "log" and ax.get_xlabel() == "latency (ns)"


def test_cdf_pools_seeds():
    tab = pd.DataFrame({"seed": [1, 1, 2, 2], "k": ["a"] * 4, "lo_writes": [0.0, 10, 0, 10],
                        "hi_writes": [10.0, 20, 10, 20], "count": [1, 3, 3, 1]})
    fig = cdf_figure(tab, "wear_histogram", ["k"], [])
    (line,) = fig.axes[0].lines
    # pooled: 4 of 8 values below 10, all 8 below 20
    np.testing.assert_allclose(line.get_ydata(), [0.0, 0.125, 0.5, 0.875, 1.0])
    assert fig.axes[0].get_xlabel() == "wear (writes)"


def test_standard_figures_and_page(results):
    pngs = standard_figures(results)
    names = {p.name for p in pngs}
    for m in METRICS:
        assert f"{m}_vs_array-banks.png" in names and f"{m}_by_write-scheme.png" in names
    assert "latency_cdf.png" in names
    assert not any("write_queue" in n for n in names)
    for p in pngs:
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        svg = p.with_suffix(".svg")
        assert ET.parse(svg).getroot().tag.endswith("svg")
    page = write_page(results, pngs)
    text = page.read_text()
    runs = pd.read_parquet(results / "runs.parquet")
    st = pd.read_parquet(results / "point_stats.parquet")
    assert "| write.scheme | array.banks | controller.write_queue |" in text
    assert text.count("\n| full_line |") == 3 and text.count("\n| flip_n_write |") == 3
    # a table cell is the mean and half-width from point_stats
    row = st[(st["metric"] == "throughput_gbps") & (st["point"] == 0)].iloc[0]
    assert f"{row['mean']:.4g} ± {row['ci_half']:.4g}" in text
    for p in pngs:
        assert f"](figures/{p.name})" in text
    assert f"runs: {len(runs)} (6 points), failed: 0" in text


def test_plot_cli(results, tmp_path):
    memsim = memsim_cli
    code, out, err = memsim("plot", results, "--metric", "throughput_gbps")
    assert code == 0, err
    assert "throughput_gbps_by_write-scheme.png" in out and "report.md" in out
    code, _, err = memsim("plot", results, "--metric", "nope_ns")
    assert code == 2 and err.count("\n") == 1 and "nope_ns" in err
    code, _, err = memsim("plot", tmp_path)
    assert code == 2 and "memsim sweep" in err and err.count("\n") == 1


def test_load_results_rejects_other_folders(tmp_path):
    with pytest.raises(UserError, match="runs.parquet"):
        load_results(tmp_path)


def _stats(rows):
    """A point_stats-like table: (scheme, banks, data, mean, half) rows."""
    out = []
    for p, (scheme, banks, data, mean, half) in enumerate(rows):
        for metric in ["write_latency_p99_ns"]:
            out.append({"point": p, "metric": metric, "write.scheme": scheme, "array.banks": float(banks),
                        "workload.data": data, "mean": mean, "ci_half": half, "ci_low": mean - half,
                        "ci_high": mean + half})
    return pd.DataFrame(out)


def test_error_bars_stay_in_the_metric_range_and_say_so():
    # A latency is never negative; a t interval over few seeds can reach below zero.
    st = _stats([("a", 4, "flip", 50.0, 80.0), ("b", 4, "flip", 60.0, 5.0)])
    fig = bar_figure(st, "write_latency_p99_ns", "write.scheme", ["array.banks"])
    segs = np.concatenate([c.get_segments() for c in fig.axes[0].collections])
    assert min(s[:, 1].min() for s in segs) >= 0.0
    assert "cut at the axis floor" in fig._suptitle.get_text()
    # Whole-number settings print as integers, not 4.0.
    labels = [t.get_text() for t in fig.axes[0].get_xticklabels()]
    assert labels == ["banks=4"]


def test_many_groups_become_small_multiples_with_the_legend_outside():
    rows = [(s, b, d, 100.0 + b, 3.0) for d in ["flip", "random"] for b in [4, 8, 16] for s in ["a", "b"]]
    fig = bar_figure(_stats(rows), "write_latency_p99_ns", "write.scheme", ["workload.data", "array.banks"])
    panels = [ax for ax in fig.axes if ax.get_visible()]
    assert [ax.get_title() for ax in panels] == ["data=flip", "data=random"]
    legend = panels[-1].get_legend()
    fig.canvas.draw()
    # The legend box lies right of the last panel's data area.
    assert legend.get_window_extent().x0 >= panels[-1].get_window_extent().x1


def test_values_over_decades_get_a_log_axis():
    rows = [("a", 4, "flip", 1e2, 5.0), ("b", 4, "flip", 1e6, 5e4)]
    fig = bar_figure(_stats(rows), "write_latency_p99_ns", "write.scheme", ["array.banks"])
    assert fig.axes[0].get_yscale() == "log"
