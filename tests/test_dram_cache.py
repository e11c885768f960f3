"""The DRAM cache in front of the PCM: hit rates against published models, write-back
semantics, both engines, synthetic and trace workloads, and nothing changes when it is off."""
from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

import memsim
from memsim import simulate
from memsim.config import load_config
from memsim.engine.dram_cache import DramCache
from memsim.errors import ConfigError
from memsim.workload.chunk import READ, WRITE, Chunk


def _same_summary(a: dict, b: dict) -> None:
    assert a.keys() == b.keys()
    for k in a:
        assert a[k] == b[k] or (a[k] != a[k] and b[k] != b[k]), k      # NaN equals NaN here


def _stream(lines: np.ndarray, rng: np.random.Generator, read_fraction: float = 0.7) -> Chunk:
    n = lines.size
    op = np.where(rng.random(n) < read_fraction, READ, WRITE).astype(np.int8)
    return Chunk(np.arange(n, dtype=float), op, lines)


def _hit_rate(cache: DramCache, chunk: Chunk, step: int = 50_000) -> float:
    for s in range(0, len(chunk), step):
        cache.filter(chunk.take(slice(s, s + step)))
    hits = cache.read_hits + cache.write_hits
    return hits / len(chunk)


@pytest.mark.parametrize("replacement", ["lru", "fifo"])
@pytest.mark.parametrize("ways", [1, 16, 1024])
def test_uniform_references_hit_c_over_f(replacement, ways):
    # Independent uniform references over F lines: a cache of C lines holds C
    # of them, each next reference hits with probability C / F whatever the
    # demand replacement policy (common practice; the independent reference
    # model, e.g. Coffman and Denning, "Operating Systems Theory", 1973).
    # Set-associative: F / sets lines share each set of `ways`, same ratio.
    f, c, n = 4096, 1024, 300_000
    rng = np.random.default_rng(11)
    rate = _hit_rate(DramCache(c, ways, replacement, 50.0, 64), _stream(rng.integers(0, f, n), rng))
    # Cold start costs at most C hits; sampling error sd = sqrt(p (1 - p) / n).
    sd = np.sqrt(0.25 * 0.75 / n)
    assert abs(rate - c / f) < 4 * sd + c / n


def _zipf(f: int, s: float) -> np.ndarray:
    w = np.arange(1, f + 1, dtype=float) ** -s
    return w / w.sum()


def che_lru(p: np.ndarray, c: int) -> float:
    """LRU hit rate by Che's approximation (Che, Tung and Wang, IEEE JSAC 2002).

    The characteristic time T solves sum_i (1 - exp(-p_i T)) = C; line i hits
    with probability 1 - exp(-p_i T).
    """
    t = brentq(lambda t: np.sum(-np.expm1(-p * t)) - c, 1e-9, 1e15)
    return float(np.sum(p * -np.expm1(-p * t)))


def fifo_approx(p: np.ndarray, c: int) -> float:
    """FIFO hit rate, the characteristic-time approximation of Martina, Garetto and
    Leonardi, "A unified approach to the performance analysis of caching systems",
    IEEE INFOCOM 2014: line i hits with probability p_i T / (1 + p_i T), sum of
    those = C.  (The same fixed point as Dan and Towsley, SIGMETRICS 1990.)"""
    t = brentq(lambda t: np.sum(p * t / (1 + p * t)) - c, 1e-9, 1e15)
    return float(np.sum(p * (p * t / (1 + p * t))))


@pytest.mark.parametrize("replacement, model", [("lru", che_lru), ("fifo", fifo_approx)])
@pytest.mark.parametrize("s", [0.7, 1.0])
def test_zipf_hit_rate_within_3_percent_of_the_approximation(replacement, model, s):
    # The workload's own Zipf pattern through simulate(), fully associative
    # (ways = capacity) as the approximations assume.
    f, c, n = 8192, 512, 120_000
    out = simulate(None, overrides={
        "array.lines": f, "workload.pattern": "zipf", "workload.zipf_exponent": s,
        "workload.requests": n, "workload.interval_ns": 200.0, "cache.enabled": True,
        "cache.capacity_lines": c, "cache.ways": c, "cache.replacement": replacement}).summary
    want = model(_zipf(f, s), c)
    assert out["cache_hit_rate"] == pytest.approx(want, rel=0.03)
    # Reads and writes see the same cache.
    assert out["cache_read_hit_rate"] == pytest.approx(want, rel=0.03)


def test_set_associative_lru_follows_che_per_set():
    # Che's approximation applied to each set with the lines that map to it.
    f, sets, ways, n, s = 8192, 64, 8, 200_000, 0.9
    rng = np.random.default_rng(5)
    p = _zipf(f, s)
    line_of_rank = rng.permutation(f)
    ranks = np.minimum(np.searchsorted(np.cumsum(p), rng.random(n), side="right"), f - 1)
    rate = _hit_rate(DramCache(sets * ways, ways, "lru", 50.0, 64), _stream(line_of_rank[ranks], rng))
    want = 0.0
    for k in range(sets):
        mine = p[line_of_rank % sets == k]
        want += mine.sum() * che_lru(mine / mine.sum(), ways)
    assert rate == pytest.approx(want, rel=0.03)


def test_write_back_semantics():
    # Direct-mapped, 2 sets: lines 0, 2, 4 share set 0.
    cache = DramCache(2, 1, "lru", 7.0, 8)
    data = np.zeros((6, 8), np.uint8)
    data[0], data[2] = 1, 3
    ch = Chunk(np.arange(6, dtype=float),
               np.array([WRITE, READ, WRITE, READ, READ, READ], np.int8),
               np.array([0, 1, 0, 2, 0, 1], np.int64), data)
    out = cache.filter(ch)
    # write 0: miss, allocated without a fill; read 1: fill; write 0: hit;
    # read 2: fill, evicts dirty 0 -> write-back with the last content (3);
    # read 0: fill, evicts clean 2 (nothing written); read 1: hit.
    assert out.op.tolist() == [READ, READ, WRITE, READ]
    assert out.line.tolist() == [1, 2, 0, 0]
    assert out.time_ns.tolist() == [1.0, 3.0, 3.0, 4.0]
    assert np.all(out.data[2] == 3)
    assert (cache.read_hits, cache.read_misses, cache.write_hits, cache.write_misses, cache.writebacks) == \
        (1, 3, 1, 1, 1)
    # Hits and writes complete at arrival + hit_ns.
    assert cache.hits.count(READ) == 1 and cache.hits.count(WRITE) == 2
    assert cache.hits.fs[WRITE, 0] == pytest.approx(14.0)


def test_fifo_hits_do_not_refresh_a_line():
    # 1 set of 2 ways: A, B, A (hit), C evicts A under FIFO, B under LRU.
    for rep, evicted in (("fifo", 0), ("lru", 1)):
        cache = DramCache(2, 2, rep, 1.0, 8)
        cache.filter(Chunk(np.arange(4.0), np.full(4, READ, np.int8), np.array([0, 1, 0, 2])))
        assert evicted not in cache.tags.ravel().tolist()


def test_pcm_stream_does_not_depend_on_host_chunks():
    rng = np.random.default_rng(2)
    ch = _stream(rng.integers(0, 3000, 20_000), rng, 0.5)
    ch.data = rng.integers(0, 256, (len(ch), 16), dtype=np.uint8)
    outs = []
    for step in (20_000, 777):
        cache = DramCache(256, 4, "lru", 5.0, 16)
        outs.append(Chunk.concat([cache.filter(ch.take(slice(s, s + step)))
                                  for s in range(0, len(ch), step)]))
    a, b = outs
    for part in ("time_ns", "op", "line", "data"):
        assert np.array_equal(getattr(a, part), getattr(b, part))


CACHED = {"workload.requests": 8000, "cache.enabled": True, "cache.capacity_lines": 1024,
          "cache.ways": 8, "array.lines": 8192, "workload.pattern": "zipf"}


def test_summary_keys_add_up_and_engines_agree():
    fast = simulate(None, overrides={**CACHED, "run.engine": "fast"}).summary
    ref = simulate(None, overrides={**CACHED, "run.engine": "reference"}).summary
    assert fast.pop("engine") == "fast" and ref.pop("engine") == "reference"
    _same_summary(fast, ref)
    s = fast
    assert s["overall_requests"] == 8000
    # The PCM reads are exactly the read misses (line fills), its writes the write-backs.
    assert s["reads"] == s["cache_fills"] == round(s["overall_reads"] * (1 - s["cache_read_hit_rate"]))
    assert s["writes"] == s["cache_writebacks"]
    assert s["pcm_write_reduction"] == pytest.approx(1 - s["writes"] / s["overall_writes"])
    assert s["overall_write_latency_mean_ns"] == pytest.approx(50.0)
    # Host reads: hits at hit_ns, misses at the PCM read latency.
    h = s["cache_read_hit_rate"]
    assert s["overall_read_latency_mean_ns"] == pytest.approx(
        h * 50.0 + (1 - h) * s["read_latency_mean_ns"])
    assert s["energy_cache_pj"] > 0
    assert s["energy_per_bit_pj"] == pytest.approx(s["energy_pj"] / (8000 * 64 * 8))


def test_trace_replay_with_cache_matches_the_generator(tmp_path):
    out = tmp_path / "t.csv"
    base = {**CACHED, "workload.data": "random"}
    memsim.make_trace(None, out, with_data=True, overrides=base)
    gen = simulate(None, overrides=base).summary
    rep = simulate(None, overrides={**base, "workload.pattern": "trace", "workload.trace": str(out)}).summary
    for k in ("cache_hit_rate", "cache_writebacks", "read_latency_mean_ns", "overall_read_latency_mean_ns",
              "energy_pj", "cells_programmed_per_write"):
        assert rep[k] == gen[k], k


def test_cache_off_changes_nothing():
    base = {"workload.requests": 5000}
    off = simulate(None, overrides=base).summary
    other = simulate(None, overrides={**base, "cache.capacity_lines": 64, "cache.ways": 4,
                                      "cache.replacement": "fifo", "cache.hit_ns": 9.0}).summary
    _same_summary(off, other)
    assert off["energy_cache_pj"] == 0.0
    assert not any(k.startswith("cache_") for k in off)
    for k in ("read_latency_mean_ns", "read_latency_p99_ns", "write_latency_p50_ns"):
        assert off["overall_" + k] == off[k]


def test_lifetime_write_stream_is_filtered():
    from memsim.experiment.build import write_stream
    cfg = load_config(None, {**CACHED, "workload.read_fraction": 0.0})
    writes = np.concatenate(list(write_stream(cfg, endless=False)))
    plain = np.concatenate(list(write_stream(load_config(None, {**CACHED, "cache.enabled": False,
                                                                "workload.read_fraction": 0.0}),
                                             endless=False)))
    assert plain.size == 8000 and 0 < writes.size < plain.size


@pytest.mark.parametrize("ov, key", [
    ({"cache.enabled": True, "cache.capacity_lines": 100, "cache.ways": 8}, "cache.ways"),
    ({"cache.enabled": True, "workload.arrival": "closed"}, "cache.enabled"),
    ({"cache.enabled": True, "controller.hint_preset": True}, "cache.enabled"),
    ({"cache.replacement": "random"}, "cache.replacement"),
])
def test_bad_cache_settings(ov, key):
    with pytest.raises(ConfigError, match=key.replace(".", r"\.")):
        load_config(None, ov)
