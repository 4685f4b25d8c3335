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
