"""Results do not depend on run.chunk_requests (how the stream is cut for the engines).

The synthetic generator draws in blocks of its own, write content and
flip masks are drawn per write in stream order, and the program-and-verify
attempts of multi-level cells are keyed by the write's place in the stream
(:func:`memsim.seeds.keyed_uniforms`), so cutting the stream into chunks of
1,024 or 65,536 lines gives the same summary, key for key.

Known exceptions, tested with their bounds below: the write path applies a
chunk's writes when the engine takes the chunk, ahead of their service, and
two costs read the stored content then.  A refresh reprograms what the
write path holds when the refresh is costed, and a hint's pre-programming
(SET of the line's 0 cells) is costed from the content when its chunk is
taken, so a line written later in the same chunk is costed with its new
content.  With refresh or hint pre-programming on, results move slightly
with the chunk size.  Floats summed in a different order agree to 1e-12.
"""
from __future__ import annotations

import math

import pytest
from conftest import WORKLOADS

from memsim import simulate

EXACT = {
    "demo": {"workload.requests": 30000},                         # flip content, Zipf
    "catalog_reads": {"workload.requests": 30000},
    "erase_ahead": {"workload.requests": 20000},                   # block erase pool
    "demo_multi_line": {"workload.size_lines": 3, "workload.requests": 20000},
    "demo_mlc": {"cell.preset": "pcm_mlc2", "workload.requests": 8000},
    "demo_onoff": {"workload.arrival": "onoff", "workload.on_ns": 2e4, "workload.off_ns": 3e4,
                   "workload.requests": 20000},
    "demo_streams": {"streams": [{"name": "a", "pattern": "uniform", "requests": 9000, "interval_ns": 9.0},
                                 {"name": "b", "pattern": "zipf", "requests": 7000, "interval_ns": 14.0,
                                  "read_fraction": 0.2}]},
}


def _summary(example: str, chunk: int, over: dict) -> dict:
    base = example.split("_")[0] if example.startswith("demo") else example
    return simulate(WORKLOADS / f"{base}.toml", overrides={**over, "run.chunk_requests": chunk}).summary


def _same(a, b) -> bool:
    if isinstance(a, float) and isinstance(b, float):
        return (math.isnan(a) and math.isnan(b)) or math.isclose(a, b, rel_tol=1e-12, abs_tol=0.0)
    return a == b


@pytest.mark.parametrize("example", list(EXACT))
def test_summary_does_not_depend_on_the_chunk_size(example: str) -> None:
    a = _summary(example, 1024, EXACT[example])
    b = _summary(example, 65536, EXACT[example])
    differ = {k: (a[k], b.get(k)) for k in a if not _same(a[k], b.get(k))}
    assert not differ


@pytest.mark.parametrize(("example", "over", "rel"), [
    ("mlc_refresh", {"workload.requests": 20000}, 0.01),
    ("demo", {"controller.hint_preset": True, "workload.hint_lead_ns": 400.0, "workload.requests": 20000}, 0.03),
])
def test_costs_read_ahead_of_service_move_little_with_the_chunk_size(example: str, over: dict,
                                                                     rel: float) -> None:
    a = _summary(example, 1024, over)
    b = _summary(example, 65536, over)
    for key in ("write_latency_mean_ns", "read_latency_mean_ns", "energy_pj", "wear_cells_total"):
        assert a[key] == pytest.approx(b[key], rel=rel), key
    assert a["requests"] == b["requests"]
