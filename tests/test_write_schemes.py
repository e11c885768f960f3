"""Write schemes against binomial arithmetic and the Flip-N-Write bound."""
import numpy as np
import pytest
from scipy import stats

from memsim.policy.leveling.base import Leveler
from memsim.policy.write import make_scheme
from memsim.policy.write.bits import popcount_rows
from memsim.policy.writepath import WritePath, assign_rounds
from memsim.workload.content import DataModel


def _path(scheme, rng, lines=4096, line_bytes=64, word_bits=32, data="random"):
    s = make_scheme(scheme, line_bytes, word_bits)
    return WritePath(Leveler(lines, rng), s, DataModel(data, line_bytes), rng)


def test_data_comparison_random_data_programs_half_the_cells(rng):
    # Each of N = 512 bits differs with probability 1/2 between two independent
    # uniform lines, so cells programmed ~ Binomial(512, 1/2): mean N/2,
    # variance N/4 (binomial distribution, textbook).
    p = _path("data_comparison", rng)
    b = p.apply(rng.integers(0, 4096, 20000))
    n = b.n_set + b.n_reset
    mean_se = np.sqrt(128 / n.size)
    assert abs(n.mean() - 256) < 4 * mean_se
    assert abs(n.var(ddof=1) - 128) < 0.06 * 128      # var of sample var ~ 2 s^4/n -> 1% sd
    # SET and RESET are symmetric on uniform data.
    assert abs(b.n_set.mean() - b.n_reset.mean()) < 8 * np.sqrt(64 / n.size)


def test_full_line_programs_every_cell(rng):
    p = _path("full_line", rng)
    b = p.apply(rng.integers(0, 4096, 1000))
    assert np.all(b.n_set + b.n_reset == 512)


@pytest.mark.parametrize("word_bits", [8, 16, 32, 64])
def test_flip_n_write_bound_and_exact_mean(rng, word_bits):
    # Cho and Lee, MICRO 2009: plain costs d + f, inverted W - d + 1 - f;
    # the cheaper is at most floor((W + 1) / 2) per word including its flag.
    p = _path("flip_n_write", rng, word_bits=word_bits)
    lines = rng.integers(0, 4096, 20000)
    # Per-word bound: check on the masks of one batch of distinct lines.
    old = p.stored[:512].copy()
    old_f = p.flags[:512].copy()
    new = rng.integers(0, 256, size=(512, 64), dtype=np.uint8)
    enc = p.scheme.encode(old, old_f, new)
    from memsim.policy.write.bits import words
    per_word = (np.bitwise_count(words(enc.set_mask | enc.reset_mask, word_bits)).astype(int)
                + enc.flag_set + enc.flag_reset)
    assert per_word.max() <= (word_bits + 1) // 2
    assert np.array_equal(p.scheme.decode(enc.stored, enc.flags), new)
    # Mean over random data: stored XOR new is uniform whatever the flag, so
    # d ~ Binomial(W, 1/2) and cost = min(d, W + 1 - d) (by the d <-> W - d
    # symmetry for either flag value).  Exact expectation via scipy.stats.
    d = np.arange(word_bits + 1)
    e_word = float(np.sum(stats.binom.pmf(d, word_bits, 0.5) * np.minimum(d, word_bits + 1 - d)))
    expected = e_word * (512 // word_bits)
    b = p.apply(lines)
    n = b.n_set + b.n_reset
    se = n.std(ddof=1) / np.sqrt(n.size)
    assert abs(n.mean() - expected) < 4 * se
    assert n.mean() < 256            # better than data-comparison write


def test_flip_n_write_decodes_what_was_written(rng):
    p = _path("flip_n_write", rng, lines=64, data="flip")
    lines = rng.integers(0, 64, 5000)
    data = rng.integers(0, 256, size=(5000, 64), dtype=np.uint8)
    p.apply(lines, data)
    last = {int(line): i for i, line in enumerate(lines)}
    for line, i in last.items():
        assert np.array_equal(p.logical_content(np.array([line]))[0], data[i])


def test_rounds_keep_per_line_order():
    dst = np.array([3, 3, 1, 3, 1, 2])
    r = assign_rounds(dst, np.full(6, -1))
    assert list(r) == [0, 1, 0, 2, 1, 0]
    # With a move reading line 3 into line 5 after event 1.
    r2 = assign_rounds(np.array([3, 3, 5, 5]), np.array([-1, -1, 3, -1]))
    assert list(r2) == [0, 1, 2, 3]


def test_data_model_changed_fraction(rng):
    for kind, kw in (("random", {}), ("flip", {"flip_fraction": 0.2}), ("zeros", {"one_fraction": 0.1})):
        m = DataModel(kind, 64, **kw)
        old = m.initial(rng, 4000)
        new = m.new(rng, old)
        frac = popcount_rows(old ^ new).mean() / 512
        assert abs(frac - m.expected_changed_fraction()) < 0.01


@pytest.mark.parametrize("scheme,word_bits", [("full_line", 32), ("data_comparison", 32),
                                              ("flip_n_write", 8), ("flip_n_write", 32),
                                              ("flip_n_write", 64)])
@pytest.mark.parametrize("data", ["random", "flip", "zeros", "given"])
@pytest.mark.parametrize("leveler,params", [("none", {}), ("start_gap", {"psi": 3}),
                                            ("hot_cold_swap", {"region_lines": 4, "period": 50}),
                                            ("security_refresh", {"region_lines": 64, "interval": 4})])
def test_compiled_path_matches_round_path(scheme, word_bits, data, leveler, params):
    # The compiled pass over a chunk must leave every counter and stored bit
    # exactly as the round-by-round numpy path (same random draws too).
    from memsim.policy.leveling import make_leveler

    def build(use_kernels):
        rng = np.random.default_rng(11)
        s = make_scheme(scheme, 64, word_bits)
        model = DataModel("flip" if data == "given" else data, 64, flip_fraction=0.2)
        p = WritePath(make_leveler(leveler, 256, np.random.default_rng(3), **params), s, model, rng)
        p.use_kernels = use_kernels
        return p

    fast, ref = build(True), build(False)
    assert fast._compiled() and not ref._compiled()
    w_rng = np.random.default_rng(5)
    for size in (1, 700, 3000):
        lines = w_rng.integers(0, 256, size)      # few lines: many rounds per chunk
        content = w_rng.integers(0, 256, (size, 64), dtype=np.uint8) if data == "given" else None
        a, b = fast.apply(lines, content), ref.apply(lines, content)
        for name in ("phys", "n_set", "n_reset", "user", "after", "ones"):
            np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    np.testing.assert_array_equal(fast.stored, ref.stored)
    np.testing.assert_array_equal(fast.flags, ref.flags)
    np.testing.assert_array_equal(fast.line_writes, ref.line_writes)
    np.testing.assert_array_equal(fast.bit_profile(), ref.bit_profile())
    np.testing.assert_array_equal(fast.ledger.cells, ref.ledger.cells)
    assert fast.rng.random() == ref.rng.random()
    if leveler != "none":
        assert fast.move_writes > 0


def test_bit_profile_counts_programmed_cells(rng):
    # The per-position profile is the column sum of the programmed-cell masks.
    p = _path("data_comparison", rng, lines=64)
    old = p.stored.copy()
    lines = rng.permutation(64)[:40]
    new = rng.integers(0, 256, (40, 64), dtype=np.uint8)
    p.apply(lines, new)
    expect = np.unpackbits(old[lines] ^ new, axis=1).sum(axis=0)
    np.testing.assert_array_equal(p.bit_profile(), expect)
