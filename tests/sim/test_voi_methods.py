"""Two methods on the same parameter draws (issue 14 item 4): acceptability curves and EVPI next to the
reference method's, and the willingness-to-pay ranges where they differ by more than a threshold.

The "approximation" adds a known cost ``δ`` to the new strategy in every draw. With the reference's
incremental net benefit ``N(μ(λ), σ(λ)²)`` the approximation's is ``N(μ(λ) - δ, σ(λ)²)``, so
``P_approx - P_ref = Φ((μ - δ)/σ) - Φ(μ/σ)`` and its EVPI is ``σ L(|μ - δ|/σ)`` (Raiffa & Schlaifer
1961).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from sim.problems import ValidationError
from sim.uncertainty import (acceptability_curve, compare_acceptability, compare_evpi, differing_wtp_ranges,
                             per_method)

M_E, S_E, M_C, S_C, DELTA = 0.4, 0.3, 8000.0, 4000.0, 2500.0
N = 10_000
GRID = np.linspace(0, 60_000, 31)


def two_methods(seed: int = 55) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    de, dc = rng.normal(M_E, S_E, N), rng.normal(M_C, S_C, N)
    draws = np.arange(N)
    parts = []
    for method, extra in (("exact", 0.0), ("per-transition|1.0|half-cycle", DELTA)):
        parts += [pd.DataFrame({"method": method, "draw": draws, "strategy": "usual care",
                                "costs_discounted": 0.0, "qalys_discounted": 0.0}),
                  pd.DataFrame({"method": method, "draw": draws, "strategy": "new",
                                "costs_discounted": dc + extra, "qalys_discounted": de})]
    return pd.concat(parts, ignore_index=True)


def normal(wtp):
    return wtp * M_E - M_C, np.sqrt((wtp * S_E) ** 2 + S_C ** 2)


def test_difference_in_acceptability_matches_the_normal_shift_within_4_paired_mcse():
    table = two_methods()
    out = compare_acceptability(table, "exact", GRID)
    approx = out[(out.method != "exact") & (out.strategy == "new")].reset_index(drop=True)
    mu, sigma = normal(GRID)
    expected = stats.norm.cdf((mu - DELTA) / sigma) - stats.norm.cdf(mu / sigma)
    assert np.all(np.abs(approx["difference"] - expected) <= 4 * approx["difference_mcse"])
    ref = out[out.method == "exact"]
    assert (ref["difference"] == 0).all()
    # the per-method probabilities are the one-method acceptability curves of the same rows
    alone = per_method(acceptability_curve, table, GRID)
    merged = out.merge(alone, on=["method", "wtp", "strategy"], suffixes=("", "_alone"))
    assert np.array_equal(merged["probability"], merged["probability_alone"])


def test_differing_ranges_are_the_runs_over_the_threshold():
    table = two_methods()
    comparison = compare_acceptability(table, "exact", GRID)
    ranges = differing_wtp_ranges(comparison, 0.05)
    new = ranges[(ranges.strategy == "new")]
    assert list(new["method"]) == ["per-transition|1.0|half-cycle"]  # one contiguous run
    row = new.iloc[0]
    approx = comparison[(comparison.method == row.method) & (comparison.strategy == "new")]
    inside = approx[(approx.wtp >= row.wtp_from) & (approx.wtp <= row.wtp_to)]
    outside = approx[(approx.wtp < row.wtp_from) | (approx.wtp > row.wtp_to)]
    assert (inside["difference"].abs() > 0.05).all() and (outside["difference"].abs() <= 0.05).all()
    # the largest shift of a normal's Φ by δ/σ is near μ = δ/2, i.e. λ ≈ (M_C + δ/2)/M_E = 23125
    assert row.wtp_from < 23_125 < row.wtp_to


def test_differing_ranges_on_a_hand_made_table():
    diffs = [0.0, 0.02, 0.08, 0.12, 0.03, -0.07, -0.2, 0.0]
    comparison = pd.DataFrame({"method": "m", "strategy": "s", "wtp": np.arange(8) * 1000.0,
                               "difference": diffs, "difference_mcse": 0.01})
    out = differing_wtp_ranges(comparison, 0.05)
    assert out[["wtp_from", "wtp_to", "largest_difference", "at_wtp"]].values.tolist() == [
        [2000.0, 3000.0, 0.12, 3000.0], [5000.0, 6000.0, -0.2, 6000.0]]
    assert differing_wtp_ranges(comparison, 0.5).empty
    with pytest.raises(ValidationError) as err:
        differing_wtp_ranges(comparison, 1.5)
    assert err.value.problem.path == ("threshold",)


def test_evpi_of_each_method_matches_its_normal_loss_within_4_mcse():
    out = compare_evpi(two_methods(), "exact", GRID[::5])
    mu, sigma = normal(GRID[::5])
    loss = lambda z: stats.norm.pdf(z) - z * stats.norm.sf(z)  # noqa: E731 - Raiffa & Schlaifer 1961
    for method, shift in (("exact", 0.0), ("per-transition|1.0|half-cycle", DELTA)):
        rows = out[out.method == method]
        expected = sigma * loss(np.abs(mu - shift) / sigma)
        assert np.all(np.abs(rows["evpi"] - expected) <= 4 * rows["mcse"])
    approx = out[out.method != "exact"]
    assert np.allclose(approx["difference"], approx["evpi"] - approx["reference_evpi"], rtol=0, atol=1e-9)


def test_methods_must_share_draws_and_the_reference_must_exist():
    table = two_methods()
    with pytest.raises(ValidationError) as err:
        compare_acceptability(table, "simulated", GRID)
    assert err.value.problem.path == ("reference",)
    fewer = table[~((table.method == "exact") & (table.draw == 0))]
    with pytest.raises(ValidationError) as err:
        compare_evpi(fewer, "exact", GRID)
    assert err.value.problem.path == ("per_draw", "method")
