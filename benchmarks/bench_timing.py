"""Timing-engine speed: fast (compiled) and reference (simpy) engines and a naive simpy model.

Fixed workload: 8 banks, 70% reads, 1 million requests, offered near
saturation.  The naive model (one simpy process per request, banks as plain
``simpy.Resource`` objects, FIFO) runs the same request stream (same arrival
times, banks and service times) in the same process.  Prints simulated
requests per second of each and the ratios (targets: fast >= 50x naive and
>= 15x reference).  The fast engine's time includes the bit-level write path
but not the one-time compilation (printed separately).  Prints; does not
assert.

    python benchmarks/bench_timing.py [--requests N]
"""
from __future__ import annotations

import argparse
import gc
import time

import numpy as np
import simpy

from memsim.config import load_config
from memsim.engine.dram_cache import DramCache
from memsim.engine.fast import FastEngine
from memsim.engine.timing import TimingEngine
from memsim.experiment.run import build_path
from memsim.tech.array import AddressMap
from memsim.tech.cell import CellTech
from memsim.workload.synthetic import SyntheticSource


def config(n: int):
    return load_config(None, {
        "array.channels": 1, "array.banks": 8, "array.lines": 65536,
        "workload.requests": n, "workload.read_fraction": 0.7,
        "workload.arrival": "poisson", "workload.interval_ns": 15.5,   # ~90% bank load
        "write.scheme": "data_comparison", "run.seed": 5,
    })


def naive(cfg, chunks) -> float:
    """One process per request, banks as Resources; returns wall seconds."""
    cell = CellTech.from_config(cfg.cell)
    amap = AddressMap(cfg.array.channels, cfg.array.banks)
    path = build_path(cfg, np.random.default_rng(cfg.run.seed))
    times, banks, service = [], [], []
    for c in chunks:   # same stream; service times from the same write path
        wr = c.op == 1
        wb = path.apply(c.line[wr])
        s = np.full(len(c), cell.read_ns + cfg.array.burst_ns)
        s[wr] = (cell.program_ns(wb.n_set, wb.n_reset, cfg.array.bank_budget_ua)
                 + cell.read_ns + cfg.array.burst_ns)
        times.append(c.time_ns)
        banks.append(amap.locate(c.line)[1])
        service.append(s)
    t, b, s = (np.concatenate(x).tolist() for x in (times, banks, service))
    gc.collect()
    t0 = time.perf_counter()
    env = simpy.Environment()
    res = [simpy.Resource(env, capacity=1) for _ in range(amap.total_banks)]
    done = []

    def request(i):
        with res[b[i]].request() as r:
            yield r
            yield env.timeout(s[i])
        done.append(env.now - t[i])

    def source():
        for i in range(len(t)):
            if t[i] > env.now:
                yield env.timeout(t[i] - env.now)
            env.process(request(i))

    env.process(source())
    env.run()
    assert len(done) == len(t)
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--requests", type=int, default=1_000_000)
    n = ap.parse_args().requests
    cfg = config(n)
    chunks = list(SyntheticSource(cfg.workload, cfg.footprint, np.random.default_rng(cfg.run.seed),
                                  cfg.run.chunk_requests))
    t0 = time.perf_counter()    # compile (or load the cached kernel) on a small stream
    small = config(2048)
    FastEngine(small, iter(list(SyntheticSource(small.workload, small.footprint, np.random.default_rng(1),
                                                small.run.chunk_requests))),
               build_path(small, np.random.default_rng(1))).run()
    warm = time.perf_counter() - t0
    secs, tots = {}, {}
    for name, cls in (("fast", FastEngine), ("reference", TimingEngine)):
        gc.collect()           # every model starts from a collected heap
        t0 = time.perf_counter()
        path = build_path(cfg, np.random.default_rng(cfg.run.seed))
        tots[name] = cls(cfg, iter(chunks), path).run()
        secs[name] = time.perf_counter() - t0
        del path
    # Per-request times are kept only with run.keep_requests; the streamed
    # latency histograms and the end time are compared instead.
    f_tot, r_tot = tots["fast"], tots["reference"]
    same = (f_tot.simulated_ns == r_tot.simulated_ns
            and np.array_equal(f_tot.stream.counts, r_tot.stream.counts))
    base = naive(cfg, chunks)
    tot, fast, ref = tots["fast"], secs["fast"], secs["reference"]
    print(f"requests                 {n}")
    print(f"bank utilization         {tot.bank_busy_ns.mean() / tot.simulated_ns:.2f}")
    print(f"fast engine              {n / fast:12,.0f} requests/s  ({fast:.2f} s, incl. bit-level write path)")
    print(f"reference engine         {n / ref:12,.0f} requests/s  ({ref:.2f} s, incl. bit-level write path)")
    print(f"naive simpy model        {n / base:12,.0f} requests/s  ({base:.2f} s, simulation only)")
    print(f"fast / naive             {base / fast:.1f}x  (target >= 50x)")
    print(f"fast / reference         {ref / fast:.1f}x  (target >= 15x)")
    print(f"reference / naive        {base / ref:.1f}x")
    print(f"same histograms, end     {same}")
    print(f"first fast run (compile or cache load, 2048 requests)  {warm:.2f} s")
    # The DRAM cache in front (a filter on the stream before the engine):
    # host requests per second through the cache alone, and with the fast
    # engine behind it.
    cached = cfg.model_copy(update={"cache": cfg.cache.model_copy(update={
        "enabled": True, "capacity_lines": 16384, "ways": 16})})
    DramCache.from_config(cached).filter(chunks[0].take(slice(0, 1024)))      # compile
    gc.collect()
    t0 = time.perf_counter()
    cache = DramCache.from_config(cached)
    pcm = list(cache.run(chunks))
    filt = time.perf_counter() - t0
    gc.collect()
    t0 = time.perf_counter()
    FastEngine(cached, iter(pcm), build_path(cached, np.random.default_rng(cached.run.seed))).run()
    behind = time.perf_counter() - t0 + filt
    print(f"dram cache filter        {n / filt:12,.0f} host requests/s  (hit rate "
          f"{(cache.read_hits + cache.write_hits) / n:.2f})")
    print(f"fast engine + dram cache {n / behind:12,.0f} host requests/s  ({behind:.2f} s)")
    # The same with row-hit-first scheduling (FR-FCFS over rows of 8 lines)
    # behind the cache: the engine's rate with the controller features on.
    ctl = cached.controller.model_copy(update={"scheduler": "fr_fcfs"})
    arr = cached.array.model_copy(update={"row_lines": cached.array.row_lines or 8})
    fr = cached.model_copy(update={"controller": ctl, "array": arr})
    gc.collect()
    t0 = time.perf_counter()
    cache = DramCache.from_config(fr)
    pcm = list(cache.run(chunks))
    FastEngine(fr, iter(pcm), build_path(fr, np.random.default_rng(fr.run.seed))).run()
    both = time.perf_counter() - t0
    print(f"  ... and fr_fcfs        {n / both:12,.0f} host requests/s  ({both:.2f} s; "
          f"{base / both:.1f}x the naive model, target >= 50x)")


if __name__ == "__main__":
    main()
