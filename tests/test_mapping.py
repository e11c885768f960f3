"""Address mapping: line- and row-interleaved orders beside the XOR bank hash."""
import numpy as np
import pytest

from memsim import simulate
from memsim.config import load_config
from memsim.engine.fast import FastEngine
from memsim.engine.timing import TimingEngine
from memsim.errors import ConfigError
from memsim.experiment.build import build_path
from memsim.tech.array import AddressMap
from memsim.workload.chunk import READ, Chunk


@pytest.mark.parametrize("mapping", ["line", "row"])
@pytest.mark.parametrize("channels, banks, row_lines, bank_hash", [
    (1, 8, 8, False), (2, 4, 4, True), (1, 6, 4, True), (3, 5, 2, False), (2, 8, 16, True)])
def test_every_map_is_a_bijection(mapping, channels, banks, row_lines, bank_hash):
    amap = AddressMap(channels, banks, row_lines, bank_hash, mapping)
    n = channels * banks * row_lines * 16
    ch, bank, row, col = amap.address(np.arange(n))
    assert np.array_equal(bank // banks, ch)              # a bank belongs to its channel
    key = (bank * (n + 1) + row) * (n + 1) + col
    assert np.unique(key).size == n                        # no two lines share an address
    assert col.max() < row_lines
    # Every bank gets the same share of lines (the map spreads evenly).
    assert np.all(np.bincount(bank, minlength=amap.total_banks) == n // amap.total_banks)


def test_which_lines_share_a_row_and_a_bank():
    r = 8
    line = AddressMap(1, 8, r, False, "line")
    row = AddressMap(1, 8, r, False, "row")
    i = np.arange(1024)
    _, lb, lr = line.locate(i)
    _, rb, rr = row.locate(i)
    # Line order: neighbours go to different banks; a bank's row holds lines
    # banks apart (positions 8 k .. 8 k + 7 inside the bank).
    assert np.all(lb[1:] != lb[:-1])
    assert np.all((lb == lb[0]) & (lr == lr[0]) == np.isin(i, np.arange(0, 8 * r, 8)))
    # Row order: a block of row_lines consecutive lines shares bank and row;
    # the next block is in the next bank.
    blocks = i // r
    for k in range(4):
        inside = blocks == k
        assert np.unique(rb[inside]).size == 1 and np.unique(rr[inside]).size == 1
    assert np.all(rb[r::r] != rb[:-r:r])


def test_row_mapping_needs_a_row_buffer():
    with pytest.raises(ConfigError, match="array.mapping"):
        load_config(None, {"array.mapping": "row", "array.row_lines": 0})


def test_line_mapping_is_todays_map():
    # The default order is the map the regression pins were made with.
    a = AddressMap(2, 4, 8, True)
    assert a.mapping == "line"
    i = np.arange(512)
    ch, bank, row = a.locate(i)
    in_bank = i // 2 // 4
    assert np.array_equal(ch, i % 2)
    assert np.array_equal(bank, ch * 4 + ((i // 2) % 4 ^ (in_bank & 3)))
    assert np.array_equal(row, in_bank // 8)


BANKS, ROW = 8, 8
MIX = {"array.channels": 1, "array.banks": BANKS, "array.row_lines": ROW, "array.lines": 1 << 14,
       "array.burst_ns": 5.0, "workload.read_fraction": 1.0, "run.keep_requests": True}


def _seq_with_noise(n: int, rng: np.random.Generator, lines: int) -> Chunk:
    """A sequential read stream, every other request a uniform random read, 1 us apart."""
    line = np.empty(2 * n, np.int64)
    line[0::2] = np.arange(n)
    line[1::2] = rng.integers(n, lines, n)
    return Chunk(np.arange(2 * n) * 1000.0, np.full(2 * n, READ, np.int8), line)


def _row_hit_share(cls, mapping: str) -> float:
    """Share of the sequential stream's reads served from the open row.

    At 1 us between arrivals nothing queues, so a read takes exactly
    ``row_hit_ns + burst`` on a row hit and ``read_ns + burst`` otherwise.
    """
    cfg = load_config(None, {**MIX, "array.mapping": mapping})
    rng = np.random.default_rng(7)
    path = build_path(cfg, rng)
    n = 4000
    eng = cls(cfg, [_seq_with_noise(n, np.random.default_rng(3), cfg.array.lines)], path)
    tot = eng.run()
    lat = tot.latency_ns[0::2]
    hit = np.isclose(lat, cfg.array.row_hit_ns + cfg.array.burst_ns)
    miss = np.isclose(lat, eng.cell.read_ns + cfg.array.burst_ns)
    assert np.all(hit | miss)
    # The row hits counted from the stream (engine/rows.py) are the ones served.
    assert tot.row_hits == int(np.count_nonzero(np.isclose(
        tot.latency_ns, cfg.array.row_hit_ns + cfg.array.burst_ns)))
    return float(hit.mean())


@pytest.mark.parametrize("cls", [TimingEngine, FastEngine])
def test_row_interleaving_raises_row_hits_of_a_sequential_stream(cls):
    line, row = _row_hit_share(cls, "line"), _row_hit_share(cls, "row")
    # Expected shares (our own derivation from the maps, FIFO service): a
    # sequential read finds its row open when it is not the first of its row
    # (share 1 - 1/ROW) and no random read reached its bank since the stream's
    # last read there.  Line order: the stream returns to a bank after BANKS
    # of its reads, with BANKS random reads in between; row order: right
    # after one random read.  Each random read lands in the bank w.p. 1/BANKS.
    q = 1 - 1 / BANKS
    assert line == pytest.approx((1 - 1 / ROW) * q ** BANKS, abs=0.03)
    assert row == pytest.approx((1 - 1 / ROW) * q, abs=0.03)
    assert row > line + 0.3


def test_row_mapping_runs_from_python_and_engines_agree():
    ov = {"workload.requests": 3000, "array.row_lines": 8, "array.mapping": "row",
          "workload.pattern": "sequential"}
    fast = simulate(None, overrides={**ov, "run.engine": "fast"}).summary
    ref = simulate(None, overrides={**ov, "run.engine": "reference"}).summary
    assert fast["read_latency_mean_ns"] == ref["read_latency_mean_ns"]
    line = simulate(None, overrides={**ov, "array.mapping": "line"}).summary
    assert fast["read_latency_mean_ns"] != line["read_latency_mean_ns"]
