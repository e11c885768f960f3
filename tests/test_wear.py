"""Wear engine and attack address streams."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from memsim.engine.wear import WearCounter, cell_profile, effective_profile, rotate_profile, run_wear
from memsim.errors import ConfigError
from memsim.policy.leveling import leveler_names, make_leveler
from memsim.workload.attacks import ATTACKS, attack_stream, birthday_attack, hot_set, repeated_address


def split(a: np.ndarray, size: int) -> list[np.ndarray]:
    return [a[i:i + size] for i in range(0, a.size, size)]


@pytest.mark.parametrize("name", leveler_names())
def test_counts_match_per_chunk_results(name: str) -> None:
    # Per-line counts are the bincount of every write's physical line and of
    # every move destination; totals are conserved; chunking does not matter.
    n = 50
    rng = np.random.default_rng(1)
    stream = rng.integers(0, n, 20_000)
    params = {"psi": 3} if "start_gap" in name else {}
    if name == "hot_cold_swap":
        params = {"region_lines": 5, "period": 97}
    if name == "security_refresh":
        params = {"interval": 2}
    lv = make_leveler(name, n, np.random.default_rng(7), **params)
    user = np.zeros(lv.n_physical, np.int64)
    moved = np.zeros(lv.n_physical, np.int64)
    cost = 0
    for c in split(stream, 999):
        r = lv.apply(c)
        user += np.bincount(r.phys, minlength=lv.n_physical)
        moved += np.bincount(r.moves.dst, minlength=lv.n_physical)
        cost += r.moves.cost_writes
    for size in (1 << 12, 777, stream.size):
        w = run_wear(split(stream, size), make_leveler(name, n, np.random.default_rng(7),
                                                      **params))
        np.testing.assert_array_equal(w.user_line_writes, user)
        np.testing.assert_array_equal(w.move_line_writes, moved)
        assert w.user_writes == stream.size == w.user_line_writes.sum()
        assert w.cost_writes == cost
        assert w.leveling_write_overhead == pytest.approx((moved.sum() + cost) / stream.size)


def test_wear_statistics() -> None:
    w = run_wear([np.array([0, 0, 0, 1])], make_leveler("none", 2, None))
    # Line wear [3, 1]: max/mean = 1.5, CoV = std/mean = 1/2.
    assert w.wear_max_over_mean == pytest.approx(1.5)
    assert w.wear_cov == pytest.approx(0.5)
    s = w.summary()
    assert s["user_writes"] == 4 and s["move_writes"] == 0


def test_move_weight_in_line_wear() -> None:
    lv = make_leveler("start_gap", 4, None, psi=1)
    w = run_wear([np.zeros(10, np.int64)], lv, move_weight=2.5)
    np.testing.assert_allclose(w.line_wear, w.user_line_writes + 2.5 * w.move_line_writes)
    with pytest.raises(ConfigError):
        WearCounter(lv, move_weight=-1)


def test_max_user_writes_cuts_stream() -> None:
    w = run_wear(split(np.arange(1000) % 10, 64), make_leveler("none", 10, None),
                 max_user_writes=300)
    assert w.user_writes == 300


def test_bit_profile_without_and_with_rotation() -> None:
    L = 16
    p = np.linspace(0, 1, L)
    w = run_wear([np.zeros(1000, np.int64)], make_leveler("none", 4, None),
                 cells=p, line_bits=L)
    np.testing.assert_allclose(w.bit_profile, 1000 * p)
    # Offset advancing 1 bit every write, 1600 writes = 100 full turns: every
    # cell sees every bit position equally often -> flat profile at mean(p).
    lv = make_leveler("bit_rotation", 4, None, line_bits=L, interval=1, step=1)
    w = run_wear([np.zeros(1600, np.int64)], lv, cells=p, line_bits=L)
    np.testing.assert_allclose(w.bit_profile, 1600 * p.mean())
    assert effective_profile(p, L, lv) == pytest.approx(p.mean())
    assert np.allclose(effective_profile(p, L, None), p)
    # Step 4 of 16 bits: four offsets; profile = mean of four rotations.
    lv = make_leveler("bit_rotation", 4, None, line_bits=L, interval=1, step=4)
    q = effective_profile(p, L, lv)
    want = np.mean([np.roll(p, o) for o in (0, 4, 8, 12)], axis=0)
    np.testing.assert_allclose(q, want)


def test_rotate_profile_moves_bits_up() -> None:
    p = np.array([1.0, 0, 0, 0])
    np.testing.assert_array_equal(rotate_profile(p, np.array([0, 2, 0, 0])), [0, 2, 0, 0])


def test_cell_profile_validation() -> None:
    assert cell_profile(None, 4).tolist() == [1, 1, 1, 1]
    assert cell_profile(0.25, 4).tolist() == [0.25] * 4
    for bad in (0.0, 1.5, np.ones(3), np.full(4, 2.0)):
        with pytest.raises(ConfigError):
            cell_profile(bad, 4)


def test_start_gap_uniform_wear_is_flat() -> None:
    # Over whole Start-Gap rotations every logical line visits every
    # physical line (Qureshi et al., MICRO 2009), so a repeated address
    # spreads evenly: max/mean close to 1 after 4 rotations.
    n, psi = 32, 2
    lv = make_leveler("start_gap", n, None, psi=psi)
    w = run_wear([np.zeros(4 * n * (n + 1) * psi, np.int64)], lv)
    assert w.wear_max_over_mean < 1.05


# ---------------------------------------------------------------- attacks


def test_attack_registry_signature() -> None:
    rng = np.random.default_rng(0)
    for name, f in ATTACKS.items():
        a = f(rng, 1000, 64)
        assert a.dtype == np.int64 and a.shape == (1000,)
        assert a.min() >= 0 and a.max() < 64, name


def test_repeated_address() -> None:
    a = repeated_address(np.random.default_rng(0), 100, 10, line=3)
    assert np.all(a == 3)
    with pytest.raises(ConfigError):
        repeated_address(np.random.default_rng(0), 10, 10, line=10)


def test_birthday_attack_runs_and_spread() -> None:
    rng = np.random.default_rng(0)
    a = birthday_attack(rng, 100_000, 1000, burst=50)
    runs = a.reshape(-1, 50)
    assert np.all(runs == runs[:, :1])
    # Burst targets are uniform over the footprint: chi-square vs uniform.
    counts = np.bincount(runs[:, 0], minlength=1000)
    assert stats.chisquare(counts).pvalue > 1e-3
    # A chunked stream continues bursts across chunk boundaries.
    s = np.concatenate(list(attack_stream("birthday_attack", np.random.default_rng(1),
                                          1000, 100, chunk=33, burst=40)))
    assert s.size == 1000
    assert np.all(s[:1000 // 40 * 40].reshape(-1, 40) == s[:1000 // 40 * 40:40, None])


def test_hot_set_fraction() -> None:
    n = 200_000
    a = hot_set(np.random.default_rng(0), n, 4096, hot_lines=8, hot_fraction=0.9,
                hot_base=100, hot_stride=3)
    hot = 100 + 3 * np.arange(8)
    frac = np.isin(a, hot).mean()
    # Hot writes plus uniform writes that hit the hot set by chance.
    expect = 0.9 + 0.1 * 8 / 4096
    assert frac == pytest.approx(expect, abs=5 * np.sqrt(expect * (1 - expect) / n))
    with pytest.raises(ConfigError):
        hot_set(np.random.default_rng(0), 10, 10, hot_fraction=1.5)
    with pytest.raises(ConfigError):
        list(attack_stream("no_such_attack", np.random.default_rng(0), 10, 10))
