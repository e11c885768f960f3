"""Streamed latency statistics against numpy on the exact sample."""
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from memsim import simulate
from memsim.engine.stream import GRID, REL_ERROR, LatencyStream

Q = np.array([0, 1, 5, 25, 50, 75, 90, 95, 99, 99.9, 100])


def _stream(lat, op=None, arrival=None):
    arrival = np.zeros(lat.size) if arrival is None else arrival
    op = np.zeros(lat.size, np.int64) if op is None else op
    s = LatencyStream()
    s.add(op, arrival, arrival + lat)
    return s


def test_stated_bound_is_at_most_a_tenth_of_a_percent():
    assert REL_ERROR <= 1e-3


@pytest.mark.parametrize("seed", range(4))
@pytest.mark.parametrize("dist", ["lognormal", "exponential", "ties", "wide"])
def test_percentiles_within_bound_of_numpy(seed, dist):
    rng = np.random.default_rng(seed)
    n = 50_000
    lat = {"lognormal": lambda: rng.lognormal(5, 1.5, n),
           "exponential": lambda: 40 + rng.exponential(300, n),
           "ties": lambda: rng.choice([55.0, 60.0, 215.0, 260.0], n),
           "wide": lambda: 10 ** rng.uniform(-2, 11, n)}[dist]()
    s = _stream(lat)
    want = np.percentile(lat, Q)        # numpy's default linear rule, the reference
    got = s.percentiles(0, Q)
    np.testing.assert_array_less(np.abs(got - want), REL_ERROR * want * (1 + 1e-12))
    assert s.stats(0, "x")["x_mean_ns"] == pytest.approx(lat.mean(), rel=1e-12)


@settings(max_examples=50, deadline=None)
@given(st.lists(st.floats(1e-2, 1e9), min_size=1, max_size=200))
def test_percentiles_small_samples(values):
    lat = np.array(values)
    got = _stream(lat).percentiles(0, Q)
    want = np.percentile(lat, Q)
    assert np.all(np.abs(got - want) <= REL_ERROR * want * (1 + 1e-12))


def test_empty_op_gives_nan():
    s = _stream(np.array([10.0, 20.0]))
    assert np.isnan(s.stats(1, "w")["w_p99_ns"]) and np.isnan(s.stats(1, "w")["w_mean_ns"])


@pytest.mark.parametrize("horizon", [500.0, 3e5, 7e9])
def test_occupancy_grid_counts_exactly(horizon):
    # The coarsened difference grid must give, at every grid point, exactly
    # the number of intervals [arrival, finish) that contain it.
    rng = np.random.default_rng(3)
    n = 3000
    a = np.sort(rng.uniform(0, horizon * 0.9, n))
    f = a + rng.exponential(horizon / 50, n)
    s = LatencyStream()
    order = rng.permutation(n)        # completion order does not matter
    s.add(np.zeros(n, np.int64), a[order], f[order])
    step = s.gstep[0]
    h = f.max()
    k = np.arange(min(int(np.ceil(h / step)), GRID))
    assert GRID // 2 <= k.size <= GRID
    t = k * step
    brute = ((a[None, :] <= t[:, None]) & (t[:, None] < f[None, :])).sum(axis=1)
    np.testing.assert_array_equal(np.cumsum(s.grid[:k.size]), brute)
    assert s.mean_in_system(h) == pytest.approx(brute.mean())


def test_table_counts_every_request():
    rng = np.random.default_rng(1)
    lat = rng.lognormal(5, 1, 1000)
    op = rng.integers(0, 2, 1000)
    tab = _stream(lat, op).table()
    assert tab["count"].sum() == 1000
    assert tab.loc[tab.op == "write", "count"].sum() == (op == 1).sum()
    assert (tab.hi_ns > tab.lo_ns).all()


def test_run_percentiles_match_exact_sample():
    # A whole run: summary percentiles (streamed) against numpy.percentile on
    # the kept per-request latencies.
    from memsim.config import load_config
    from memsim.engine.fast import FastEngine
    from memsim.experiment.build import build_path, build_source
    cfg = load_config(None, {"workload.requests": 30000, "run.keep_requests": True})
    # The parts as simulate builds them: each draws from its own named stream of run.seed.
    tot = FastEngine(cfg, build_source(cfg), build_path(cfg)).run()
    assert tot.latency_ns.size == 30000
    s = simulate(None, overrides={"workload.requests": 30000}).summary
    for code, name in ((0, "read"), (1, "write")):
        exact = np.percentile(tot.latency_ns[tot.op == code], [50, 95, 99])
        got = [s[f"{name}_latency_p{p}_ns"] for p in (50, 95, 99)]
        np.testing.assert_array_less(np.abs(np.array(got) - exact), REL_ERROR * exact * (1 + 1e-12))
        assert s[f"{name}_latency_mean_ns"] == pytest.approx(tot.latency_ns[tot.op == code].mean(), rel=1e-12)


def test_no_per_request_arrays_unless_asked():
    from memsim.config import load_config
    from memsim.engine.fast import FastEngine
    from memsim.experiment.build import build_path, build_source
    cfg = load_config(None, {"workload.requests": 5000})
    rng = np.random.default_rng(cfg.run.seed)
    tot = FastEngine(cfg, build_source(cfg, rng), build_path(cfg, rng)).run()
    assert tot.latency_ns.size == 0 and tot.finish_ns.size == 0
    assert tot.stream.count(0) + tot.stream.count(1) == 5000
