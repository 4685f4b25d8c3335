"""Counter-based generator: bit-exact against numpy's Philox, and the keyed-stream properties."""

import numpy as np
import pytest
from scipy import stats

from sim.engine.rng import STREAM_LAYOUT, exponentials, key_from_seed, philox4x64, uniforms


@pytest.mark.parametrize("counter", [(0, 0, 0, 0), (5, 7, 11, 13), (2**64 - 2, 1, 2**63, 99)])
@pytest.mark.parametrize("key", [(0, 0), (123456789, 987654321), (2**64 - 1, 2**63 + 5)])
def test_philox_matches_numpy(counter, key):
    # Reference: numpy.random.Philox (Philox4x64-10, Salmon et al. 2011). numpy increments its
    # counter before producing the first block, so its counter c yields our block for c + 1.
    ctr = np.array(counter, dtype=np.uint64)
    bg = np.random.Philox(counter=ctr, key=np.array(key, dtype=np.uint64))
    expected = bg.random_raw(4)
    c0 = (counter[0] + 1) % 2**64
    carry = 1 if c0 == 0 else 0
    mine = philox4x64(([c0], [(counter[1] + carry) % 2**64], [counter[2]], [counter[3]]), key)
    assert [int(w[0]) for w in mine] == [int(x) for x in expected]


def test_philox_vectorised_equals_scalar_calls():
    key = key_from_seed(2024)
    ids = np.arange(1000, dtype=np.uint64)
    vec = philox4x64((ids, 3, 2, 0), key)
    for i in (0, 17, 999):
        one = philox4x64(([i], [3], [2], [0]), key)
        assert all(int(v[i]) == int(o[0]) for v, o in zip(vec, one))


def test_draw_depends_only_on_its_counter():
    key = key_from_seed(7)
    all_ids = np.arange(5000)
    a = exponentials(key, all_ids, 2, 0, 3)
    b = exponentials(key, all_ids[::-1], 2, 0, 3)[::-1]
    c = exponentials(key, all_ids[1234:1240], 2, 0, 3)
    np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(a[1234:1240], c)
    # Different stream / occurrence / seed give different draws.
    assert not np.array_equal(a, exponentials(key, all_ids, 3, 0, 3))
    assert not np.array_equal(a, exponentials(key, all_ids, 2, 1, 3))
    assert not np.array_equal(a, exponentials(key_from_seed(8), all_ids, 2, 0, 3))


def test_uniform_and_exponential_laws():
    # Goodness of fit against scipy.stats references at a fixed seed (deterministic).
    key = key_from_seed(11)
    u = uniforms(key, np.arange(200_000), 1, 0, 5)
    assert u.min() > 0 and u.max() <= 1
    for j in range(5):
        assert stats.kstest(u[:, j], stats.uniform.cdf).pvalue > 1e-3
    e = exponentials(key, np.arange(200_000), 1, 0, 1)[:, 0]
    assert stats.kstest(e, stats.expon.cdf).pvalue > 1e-3
    # Columns are not correlated with each other (|r| < 4 / sqrt(n), 4 standard errors under independence).
    r = np.corrcoef(u.T)[np.triu_indices(5, 1)]
    assert np.all(np.abs(r) < 4 / np.sqrt(u.shape[0]))


def test_seed_validation():
    with pytest.raises(ValueError, match="seed must be a non-negative integer, got -1"):
        key_from_seed(-1)


def test_sparse_ids_take_the_vectorised_path_with_the_same_bits():
    # Patients spread far apart in id use the numpy Philox implementation instead of the bulk C
    # generator; both must give the bits of the counter (patient, stream, occurrence, block).
    key = key_from_seed(21)
    dense = uniforms(key, np.arange(50_000), 3, 2, 6)
    ids = np.array([0, 17, 49_999])
    far = np.array([0, 17, 49_999, 10**9])  # a range far larger than 8 x count: the sparse path
    np.testing.assert_array_equal(uniforms(key, far, 3, 2, 6)[:3], dense[ids])


def _numpy_words(key, stream, occurrence, first_word, count):
    """Words first_word .. first_word + count - 1 of the sequence of counters (c, stream, occurrence, 0),
    c = 0, 1, ..., read from numpy.random.Philox (the reference implementation; numpy steps its counter
    before each block, so it starts one counter below, with borrow)."""
    c0 = first_word // 4
    value = c0 + (stream << 64) + (occurrence << 128) - 1
    start = np.array([(value >> (64 * i)) & (2**64 - 1) for i in range(4)], dtype=np.uint64)
    bg = np.random.Philox(counter=start, key=np.array(key, dtype=np.uint64))
    off = first_word - 4 * c0
    return bg.random_raw(4 * ((off + count + 3) // 4))[off:off + count]


@pytest.mark.parametrize("k", [1, 2, 3, 5])
def test_layout_2_reads_every_word_of_the_philox_sequence(k):
    # Stream layout 2: draw j of patient p is word p k + j of the counters (c, stream, occurrence, 0),
    # mapped to (0, 1] by u = 1 - floor(w / 2^12) / 2^52. Checked against numpy's Philox for dense ids
    # (bulk C path), a subset (gathered rows), unsorted ids and far-apart ids (vectorised path).
    key = key_from_seed(99)
    words = _numpy_words(key, 4, 3, 0, 3000 * k).reshape(3000, k)
    expected = 1.0 - (words >> np.uint64(12)).astype(np.float64) / 2.0**52
    np.testing.assert_array_equal(uniforms(key, np.arange(3000), 4, 3, k), expected)
    subset = np.array([2999, 5, 6, 7, 1000, 1001, 17])
    np.testing.assert_array_equal(uniforms(key, subset, 4, 3, k), expected[subset])
    assert STREAM_LAYOUT == 2
    far = 10**12 + 7
    w = _numpy_words(key, 4, 3, far * k, k)
    np.testing.assert_array_equal(uniforms(key, [5, far], 4, 3, k)[1],
                                  1.0 - (w >> np.uint64(12)).astype(np.float64) / 2.0**52)


def test_draws_do_not_overlap_between_patients_or_columns():
    # With k words per patient no word serves two (patient, column) pairs: all 4 * 10^4 uniforms of
    # 10^4 patients x 4 columns are distinct (a repeat among 2^52 values has probability ~2e-7).
    u = uniforms(key_from_seed(3), np.arange(10_000), 1, 0, 4)
    assert np.unique(u).size == u.size


def test_stream_layout_is_recorded_with_every_run():
    # The layout fixes the exact draws of a seed, so a run records it (a rerun under another layout
    # cannot reproduce the log bit for bit, and its metadata says why).
    from sim.engine import simulate
    from sim.io.export import metadata_for
    from sim.model.multistate import Clock, Horizon, Model, State, Transition
    from sim.model.population import FixedAge, Population
    from sim.hazards import Exponential

    model = Model(states=(State("a"), State("dead", absorbing=True)),
                  transitions=(Transition("death", "a", "dead", Exponential(0.1), Clock.STATE),),
                  population=Population(FixedAge(50.0), "a"), horizon=Horizon(10.0))
    assert simulate(model, 10, seed=1).metadata["stream_layout"] == STREAM_LAYOUT
    assert metadata_for("scenario text", seed=1, n_patients=10)["stream_layout"] == STREAM_LAYOUT
