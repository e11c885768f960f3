"""The timing engine against closed-form queueing results."""
import pytest
from scipy import stats

from memsim import simulate

ONE_BANK = {
    "array.channels": 1, "array.banks": 1, "array.lines": 4096, "array.row_lines": 0,
    "controller.read_queue": 100000, "controller.write_queue": 100000,
    "controller.drain_high": 99999, "controller.drain_low": 0,
    "workload.arrival": "poisson", "workload.requests": 200000, "run.seed": 3,
}


@pytest.fixture(params=["fast", "reference"])
def engine(request):
    """Both timing engines face the same closed forms."""
    return {"run.engine": request.param}


@pytest.mark.parametrize("rho", [0.5, 0.8])
def test_md1_mean_wait_pollaczek_khinchine(rho, engine):
    # Reads only, fixed service D = read + burst: an M/D/1 queue.
    # Pollaczek-Khinchine mean wait for M/D/1: Wq = rho D / (2 (1 - rho))
    # (Kleinrock, Queueing Systems Vol. 1, 1975).
    r = simulate(None, overrides={**ONE_BANK, "workload.read_fraction": 1.0, **engine})
    d = r.config["cell"]["read_ns"] + r.config["array"]["burst_ns"]
    r = simulate(None, overrides={**ONE_BANK, "workload.read_fraction": 1.0,
                                   "workload.interval_ns": d / rho, **engine})
    wq = rho * d / (2 * (1 - rho))
    measured = r.summary["read_latency_mean_ns"] - d
    assert measured == pytest.approx(wq, rel=0.05 if rho < 0.7 else 0.08)


@pytest.mark.parametrize("rho", [0.6, 0.8])
def test_mg1_two_service_times(rho, engine):
    # Writes only, full-line write on uniform data: with a budget of 256
    # RESET cells per round, a write needs one RESET round when at most 256 of
    # its 512 cells are RESET and two otherwise, plus one SET round.  Two
    # service times with binomial weights -> M/G/1.  Pollaczek-Khinchine:
    # Wq = lambda E[S^2] / (2 (1 - rho)) (Kleinrock 1975).
    base = {**ONE_BANK, "workload.read_fraction": 0.0, "write.scheme": "full_line",
            "array.bank_budget_ua": 256 * 300.0, "workload.requests": 150000}
    cell_reset, cell_set, burst = 40.0, 150.0, 5.0
    p_two = stats.binom.sf(256, 512, 0.5)           # P(n_reset > 256)
    s1, s2 = burst + cell_reset + cell_set, burst + 2 * cell_reset + cell_set
    es = (1 - p_two) * s1 + p_two * s2
    es2 = (1 - p_two) * s1**2 + p_two * s2**2
    lam = rho / es
    r = simulate(None, overrides={**base, "workload.interval_ns": 1 / lam, **engine})
    assert r.config["cell"]["reset_ns"] == cell_reset and r.config["cell"]["set_ns"] == cell_set
    wq = lam * es2 / (2 * (1 - rho))
    measured = r.summary["write_latency_mean_ns"] - es
    assert measured == pytest.approx(wq, rel=0.08)


def test_littles_law(engine):
    # L = lambda W (Little, Operations Research, 1961): time-average number in
    # system against throughput times mean latency, on a multi-bank mixed run.
    r = simulate(None, overrides={"workload.requests": 50000, "workload.interval_ns": 30.0,
                                   "controller.read_queue": 100000, "controller.write_queue": 4096,
                                   "controller.drain_high": 4000, "controller.drain_low": 100, **engine})
    s = r.summary
    lam = s["requests"] / s["simulated_ns"]
    w = (s["read_latency_mean_ns"] * s["reads"] + s["write_latency_mean_ns"] * s["writes"]) / s["requests"]
    assert s["mean_in_system"] == pytest.approx(lam * w, rel=0.01)
