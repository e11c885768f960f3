"""Energy beyond the cells: every part a count times a price, the parts sum to the total."""
import pytest

from memsim import simulate
from memsim.config import load_config
from memsim.metrics.energy import ENERGY_PARTS
from memsim.tech.cell import CellTech

ALL_ON = {"workload.requests": 6000, "array.lines": 8192, "array.row_lines": 8, "array.mapping": "row",
          "workload.pattern": "zipf", "leveling.scheme": "start_gap", "leveling.psi": 10,
          "energy.background_mw_per_bank": 12.5, "energy.peripheral_pj_per_access": 150.0,
          "energy.io_pj_per_bit": 2.0, "energy.row_hit_pj_per_bit": 0.3,
          "cache.enabled": True, "cache.capacity_lines": 512, "cache.ways": 4}


def _parts(s: dict) -> float:
    return sum(s[k] for k in ENERGY_PARTS if k in s)


@pytest.mark.parametrize("engine", ["fast", "reference"])
def test_parts_sum_to_the_total(engine):
    s = simulate(None, overrides={**ALL_ON, "run.engine": engine}).summary
    for k in ("energy_background_pj", "energy_peripheral_pj", "energy_io_pj", "energy_row_hit_pj",
              "energy_cache_pj", "energy_read_pj", "energy_set_pj"):
        assert s[k] > 0, k
    assert _parts(s) == pytest.approx(s["energy_pj"], rel=1e-12)
    assert s["energy_per_bit_pj"] == pytest.approx(s["energy_pj"] / (s["overall_requests"] * 64 * 8))


def test_each_part_is_its_count_times_its_price():
    s = simulate(None, overrides=ALL_ON).summary
    cfg = load_config(None, ALL_ON)
    bits = 64 * 8
    # mW x ns = pJ; every bank draws its background power for the whole run.
    assert s["energy_background_pj"] == pytest.approx(12.5 * 8 * s["overall_simulated_ns"])
    # Each user read and write crosses the bus once; moves stay in the bank.
    assert s["energy_io_pj"] == pytest.approx(2.0 * (s["reads"] + s["writes"]) * bits)
    assert s["energy_peripheral_pj"] == pytest.approx(
        150.0 * (s["reads"] + s["writes"] + s["leveling_move_writes"]))
    assert s["energy_row_hit_pj"] == pytest.approx(0.3 * s["row_hits"] * bits)
    assert s["row_hit_rate"] == pytest.approx(s["row_hits"] / s["reads"])
    # Array reads: every bit read (reads, pre-reads, move sources) but the hits'.
    moves = s["leveling_move_writes"]
    pre = s["writes"] if cfg.write.scheme == "data_comparison" else 0
    read_bits = (s["reads"] - s["row_hits"]) * bits + (moves + pre) * bits
    assert s["energy_read_pj"] == pytest.approx(read_bits * CellTech.from_config(cfg.cell).read_pj)
    assert s["energy_cache_pj"] == pytest.approx(
        4.0 * bits * (s["overall_requests"] + s["cache_fills"] + s["cache_writebacks"]))


def test_new_terms_at_their_defaults_change_nothing():
    base = {"workload.requests": 5000, "array.row_lines": 8}
    s = simulate(None, overrides=base).summary
    for k in ("energy_background_pj", "energy_peripheral_pj", "energy_io_pj", "energy_row_hit_pj",
              "energy_cache_pj"):
        assert s[k] == 0.0, k
    cells = ("energy_read_pj", "energy_set_pj", "energy_reset_pj", "energy_mlc_program_pj",
             "energy_cancelled_pj", "energy_preset_pj", "energy_refresh_pj")
    total = 0.0
    for k in cells:
        total += s[k]
    assert s["energy_pj"] == total           # bit for bit the cells' sum, in its old order
    assert s["row_hits"] > 0                 # counted, but priced as full array reads


def test_row_hit_energy_with_no_row_buffer_is_zero():
    s = simulate(None, overrides={"workload.requests": 3000, "energy.row_hit_pj_per_bit": 0.3}).summary
    assert s["row_hits"] == 0 and s["energy_row_hit_pj"] == 0.0 and s["row_hit_rate"] is None


def test_refreshes_are_peripheral_accesses_too():
    # 2-bit drifting cells with a short refresh age (as in test_engine_diff.py's DRIFTING).
    ov = {"cell.preset": "pcm_mlc2", "array.lines": 1024, "array.banks": 8,
          "array.capacity_gib": 1e4 * 1024 * 64 / 2**30, "workload.interval_ns": 500.0,
          "workload.requests": 4000, "refresh.policy": "drift", "energy.peripheral_pj_per_access": 1.0}
    s = simulate(None, overrides=ov).summary
    assert s["refreshes"] > 0
    assert s["energy_peripheral_pj"] == s["reads"] + s["writes"] + s["leveling_move_writes"] + s["refreshes"]
    assert _parts(s) == pytest.approx(s["energy_pj"], rel=1e-12)
