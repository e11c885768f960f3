"""Summary keys of the front end: the host's view of a run with a DRAM cache in front.

Without a cache the host sees the PCM directly, so the ``overall_*`` keys
equal the PCM-side keys.  With one, the PCM-side keys (``requests``,
``read_latency_*``, ``writes``, ...) describe the PCM's own traffic (line
fills and write-backs), and the ``overall_*`` keys what the requester sees:
hits at the cache's latency, misses at the PCM's.
"""
from __future__ import annotations

from typing import Any

import numpy as np

from memsim.config import RunConfig
from memsim.engine.dram_cache import HIT, PASSED, DramCache, merged_latency
from memsim.engine.stream import LatencyStream
from memsim.engine.timing import TimingTotals
from memsim.workload.chunk import READ, WRITE


def host_counts(tot: TimingTotals, cache: DramCache | None) -> tuple[int, int]:
    """(reads, writes) the host issued."""
    if cache is None:
        return tot.reads, tot.writes
    return cache.read_hits + cache.read_misses, cache.write_hits + cache.write_misses


def cache_energy_pj(cfg: RunConfig, cache: DramCache | None) -> float:
    """Energy of the DRAM cache's line accesses (hits, fills, victims read out), pJ."""
    if cache is None:
        return 0.0
    return cache.accesses() * cfg.array.line_bytes * 8 * cfg.cache.access_pj_per_bit


def front_fields(cfg: RunConfig, tot: TimingTotals, cache: DramCache | None) -> dict[str, Any]:
    """``overall_*`` keys always; ``cache_*`` keys when the cache is on."""
    reads, writes = host_counts(tot, cache)
    stream = tot.stream if cache is None else merged_latency(tot.stream, cache.hits)
    sim = tot.simulated_ns if cache is None else max(tot.simulated_ns, cache.last_hit_finish_ns)
    n = reads + writes
    s: dict[str, Any] = {
        "overall_requests": n,
        "overall_reads": reads,
        "overall_writes": writes,
        "overall_simulated_ns": sim,
        "overall_throughput_gbps": n * cfg.array.line_bytes / sim if sim > 0 else 0.0,
    }
    s.update(stream.stats(READ, "overall_read_latency"))
    s.update(stream.stats(WRITE, "overall_write_latency"))
    if cache is None:
        return s
    rh, wh = cache.read_hits, cache.write_hits
    s.update({
        "cache_read_hit_rate": rh / reads if reads else None,
        "cache_write_hit_rate": wh / writes if writes else None,
        "cache_hit_rate": (rh + wh) / n if n else None,
        "cache_fills": cache.read_misses,
        "cache_writebacks": cache.writebacks,
        # Share of the host's line writes the PCM did not have to take.
        "pcm_write_reduction": 1.0 - cache.writebacks / writes if writes else None,
    })
    return s


def stream_fields(cfg: RunConfig, tot: TimingTotals, tags: np.ndarray,
                  cache: DramCache | None = None) -> dict[str, Any]:
    """Per-stream keys of a mix: ``stream_<name>_{requests,reads,writes,throughput_gbps}`` and
    ``stream_<name>_{read,write}_latency_{mean,p50,p95,p99}_ns`` (same histogram as the totals),
    ``stream_<name>_mean_in_system`` (time-average requests of the stream in the system).

    With a DRAM cache these describe the host's requests of the stream, as
    the ``overall_*`` keys do for all of them (hits at the cache's latency,
    read misses when their line fill completes), and
    ``stream_<name>_cache_{hit_rate,read_hit_rate}`` are added; throughput
    is over ``overall_simulated_ns``.
    """
    if cache is None:
        op_all, arrival, finish, sim = tot.op, tot.arrival_ns, tot.finish_ns, tot.simulated_ns
        hit = None
    else:
        op_all, arrival, fate = cache.host_requests()
        hit = fate == HIT
        passed = fate == PASSED
        finish = arrival + cfg.cache.hit_ns
        fills = tot.op == READ
        if int(fills.sum()) != int(passed.sum()) or len(fate) != len(tags):
            raise RuntimeError("host requests and PCM line fills do not pair up")
        finish[passed] = tot.finish_ns[fills]
        sim = max(tot.simulated_ns, cache.last_hit_finish_ns)
    s: dict[str, Any] = {}
    for j, st in enumerate(cfg.streams):
        mine = tags == j
        op = op_all[mine]
        stream = LatencyStream()
        stream.add(op, arrival[mine], finish[mine])
        n = int(mine.sum())
        reads = int((op == READ).sum())
        p = f"stream_{st.name}_"
        s[p + "requests"] = n
        s[p + "reads"] = reads
        s[p + "writes"] = int((op == WRITE).sum())
        s[p + "throughput_gbps"] = n * cfg.array.line_bytes / sim if sim > 0 else 0.0
        s.update(stream.stats(READ, p + "read_latency"))
        s.update(stream.stats(WRITE, p + "write_latency"))
        s[p + "mean_in_system"] = stream.mean_in_system(sim)
        if hit is not None:
            h = hit[mine]
            s[p + "cache_hit_rate"] = float(h.mean()) if n else None
            s[p + "cache_read_hit_rate"] = float(h[op == READ].mean()) if reads else None
    return s
