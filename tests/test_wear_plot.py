"""The wear figure's end-of-life level, against hand-computed quantiles."""
from __future__ import annotations

import numpy as np
import pytest

from memsim.experiment.wear_life import wear_tables
from memsim.metrics.result import RunResult
from memsim.report.wear_plot import end_of_life_level, end_of_life_share, save_wear_figure, wear_figure

# 252 lines written once, 4 hot lines written 10 times: mean (252 + 40) / 256.
WEAR = np.array([1.0] * 252 + [10.0] * 4)
MEAN = (252 + 40) / 256


def test_share_is_of_the_device_for_spread_traffic_and_of_the_region_for_focused() -> None:
    s = {"lifetime_dead_lines": 3.0, "lifetime_years": 5.0, "device_lines": 1e8, "lifetime_traffic": "spread"}
    assert end_of_life_share(s, {"array": {"lines": 256}}) == pytest.approx(3e-8)
    s["lifetime_traffic"] = "focused"
    assert end_of_life_share(s, {"array": {"lines": 256}}) == pytest.approx(3 / 256)


@pytest.mark.parametrize("years", [float("inf"), float("nan")])
def test_no_level_when_life_does_not_end(years: float) -> None:
    s = {"lifetime_dead_lines": 1.0, "lifetime_years": years, "device_lines": 1e8}
    assert end_of_life_share(s, {}) is None
    assert end_of_life_share({}, {}) is None


def test_level_is_the_wear_of_the_hottest_lines() -> None:
    cdf = wear_tables(WEAR)["wear_cdf"]
    # Two of the four hot lines dead: the level is their wear, 10 writes.
    writes, rel = end_of_life_level(cdf, 2 / 256)
    assert writes == pytest.approx(10.0)
    assert rel == pytest.approx(10.0 / MEAN)
    # One dead line of a huge device: the hottest line.
    assert end_of_life_level(cdf, 1e-9)[0] == pytest.approx(10.0)


def _marks(fig) -> list[float]:
    return [ln.get_xdata()[0] for ax in fig.axes for ln in ax.lines if ln.get_color() == "tab:red"]


def test_both_panels_mark_the_level_and_only_when_asked() -> None:
    t = wear_tables(WEAR)
    fig = wear_figure(t["wear_histogram"], t["wear_cdf"], dead_share=2 / 256)
    assert _marks(fig) == pytest.approx([10.0, 10.0 / MEAN])
    assert "8.767 x mean" in fig.legends[0].get_texts()[0].get_text()
    assert _marks(wear_figure(t["wear_histogram"], t["wear_cdf"])) == []


def test_saved_figure_of_a_lifetime_result(tmp_path) -> None:
    s = {"lifetime_dead_lines": 2.0, "lifetime_years": 3.0, "lifetime_traffic": "focused",
         "wear_max_over_mean": 10 / MEAN, "wear_cov": 1.0}
    res = RunResult(s, wear_tables(WEAR), {"run": {"name": "w"}, "array": {"lines": 256}}, 1, "0", 0.0)
    out = save_wear_figure(res, tmp_path)
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
