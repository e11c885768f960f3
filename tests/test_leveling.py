"""Wear levelers: bijection, agreement with slow per-write references, moves.

The slow references below follow the schemes' published descriptions step by
step (registers and one write at a time); the vectorized levelers must give
the same physical line for every write and the same moves, whatever the
chunking.
"""
from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from memsim.errors import ConfigError
from memsim.policy.leveling import LEVELERS, leveler_names, leveler_params, make_leveler
from memsim.policy.leveling.randomizer import KeyedPermutation

# ---------------------------------------------------------------- references


class RefStartGap:
    """Start-Gap as described in Qureshi et al., MICRO 2009, Section 4:
    PA = (LA + Start) mod N, +1 if >= Gap; every psi writes the line above
    the gap moves into it; at Gap == 0 line N moves to 0, Gap = N and
    Start = (Start + 1) mod N."""

    def __init__(self, n: int, psi: int, base: int = 0) -> None:
        self.n, self.psi, self.base = n, psi, base
        self.start, self.gap, self.count = 0, n, 0

    def map(self, la: int) -> int:
        pa = (la + self.start) % self.n
        return self.base + (pa + 1 if pa >= self.gap else pa)

    def write(self, la: int) -> tuple[int, list[tuple[int, int]]]:
        pa = self.map(la)
        self.count += 1
        moves = []
        if self.count == self.psi:
            self.count = 0
            if self.gap == 0:
                moves.append((self.base + self.n, self.base))
                self.gap = self.n
                self.start = (self.start + 1) % self.n
            else:
                moves.append((self.base + self.gap - 1, self.base + self.gap))
                self.gap -= 1
        return pa, moves


class RefRegionStartGap:
    def __init__(self, n: int, regions: int, psi: int, perm=None) -> None:
        q, rem = divmod(n, regions)
        self.region_of, self.local, self.sg = [], [], []
        base = 0
        for r in range(regions):
            size = q + 1 if r < rem else q
            self.sg.append(RefStartGap(size, psi, base))
            self.region_of += [r] * size
            self.local += list(range(size))
            base += size + 1
        self.perm = perm

    def map(self, la: int) -> int:
        la = int(self.perm(np.array([la]))[0]) if self.perm else la
        return self.sg[self.region_of[la]].map(self.local[la])

    def write(self, la: int):
        la = int(self.perm(np.array([la]))[0]) if self.perm else la
        return self.sg[self.region_of[la]].write(self.local[la])


class RefSecurityRefresh:
    """Seong et al., ISCA 2010: per-region refresh pointer walking addresses,
    swapping a pair when the pointer reaches its lower member."""

    def __init__(self, lv) -> None:
        self.lv = lv
        self.S, self.interval = lv.region_lines, lv.interval
        G = lv.regions
        self.rnd, self.crp, self.count = [0] * G, [0] * G, [0] * G
        self.kp = [self.key(g, 0) for g in range(G)]
        self.kc = [self.key(g, 1) for g in range(G)]

    def key(self, g: int, r: int) -> int:
        return int(self.lv.key(np.array([g]), np.array([r]))[0])

    def map(self, la: int) -> int:
        g, a = divmod(la, self.S)
        b = a ^ self.kp[g] ^ self.kc[g]
        done = a < self.crp[g] or b < self.crp[g]
        return g * self.S + (a ^ self.kc[g] if done else a ^ self.kp[g])

    def write(self, la: int):
        pa = self.map(la)
        g = la // self.S
        moves = []
        self.count[g] += 1
        if self.count[g] == self.interval:
            self.count[g] = 0
            a = self.crp[g]
            if a ^ self.kp[g] ^ self.kc[g] > a:
                p = g * self.S + (a ^ self.kp[g])
                q = g * self.S + (a ^ self.kc[g])
                moves += [(p, q), (q, p)]
            self.crp[g] += 1
            if self.crp[g] == self.S:
                self.crp[g] = 0
                self.rnd[g] += 1
                self.kp[g] = self.kc[g]
                self.kc[g] = self.key(g, self.rnd[g] + 1)
        return pa, moves


class RefHotColdSwap:
    def __init__(self, n: int, G: int, period: int) -> None:
        self.G, self.period = G, period
        M = -(-n // G)
        self.table = list(range(M))
        self.wear = [0] * M
        self.heat = [0] * M
        self.count = 0

    def map(self, la: int) -> int:
        return self.table[la // self.G] * self.G + la % self.G

    def write(self, la: int):
        pa = self.map(la)
        self.heat[la // self.G] += 1
        self.wear[pa // self.G] += 1
        self.count += 1
        moves = []
        if self.count % self.period == 0:
            hot_l = max(range(len(self.heat)), key=lambda i: (self.heat[i], -i))
            cold_p = min(range(len(self.wear)), key=lambda i: (self.wear[i], i))
            hot_p = self.table[hot_l]
            self.heat = [0] * len(self.heat)
            if hot_p != cold_p and self.wear[hot_p] > self.wear[cold_p]:
                cold_l = self.table.index(cold_p)
                self.table[hot_l], self.table[cold_l] = cold_p, hot_p
                G = self.G
                moves += [(hot_p * G + i, cold_p * G + i) for i in range(G)]
                moves += [(cold_p * G + i, hot_p * G + i) for i in range(G)]
                self.wear[hot_p] += G
                self.wear[cold_p] += G
        return pa, moves


class RefNone:
    def map(self, la: int) -> int:
        return la

    def write(self, la: int):
        return la, []


def make_pair(scheme: str, n: int, p: dict, seed: int):
    lv = make_leveler(scheme, n, np.random.default_rng(seed), **p)
    if scheme == "none":
        ref = RefNone()
    elif scheme == "start_gap":
        ref = RefStartGap(n, p["psi"])
    elif scheme == "randomized_start_gap":
        ref = RefRegionStartGap(n, 1, p["psi"], perm=lv.perm)
    elif scheme == "region_start_gap":
        ref = RefRegionStartGap(n, p["regions"], p["psi"],
                                perm=lv.perm if p.get("randomize") else None)
    elif scheme == "security_refresh":
        ref = RefSecurityRefresh(lv)
    elif scheme == "hot_cold_swap":
        ref = RefHotColdSwap(n, p["region_lines"], p["period"])
    elif scheme == "bit_rotation":
        ref = RefStartGap(n, p["inner_params"]["psi"])
    return lv, ref


@st.composite
def scheme_case(draw, scheme: str):
    # Small spaces wrap Start and rounds many times within one chunk.
    n = draw(st.one_of(st.integers(1, 6), st.integers(1, 40)))
    if scheme == "none":
        p = {}
    elif scheme in ("start_gap", "randomized_start_gap"):
        p = {"psi": draw(st.integers(1, 7))}
    elif scheme == "region_start_gap":
        p = {"psi": draw(st.integers(1, 7)), "regions": draw(st.integers(1, n)),
             "randomize": draw(st.booleans())}
    elif scheme == "security_refresh":
        big = 1 << (n - 1).bit_length()
        S = draw(st.sampled_from([s for s in (1, 2, 4, 8, 16, 32, 64) if s <= big]))
        p = {"region_lines": S, "interval": draw(st.integers(1, 5))}
    elif scheme == "hot_cold_swap":
        p = {"region_lines": draw(st.integers(1, 8)), "period": draw(st.integers(1, 20))}
    else:
        p = {"inner": "start_gap", "inner_params": {"psi": draw(st.integers(1, 7))},
             "line_bits": draw(st.sampled_from([8, 64, 512])),
             "interval": draw(st.integers(1, 9)), "step": draw(st.integers(1, 9))}
    writes = draw(st.lists(st.integers(0, n - 1), min_size=0, max_size=250))
    cuts = sorted(draw(st.lists(st.integers(0, len(writes)), max_size=5)))
    return n, p, writes, cuts, draw(st.integers(0, 2**32 - 1))


def check_against_reference(scheme: str, case) -> None:
    n, p, writes, cuts, seed = case
    lv, ref = make_pair(scheme, n, p, seed)
    content = np.full(lv.n_physical, -1, dtype=np.int64)
    content[lv.lookup(np.arange(n))] = np.arange(n)
    bounds = [0, *cuts, len(writes)]
    w = 0
    for lo, hi in itertools.pairwise(bounds):
        la = np.array(writes[lo:hi], dtype=np.int64)
        res = lv.apply(la)
        assert res.phys.dtype == np.int64 and res.phys.shape == la.shape
        moves = res.moves
        assert np.all(np.diff(moves.after) >= 0)
        ref_moves = []
        for i, x in enumerate(writes[lo:hi]):
            pa, mv = ref.write(x)
            assert res.phys[i] == pa, (i, x)
            # The write lands where its data is (moves kept the map honest).
            assert content[pa] == x
            ref_moves += [(s, d, i) for s, d in mv]
            sel = moves.after == i
            if sel.any():          # a step is a parallel copy (see Moves)
                content[moves.dst[sel]] = content[moves.src[sel]].copy()
        got = list(zip(moves.src.tolist(), moves.dst.tolist(), moves.after.tolist()))
        assert got == ref_moves
        if scheme == "bit_rotation":
            g = w + np.arange(la.size)
            want = (g // p["interval"] * p["step"]) % p["line_bits"]
            np.testing.assert_array_equal(res.bit_offset, want)
        w += la.size
        # Bijection after every chunk: injective into [0, n_physical).
        phys_all = lv.lookup(np.arange(n))
        assert np.unique(phys_all).size == n
        assert phys_all.min() >= 0 and phys_all.max() < lv.n_physical
        np.testing.assert_array_equal(phys_all, [ref.map(x) for x in range(n)])
        np.testing.assert_array_equal(content[phys_all], np.arange(n))
    assert lv.user_writes == len(writes)


@pytest.mark.parametrize("scheme", sorted(LEVELERS))
def test_matches_slow_reference(scheme: str) -> None:
    @settings(max_examples=80, deadline=None)
    @given(scheme_case(scheme))
    def run(case):
        check_against_reference(scheme, case)

    run()


LONG_PARAMS = {
    "none": {}, "start_gap": {"psi": 1}, "randomized_start_gap": {"psi": 2},
    "region_start_gap": {"psi": 1, "regions": 2, "randomize": True},
    "security_refresh": {"region_lines": 4, "interval": 1},
    "hot_cold_swap": {"region_lines": 2, "period": 3},
    "bit_rotation": {"inner": "start_gap", "inner_params": {"psi": 1},
                     "line_bits": 64, "interval": 2, "step": 8},
}


@pytest.mark.parametrize("scheme", sorted(LEVELERS))
@pytest.mark.parametrize("n", [1, 2, 3, 5, 8])
def test_long_chunks_match_slow_reference(scheme: str, n: int) -> None:
    # Chunks much longer than a full cycle of the scheme (Start wraps, keys
    # roll over several rounds inside one chunk).
    rng = np.random.default_rng(n)
    writes = rng.integers(0, n, 3000).tolist()
    p = dict(LONG_PARAMS[scheme])
    if scheme == "security_refresh":
        p["region_lines"] = min(p["region_lines"], 1 << (n - 1).bit_length())
    if scheme == "region_start_gap":
        p["regions"] = min(p["regions"], n)
    check_against_reference(scheme, (n, p, writes, [7, 1500], 99))


# ---------------------------------------------------------------- Start-Gap


def test_start_gap_closed_form_matches_registers() -> None:
    # The closed form of the brief vs the register walk of Qureshi et al.,
    # MICRO 2009, over several full rotations of a small space.
    n, psi = 5, 1
    lv = make_leveler("start_gap", n, None, psi=psi)
    ref = RefStartGap(n, psi)
    for _ in range(3 * n * (n + 1)):
        lv.apply(np.array([0]))
        ref.write(0)
        assert (lv.start, lv.gap) == (ref.start, ref.gap)


def test_start_gap_overhead_is_one_over_psi() -> None:
    # Qureshi et al., MICRO 2009: one gap move (one line write) per psi
    # writes, i.e. 1/psi extra writes per user write (1% for psi = 100).
    rng = np.random.default_rng(3)
    for psi in (1, 7, 100):
        lv = make_leveler("start_gap", 1000, rng, psi=psi)
        total = 0
        for _ in range(10):
            total += len(lv.apply(rng.integers(0, 1000, 10_007)).moves)
        assert total / lv.user_writes == pytest.approx(1 / psi, abs=1 / lv.user_writes)


def test_start_gap_full_rotation_returns_to_identity() -> None:
    # After N (N + 1) gap moves Start has wrapped N times: map is identity
    # again (Qureshi et al., MICRO 2009: Start cycles mod N).
    n = 9
    lv = make_leveler("start_gap", n, None, psi=1)
    lv.apply(np.zeros(n * (n + 1), dtype=np.int64))
    np.testing.assert_array_equal(lv.lookup(np.arange(n)), np.arange(n))


def test_security_refresh_key_table_matches_hash() -> None:
    # The per-chunk key table is a cache of key(); both paths must agree.
    lv = make_leveler("security_refresh", 64, np.random.default_rng(1),
                      region_lines=2, interval=1)
    lv.apply(np.arange(64).repeat(5))
    rng = np.random.default_rng(2)
    for size in (3, 5000):
        g = rng.integers(0, lv.regions, size)
        first = lv.region_writes // lv.interval >> lv.shift
        rnd = first[g] + rng.integers(0, 3, size)
        kp, kc = lv._keys(g, rnd)
        np.testing.assert_array_equal(kp, lv.key(g, rnd))
        np.testing.assert_array_equal(kc, lv.key(g, rnd + 1))


# ---------------------------------------------------------------- randomizer


@pytest.mark.parametrize("n", [1, 2, 3, 7, 64, 1000, 4097])
def test_keyed_permutation_is_bijection(n: int) -> None:
    perm = KeyedPermutation(n, np.random.default_rng(n))
    img = perm(np.arange(n))
    np.testing.assert_array_equal(np.sort(img), np.arange(n))
    # The table-free path (used for very large spaces) gives the same map.
    np.testing.assert_array_equal(perm._walk(np.arange(n)), img)


def test_keyed_permutation_scatters_neighbours() -> None:
    # A random permutation puts consecutive lines next to each other with
    # probability about 2/n; far below 1% here (common practice check).
    n = 1 << 14
    img = KeyedPermutation(n, np.random.default_rng(5))(np.arange(n))
    assert np.mean(np.abs(np.diff(img)) == 1) < 0.01
    other = KeyedPermutation(n, np.random.default_rng(6))(np.arange(n))
    assert np.mean(img == other) < 0.01


# ---------------------------------------------------------------- registry


def test_registry_and_errors() -> None:
    assert leveler_names() == sorted(LEVELERS)
    assert "psi" in leveler_params("start_gap")
    with pytest.raises(ConfigError) as e:
        make_leveler("no_such_scheme", 10, None)
    assert "start_gap" in str(e.value)
    with pytest.raises(ConfigError):
        make_leveler("start_gap", 10, None, phi=3)
    with pytest.raises(ConfigError):
        make_leveler("start_gap", 10, None, psi=0)
    with pytest.raises(ConfigError):
        make_leveler("security_refresh", 10, None, region_lines=6)
    with pytest.raises(ConfigError):
        make_leveler("region_start_gap", 10, None, regions=11)
    with pytest.raises(ConfigError):
        make_leveler("bit_rotation", 10, None, inner="bit_rotation")


def test_bit_rotation_exposes_offsets() -> None:
    lv = make_leveler("bit_rotation", 16, None, line_bits=64, interval=3, step=8)
    np.testing.assert_array_equal(lv.rotation(np.arange(4)), 0)
    lv.apply(np.arange(7))
    np.testing.assert_array_equal(lv.rotation(np.array([2, 5])), [16, 16])
    assert lv.steady_offsets().tolist() == list(range(0, 64, 8))


def test_state_is_small_json_like() -> None:
    import json
    for name in leveler_names():
        lv = make_leveler(name, 100, np.random.default_rng(0))
        lv.apply(np.arange(100))
        assert len(json.dumps(lv.state())) < 4000
