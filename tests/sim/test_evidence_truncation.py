"""Left truncation: fits to delayed-entry data simulated from known parameters recover them. The 95%
intervals (delta-method Wald intervals from the observed information) must cover the true values in
95% of repeated samples, within 4 binomial standard errors sqrt(0.95 * 0.05 / R) (the coverage of a
correct 95% interval is Binomial(R, 0.95) / R over R independent samples; common practice, no source).

Design (invented): the event time T from the project's Weibull (shape 1.4, scale 10 years); entry
E ~ Uniform(0, 6) years, and a patient is in the data only if T > E (left truncation: those who had
the event before entry are never seen); censoring at E + Uniform(2, 15) years.
"""

from __future__ import annotations

import numpy as np
import pytest

from sim.evidence import SurvivalData, fit_family
from sim.hazards import Weibull

from .conftest import FULL

TRUE = Weibull(shape=1.4, scale=10.0)
Z95 = 1.959963984540054  # scipy.stats.norm.ppf(0.975)


def _sample(rng: np.random.Generator, n: int) -> SurvivalData:
    """n delayed-entry patients who survived to entry (rejection: draw until n are kept)."""
    kept_t, kept_e = [], []
    while sum(a.size for a in kept_t) < n:
        t = TRUE.rvs(2 * n, rng)
        e = rng.uniform(0.0, 6.0, 2 * n)
        keep = t > e
        kept_t.append(t[keep])
        kept_e.append(e[keep])
    t, e = np.concatenate(kept_t)[:n], np.concatenate(kept_e)[:n]
    c = e + rng.uniform(2.0, 15.0, n)
    return SurvivalData.from_arrays(np.minimum(t, c), (t <= c).astype(int), entry=e)


def test_delayed_entry_point_estimate_large_sample():
    """One large sample (20,000 patients, seed 1): the estimates within 4 of their own standard errors
    of the truth, and ignoring the delayed entry biases the scale upwards (survivors to entry look
    longer-lived) by far more."""
    data = _sample(np.random.default_rng(1), 20_000)
    fit = fit_family(data, "weibull")
    assert fit.converged
    z = (fit.estimates - [1.4, 10.0]) / fit.standard_errors
    assert np.all(np.abs(z) < 4.0), z
    naive = fit_family(SurvivalData.from_arrays(data.time, data.event.astype(int)), "weibull")
    assert (naive.estimates[1] - 10.0) / naive.standard_errors[1] > 10.0


@pytest.mark.slow
@pytest.mark.parametrize("replicates", [2000 if FULL else 200])
def test_delayed_entry_interval_coverage(replicates):
    """Coverage of the 95% intervals of shape and scale over repeated samples of 300 patients."""
    seeds = np.random.SeedSequence(20261205).spawn(replicates)
    covered = np.zeros((replicates, 2), dtype=bool)
    for i, seed in enumerate(seeds):
        fit = fit_family(_sample(np.random.default_rng(seed), 300), "weibull")
        assert fit.converged, fit.message
        half = Z95 * fit.standard_errors
        covered[i] = np.abs(fit.estimates - [1.4, 10.0]) <= half
    coverage = covered.mean(axis=0)
    tolerance = 4.0 * np.sqrt(0.95 * 0.05 / replicates)
    assert np.all(np.abs(coverage - 0.95) <= tolerance), (coverage, tolerance)
