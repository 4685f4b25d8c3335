"""EVPI, acceptability curve and frontier, population EVPI (sim.uncertainty), against closed forms.

Synthetic two-strategy PSA: the comparator has zero costs and effects; the new strategy's
incremental effects and costs are independent normals, so its incremental net benefit at a
willingness to pay λ is normal with ``μ(λ) = λ m_E - m_C`` and ``σ(λ)² = λ² s_E² + s_C²``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from sim.problems import ValidationError
from sim.uncertainty import (acceptability_curve, acceptability_frontier, evpi, population_evpi,
                             population_factor)

M_E, S_E, M_C, S_C = 0.4, 0.3, 8000.0, 4000.0
WTP = np.array([0.0, 10_000.0, 20_000.0, 30_000.0, 60_000.0])
N = 20_000


def two_strategy_table(n: int = N, seed: int = 20261205) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    de = rng.normal(M_E, S_E, n)
    dc = rng.normal(M_C, S_C, n)
    draws = np.arange(n)
    return pd.concat([
        pd.DataFrame({"draw": draws, "strategy": "usual care", "costs_discounted": 0.0, "qalys_discounted": 0.0}),
        pd.DataFrame({"draw": draws, "strategy": "new", "costs_discounted": dc, "qalys_discounted": de}),
    ], ignore_index=True)


def normal_inb(wtp):
    return WTP_MU(wtp), np.sqrt((wtp * S_E) ** 2 + S_C ** 2)


def WTP_MU(wtp):  # noqa: N802 - the mean of the incremental net benefit
    return wtp * M_E - M_C


def unit_normal_loss(z):
    """L(z) = φ(z) - z (1 - Φ(z)) (Raiffa & Schlaifer 1961, Applied Statistical Decision Theory)."""
    return stats.norm.pdf(z) - z * stats.norm.sf(z)


def test_evpi_equals_normal_loss_integral_within_4_mcse():
    # EVPI = σ L(|μ|/σ) for two strategies with normal incremental net benefit (Raiffa & Schlaifer 1961).
    table = two_strategy_table()
    out = evpi(table, WTP)
    mu, sigma = normal_inb(WTP)
    expected = sigma * unit_normal_loss(np.abs(mu) / sigma)
    assert np.all(np.abs(out["evpi"] - expected) <= 4 * out["mcse"]), (out, expected)
    assert list(out["optimal_strategy"]) == ["usual care", "usual care", "new", "new", "new"]


def test_evpi_mcse_matches_the_loss_variance_of_the_normal():
    # The MCSE is sd(L_i)/sqrt(N) with L_i the per-draw opportunity loss, max(0, -X) when the new
    # strategy is chosen (μ > 0). For X ~ N(μ, σ²), z = μ/σ:
    # E[L] = σ L(z), E[L²] = σ² ((1 + z²)(1 - Φ(z)) - z φ(z)) (moments of a truncated normal, from
    # memory; checked here against scipy.integrate below).
    from scipy.integrate import quad
    wtp = 60_000.0
    mu, sigma = normal_inb(wtp)
    z = mu / sigma
    second = sigma ** 2 * ((1 + z * z) * stats.norm.sf(z) - z * stats.norm.pdf(z))
    # L = σ max(0, -U - z), U standard normal
    by_quad = sigma ** 2 * quad(lambda u: (u + z) ** 2 * stats.norm.pdf(u), -np.inf, -z, epsabs=0, epsrel=1e-10)[0]
    assert second == pytest.approx(by_quad, rel=1e-8)
    variance = second - (sigma * unit_normal_loss(z)) ** 2
    table = two_strategy_table()
    out = evpi(table, [wtp])
    losses = np.maximum(0.0, -(wtp * table.loc[table.strategy == "new", "qalys_discounted"].to_numpy()
                                - table.loc[table.strategy == "new", "costs_discounted"].to_numpy()))
    # the sample variance's standard error: sqrt((m4 - s^4) / N)
    m4 = np.mean((losses - losses.mean()) ** 4)
    se_var = np.sqrt((m4 - losses.var() ** 2) / N)
    assert abs(out["mcse"].iloc[0] ** 2 * N - variance) <= 4 * se_var


def test_acceptability_curve_is_phi_of_mu_over_sigma_within_binomial_mcse():
    # P(INB > 0) = Φ(μ/σ) for normal incremental net benefit (common practice, no source).
    table = two_strategy_table()
    curve = acceptability_curve(table, WTP)
    new = curve[curve.strategy == "new"].reset_index(drop=True)
    mu, sigma = normal_inb(WTP)
    p = stats.norm.cdf(mu / sigma)
    assert np.all(np.abs(new["probability"] - p) <= 4 * np.sqrt(p * (1 - p) / N))
    # the two curves add up to 1 at every willingness to pay (one strategy is best in each draw)
    assert np.allclose(curve.groupby("wtp")["probability"].sum(), 1.0, rtol=0, atol=1e-12)


def test_frontier_follows_the_highest_expected_net_benefit():
    # Fenwick, Claxton & Sculpher 2001: the frontier switches at the ICER of the means (m_C/m_E).
    table = two_strategy_table()
    icer = table.loc[table.strategy == "new", "costs_discounted"].mean() / \
        table.loc[table.strategy == "new", "qalys_discounted"].mean()
    grid = np.array([0.5, 0.9, 1.1, 2.0]) * icer
    front = acceptability_frontier(table, grid)
    assert list(front["strategy"]) == ["usual care", "usual care", "new", "new"]
    curve = acceptability_curve(table, grid)
    for _, row in front.iterrows():
        on_curve = curve[(curve.wtp == row.wtp) & (curve.strategy == row.strategy)]["probability"].iloc[0]
        assert row.probability == on_curve


def test_frontier_can_differ_from_the_highest_curve_when_net_benefit_is_skewed():
    # Fenwick, Claxton & Sculpher 2001: with a right-skewed incremental net benefit the strategy with
    # the higher mean can be cost-effective in fewer than half of the draws. Log-normal INB - 1.2:
    # mean exp(0.5) - 1.2 = 0.449 > 0, median 1 - 1.2 < 0, P(INB > 0) = 1 - Φ(ln 1.2) = 0.43.
    rng = np.random.default_rng(7)
    n = 4000
    inb = np.exp(rng.normal(0, 1, n)) - 1.2
    draws = np.arange(n)
    table = pd.concat([
        pd.DataFrame({"draw": draws, "strategy": "a", "costs_discounted": 0.0, "qalys_discounted": 0.0}),
        pd.DataFrame({"draw": draws, "strategy": "b", "costs_discounted": -inb, "qalys_discounted": 0.0}),
    ])
    front = acceptability_frontier(table, [1.0])
    assert front["strategy"].iloc[0] == "b"
    p = stats.norm.sf(np.log(1.2))
    assert abs(front["probability"].iloc[0] - p) <= 4 * np.sqrt(p * (1 - p) / n)
    assert front["probability"].iloc[0] < 0.5


def test_population_factor_is_the_hand_computed_geometric_sum():
    # Σ_{t=0}^{T-1} P (1 + r)^-t, written out term by term (common practice, no source).
    p, years, r = 12_000.0, 10, 0.035
    by_hand = sum(p / 1.035 ** t for t in range(10))
    assert population_factor(p, years, r) == pytest.approx(by_hand, rel=1e-13)
    assert population_factor(p, years, r, first_year_discounted=True) == pytest.approx(
        sum(p / 1.035 ** t for t in range(1, 11)), rel=1e-13)
    assert population_factor(p, years, 0.0) == p * years
    assert population_factor(p, 1, 1e-12) == pytest.approx(p, rel=1e-12)


def test_population_evpi_scales_per_patient_evpi():
    table = two_strategy_table(n=2000)
    per_patient = evpi(table, WTP)
    pop = population_evpi(per_patient, 5000, 5, 0.035)
    factor = sum(5000 / 1.035 ** t for t in range(5))
    assert np.allclose(pop["population_evpi"], factor * per_patient["evpi"], rtol=1e-13)
    assert np.allclose(pop["population_evpi_mcse"], factor * per_patient["mcse"], rtol=1e-13)


@pytest.mark.parametrize("kwargs, key", [
    (dict(annual_population=0, years=5, discount_rate=0.035), "annual_population"),
    (dict(annual_population=100, years=2.5, discount_rate=0.035), "years"),
    (dict(annual_population=100, years=5, discount_rate=-0.01), "discount_rate"),
    (dict(annual_population=100, years=5, discount_rate=float("nan")), "discount_rate"),
])
def test_population_factor_refuses_bad_input(kwargs, key):
    with pytest.raises(ValidationError) as err:
        population_factor(**kwargs)
    assert err.value.problem.path == (key,)


def test_bad_tables_and_grids_are_refused_naming_the_column():
    table = two_strategy_table(n=10)
    with pytest.raises(ValidationError) as err:
        evpi(table.drop(columns="qalys_discounted"), WTP)
    assert err.value.problem.path == ("per_draw", "qalys_discounted")
    with pytest.raises(ValidationError) as err:
        evpi(table, [-1.0])
    assert err.value.problem.path == ("wtp",)
    mixed = table.assign(method=np.where(table.index % 2, "exact", "simulated"))
    with pytest.raises(ValidationError) as err:
        acceptability_curve(mixed, WTP)
    assert err.value.problem.path == ("per_draw", "method")
    with pytest.raises(ValidationError) as err:
        evpi(table.iloc[:-1], WTP)
    assert err.value.problem.path == ("per_draw", "strategy")
    bad = table.copy()
    bad.loc[3, "costs_discounted"] = np.nan
    with pytest.raises(ValidationError) as err:
        evpi(bad, WTP)
    assert err.value.problem.path == ("per_draw", "costs_discounted")
