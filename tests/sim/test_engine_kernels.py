"""The engine's compiled kernels against the numpy reference paths (same bits)."""

import numpy as np

from sim.engine import kernels
from sim.engine.rng import key_from_seed, uniforms


def test_visit_units_equal_the_numpy_philox_uniforms_for_scattered_patients_and_occurrences():
    # sim.engine.rng.uniforms is itself checked bit for bit against numpy.random.Philox (test_rng.py)
    key = key_from_seed(7)
    gen = np.random.default_rng(3)
    for k in (1, 2, 3, 5):
        sel = np.flatnonzero(gen.random(5000) < 0.3).astype(np.int64)
        visits = gen.integers(0, 4, 5000).astype(np.int64)
        before = visits.copy()
        out = np.empty((sel.size, k))
        kernels.visit_units(sel, 1000, visits, k, 2, np.uint64(key[0]), np.uint64(key[1]), out)
        for o in np.unique(before[sel]):
            m = before[sel] == o
            np.testing.assert_array_equal(out[m], uniforms(key, sel[m] + 1000, 2, int(o), k))
        np.testing.assert_array_equal(visits[sel], before[sel] + 1)


def test_range_units_equal_the_numpy_philox_uniforms_of_a_range_of_ids():
    # every alignment of the range's first and last word with the four words of a counter
    key = key_from_seed(11)
    k0, k1 = np.uint64(key[0]), np.uint64(key[1])
    for k in (1, 2, 3, 5):
        for first, count in ((0, 1), (1, 1), (3, 2), (5, 7), (1001, 999), (10**12 + 3, 17)):
            out = np.empty((count, k))
            kernels.range_units(first, count, k, 4, 2, k0, k1, out)
            np.testing.assert_array_equal(out, uniforms(key, np.arange(first, first + count), 4, 2, k))


def test_visit_units_on_a_whole_range_at_one_occurrence_takes_the_range_path_with_the_same_bits():
    key = key_from_seed(13)
    k0, k1 = np.uint64(key[0]), np.uint64(key[1])
    for k in (1, 2, 3):
        visits = np.full(3000, 2, dtype=np.int64)
        sel = np.arange(500, 2500, dtype=np.int64)
        out = np.empty((sel.size, k))
        kernels.visit_units(sel, 7, visits, k, 3, k0, k1, out)
        np.testing.assert_array_equal(out, uniforms(key, sel + 7, 3, 2, k))
        assert (visits[sel] == 3).all() and (visits[:500] == 2).all() and (visits[2500:] == 2).all()
        visits[1000] = 5  # one patient at another occurrence: the per-patient path
        out = np.empty((sel.size, k))
        kernels.visit_units(sel, 7, visits, k, 3, k0, k1, out)
        np.testing.assert_array_equal(out[500], uniforms(key, [1007], 3, 5, k)[0])
        np.testing.assert_array_equal(np.delete(out, 500, axis=0),
                                      uniforms(key, np.delete(sel, 500) + 7, 3, 3, k))
