"""Write cancellation, write pausing and the programming-current budget."""
import pytest

from memsim import simulate

# A busy mixed workload on few banks (bank utilization ~0.7): slow writes
# block reads.  (Near overload, cancellation backfires: repeated work pushes
# the banks past saturation; see the README.)
SATURATED = {"array.banks": 2, "array.lines": 4096, "workload.requests": 20000,
             "workload.read_fraction": 0.5, "workload.interval_ns": 140.0,
             "write.scheme": "full_line", "run.seed": 4}


def test_cancellation_lowers_read_tail():
    # Qureshi, Franceschini and Lastras-Montano, HPCA 2010: cancelling
    # in-flight writes for arriving reads cuts read latency; the aborted work
    # is repeated, so energy and wear go up.
    base = simulate(None, overrides=SATURATED).summary
    canc = simulate(None, overrides={**SATURATED, "controller.write_cancel": True}).summary
    assert canc["write_cancellations"] > 0
    assert canc["read_latency_p99_ns"] < base["read_latency_p99_ns"]
    assert canc["read_latency_mean_ns"] < base["read_latency_mean_ns"]
    assert canc["energy_cancelled_pj"] > 0 and canc["cancelled_cells"] > 0
    parts = (canc["energy_read_pj"] + canc["energy_set_pj"] + canc["energy_reset_pj"]
             + canc["energy_mlc_program_pj"] + canc["energy_cancelled_pj"] + canc["energy_refresh_pj"])
    assert canc["energy_pj"] == pytest.approx(parts)
    assert canc["requests"] == base["requests"]


def test_pausing_lowers_read_latency_without_waste():
    base = simulate(None, overrides=SATURATED).summary
    paus = simulate(None, overrides={**SATURATED, "controller.write_pause": True}).summary
    assert paus["write_pauses"] > 0
    assert paus["read_latency_mean_ns"] < base["read_latency_mean_ns"]
    assert paus["energy_cancelled_pj"] == 0
    # Same writes, same bits: pausing changes timing only.
    assert paus["cells_programmed_per_write"] == pytest.approx(base["cells_programmed_per_write"])


@pytest.mark.parametrize("budget_cells", [64, 256])
def test_power_budget_bounds_programming_rate(budget_cells):
    # With a shared budget B, at most B / I cells are driven at once, each for
    # its pulse time, so cells per ns <= max(B / I_reset / t_reset,
    # B / I_set / t_set) (arithmetic of the current-limited write model,
    # common practice; cf. Hay et al., MICRO 2011).
    reset_ua, set_ua, reset_ns, set_ns = 300.0, 150.0, 40.0, 150.0
    budget = budget_cells * reset_ua
    ov = {"array.banks": 8, "array.lines": 4096, "workload.requests": 8000,
          "workload.read_fraction": 0.0, "workload.arrival": "closed", "workload.outstanding": 64,
          "write.scheme": "full_line", "power.budget_ua": budget}
    s = simulate(None, overrides=ov).summary
    bound = max(budget / reset_ua / reset_ns, budget / set_ua / set_ns)
    assert s["cells_per_ns"] <= bound
    assert s["power_wait_ns"] > 0
    free = simulate(None, overrides={**ov, "power.budget_ua": 0.0}).summary
    assert free["throughput_gbps"] > s["throughput_gbps"]


def test_channel_scope_budget_is_per_channel():
    ov = {"array.channels": 2, "array.banks": 4, "array.lines": 4096, "workload.requests": 6000,
          "workload.read_fraction": 0.0, "workload.arrival": "closed", "workload.outstanding": 64,
          "write.scheme": "full_line", "power.budget_ua": 128 * 300.0}
    dev = simulate(None, overrides={**ov, "power.scope": "device"}).summary
    chan = simulate(None, overrides={**ov, "power.scope": "channel"}).summary
    assert chan["throughput_gbps"] > dev["throughput_gbps"]


def test_cancellation_with_a_power_budget_runs():
    # A read that arrived while the write waited for current cancels it at
    # once (no negative delay).
    s = simulate(None, overrides={"workload.requests": 8000, "workload.interval_ns": 30.0,
                                   "controller.write_cancel": True, "power.budget_ua": 400.0}).summary
    assert s["requests"] == 8000 and s["power_wait_ns"] > 0
