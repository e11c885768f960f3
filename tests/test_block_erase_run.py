"""Block erase-ahead in the timing engine."""
import pytest

from memsim import simulate

LIGHT = {"workload.requests": 20000, "array.lines": 8192, "workload.read_fraction": 0.9,
         "workload.interval_ns": 400.0, "workload.data": "flip", "workload.flip_fraction": 0.1}


def test_all_set_initialization_writes_only_reset_cells():
    # Lines initialized to all-SET need only RESET pulses for the 0 bits
    # (Qureshi et al., ISCA 2012, PreSET); no fallback -> no SET cell at all.
    s = simulate(None, overrides={**LIGHT, "write.scheme": "block_erase", "erase.init_state": "set"}).summary
    assert s["fallbacks_in_place"] == 0
    assert s["set_cells_per_write"] == 0 and s["reset_cells_per_write"] > 0
    r = simulate(None, overrides={**LIGHT, "write.scheme": "block_erase",
                                   "erase.init_state": "reset"}).summary
    assert r["reset_cells_per_write"] == 0 and r["set_cells_per_write"] > 0


def test_erase_energy_and_wear_in_totals():
    s = simulate(None, overrides={**LIGHT, "write.scheme": "block_erase"}).summary
    assert s["erases"] > 0 and s["energy_erase_pj"] > 0 and s["cleaner_moves"] > 0
    parts = (s["energy_read_pj"] + s["energy_set_pj"] + s["energy_reset_pj"] + s["energy_mlc_program_pj"]
             + s["energy_cancelled_pj"] + s["energy_refresh_pj"] + s["energy_erase_pj"])
    assert s["energy_pj"] == pytest.approx(parts)
    # Every user write lands once; moves add to it: WA = (user + moves) / user.
    assert s["write_amplification"] == pytest.approx(1 + s["cleaner_moves"] / s["writes"])
    assert s["erases_per_block_max"] >= 1


def test_block_erase_trades_energy_for_fast_foreground_writes():
    # With idle time, out-of-place writes need only the fast RESET pulse:
    # lower write latency than data-comparison write, paid for in erase energy.
    be = simulate(None, overrides={**LIGHT, "write.scheme": "block_erase"}).summary
    dc = simulate(None, overrides={**LIGHT, "write.scheme": "data_comparison"}).summary
    assert be["write_latency_mean_ns"] < dc["write_latency_mean_ns"]
    assert be["energy_per_bit_pj"] > dc["energy_per_bit_pj"]
    assert be["requests"] == dc["requests"]


def test_wait_fallback_and_foreground_cleaning_keep_every_write():
    s = simulate(None, overrides={**LIGHT, "write.scheme": "block_erase", "erase.fallback": "wait",
                                   "workload.read_fraction": 0.2, "workload.interval_ns": 60.0,
                                   "erase.idle_blocks": 0}).summary
    assert s["requests"] == 20000 and s["fallbacks_in_place"] == 0
    assert s["erases"] > 0


def test_block_erase_rejects_a_leveler():
    from memsim.errors import ConfigError
    with pytest.raises(ConfigError, match="leveling.scheme"):
        simulate(None, overrides={**LIGHT, "write.scheme": "block_erase", "leveling.scheme": "start_gap"})
