"""The printed summary: sections, features that are off, number format."""
from __future__ import annotations

import pytest

from memsim.report.summary_text import fmt_value, grouped, summary_lines, unit_of

CFG_OFF = {"power": {"budget_ua": 0}, "controller": {"write_cancel": False, "write_pause": False,
                                                      "hint_preset": False},
           "write": {"scheme": "data_comparison"}, "refresh": {"policy": "none"},
           "cell": {"bits_per_cell": 1}, "workload": {"pattern": "uniform"}}

SUMMARY = {"requests": 10, "reads": 7, "writes": 3, "read_latency_p99_ns": 308.681,
           "energy_pj": 1.401e8, "energy_per_bit_pj": 2.737, "lifetime_years": None,
           "power_wait_ns": 0.0, "write_cancellations": 0, "erases": 0, "refresh_policy": "none",
           "brand_new_metric": 1.5}


@pytest.mark.parametrize("value, text", [
    (0.00146, "0.001460"), (308.681, "308.7"), (70.718, "70.72"), (3184.368, "3,184"),
    (2496362.0, "2.496e6"), (1.401e8, "1.401e8"), (3.544e-06, "3.544e-6"), (100000, "100,000"),
    (None, "-"), (float("nan"), "-"), (float("inf"), "inf"), (0.0, "0"), (True, "yes"), ("spread", "spread"),
])
def test_values_keep_four_significant_digits(value, text):
    assert fmt_value(value) == text


def test_units_come_from_the_key_suffix():
    assert unit_of("read_latency_p99_ns") == "ns"
    assert unit_of("cells_per_ns") == "1/ns"
    assert unit_of("energy_per_bit_pj") == "pJ"
    assert unit_of("throughput_gbps") == "GB/s"
    assert unit_of("lifetime_years") == "years"
    assert unit_of("wear_cov") == ""


def test_features_that_are_off_are_hidden_unless_full():
    titles = [t for t, _ in grouped(SUMMARY, CFG_OFF)]
    assert titles[:4] == ["requests and throughput", "latency", "energy", "wear and lifetime"]
    assert not {"power budget", "write cancellation and pausing", "block erase-ahead", "refresh"} & set(titles)
    # An unknown key is never hidden.
    assert titles[-1] == "other"
    full = grouped(SUMMARY, CFG_OFF, full=True)
    assert sorted(k for _, keys in full for k in keys) == sorted(SUMMARY)


def test_a_feature_that_is_on_gets_its_section():
    cfg = {**CFG_OFF, "power": {"budget_ua": 1000.0}, "write": {"scheme": "block_erase"}}
    titles = [t for t, _ in grouped(SUMMARY, cfg)]
    assert "power budget" in titles and "block erase-ahead" in titles


def test_lines_say_how_many_keys_are_hidden():
    lines = summary_lines(SUMMARY, CFG_OFF)
    assert lines[-1].startswith("  (4 keys of features that are off")
    assert any(line.split()[:3] == ["read_latency_p99_ns", "308.7", "ns"] for line in lines)
    # A null value prints "-" with no unit.
    assert any(line.split() == ["lifetime_years", "-"] for line in lines)
