"""EVPPI by regression splines (sim.uncertainty), against closed forms and the bounds EVPPI must obey.

The EVPPI estimate is ``(1/N) Σ_i max_d ĝ_d(φ_i) - max_d mean(ĝ_d)`` with ``ĝ_d`` the regression of
the incremental net benefit on the parameters (Strong, Oakley & Brennan 2014, Med Decis Making
34:311-326). Tolerances come from the regression's own fit: its residuals (for the exact cases) and
the standard error of its fitted values, ``σ_ε sqrt(edf/N)`` for a linear smoother with ``edf``
effective degrees of freedom (``E||H ε||²/N = σ² tr(H'H)/N <= σ² edf/N``; Wood 2017, Generalized
Additive Models, from memory).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from sim.problems import ValidationError
from sim.uncertainty import SplineBasis, evpi, evppi, evppi_from_fits, fit_incremental_means


def per_draw(strategies: dict[str, tuple[np.ndarray, np.ndarray]]) -> pd.DataFrame:
    n = len(next(iter(strategies.values()))[0])
    return pd.concat([pd.DataFrame({"draw": np.arange(n), "strategy": s, "costs_discounted": c,
                                    "qalys_discounted": e}) for s, (c, e) in strategies.items()],
                     ignore_index=True)


def unit_normal_loss(z):
    """L(z) = φ(z) - z (1 - Φ(z)) (Raiffa & Schlaifer 1961)."""
    return stats.norm.pdf(z) - z * stats.norm.sf(z)


def test_linear_normal_case_matches_the_normal_loss_of_the_explained_variance():
    # INB = a + b X + ε, X ~ N(0, s_x²) independent of ε: E[INB | X] = a + b X is N(a, (b s_x)²), so
    # EVPPI(X) = s L(|a|/s) with s = |b| s_x (Raiffa & Schlaifer 1961 applied to the conditional mean).
    rng = np.random.default_rng(2026)
    n = 3000
    x, noise, other = rng.normal(0, 1, n), rng.normal(0, 1500, n), rng.normal(0, 1, n)
    a, b = 600.0, 1000.0
    table = per_draw({"a": (np.zeros(n), np.zeros(n)), "b": (-(a + b * x + noise), np.zeros(n))})
    params = pd.DataFrame({"x": x, "other": other})
    fits = fit_incremental_means(table, params, ["x"])
    out = evppi_from_fits(fits, [1.0], se_samples=0)
    expected = b * unit_normal_loss(a / b)
    # error = sampling of X (the estimate is a mean of max(0, -ĝ_i), a > 0) + the fit's error
    fitted_loss = np.maximum(0.0, fits.fitted_costs[:, 1])  # ĝ = -fitted ΔC; loss = max(0, -ĝ)
    diag = fits.diagnostics.set_index("outcome").loc["delta_costs"]
    se = np.sqrt(fitted_loss.var(ddof=1) / n + diag.residual_sd ** 2 * diag.edf / n)
    assert abs(out["evppi"].iloc[0] - expected) <= 4 * se, (out, expected, se)
    assert 0 <= out["evppi"].iloc[0] <= out["evpi"].iloc[0]


def test_parameters_that_determine_net_benefit_have_evppi_equal_to_evpi():
    # With NB a smooth function of (θ1, θ2), E[NB | θ1, θ2] = NB and EVPPI = EVPI. The estimate
    # differs from the EVPI of the same draws by at most the mean over draws of the largest absolute
    # residual (the fitted means equal the sample means: the constant is unpenalised).
    rng = np.random.default_rng(99)
    n = 2000
    t1, t2 = rng.normal(0, 1, n), rng.gamma(4.0, 0.25, n)
    de = 0.05 + 0.04 * np.sin(t1) + 0.02 * t2
    dc = 800 + 300 * t1 * t2 + 100 * t2 ** 2
    other_c, other_e = 500 + 200 * np.tanh(t2 - 1), 0.03 + 0.01 * t1
    table = per_draw({"a": (np.zeros(n), np.zeros(n)), "b": (dc, de), "c": (other_c, other_e)})
    params = pd.DataFrame({"theta1": t1, "theta2": t2, "unused": rng.uniform(size=n)},
                          index=pd.Index(np.arange(n), name="draw"))
    wtp = np.array([10_000.0, 20_000.0, 40_000.0])
    fits = fit_incremental_means(table, params, ["theta1", "theta2"])
    out = evppi_from_fits(fits, wtp, se_samples=0)
    inb, fitted = fits.net_benefits(wtp)
    bound = np.abs(fitted - inb).max(axis=-1).mean(axis=-1)
    assert np.all(out["evpi"] > 0)
    assert np.all(np.abs(out["evppi"] - out["evpi"]) <= bound + 1e-9 * out["evpi"])
    # and the spline reproduces the smooth surface (R² criterion, common practice)
    assert (fits.diagnostics["r_squared"] > 0.999).all(), fits.diagnostics
    # the EVPI reported beside is the one of the draws
    assert np.allclose(out["evpi"], evpi(table, wtp)["evpi"], rtol=1e-12)


def test_additive_structure_recovers_an_additive_net_benefit_of_three_parameters():
    rng = np.random.default_rng(4)
    n = 1500
    t = rng.uniform(-2, 2, (n, 3))
    dc = 1000 * np.exp(t[:, 0] / 2) + 200 * t[:, 1] ** 2 - 300 * t[:, 2]
    table = per_draw({"a": (np.zeros(n), np.zeros(n)), "b": (dc, np.full(n, 0.08))})
    params = pd.DataFrame(t, columns=["p", "q", "r"])
    fits = fit_incremental_means(table, params, ["p", "q", "r"], structure="additive")
    out = evppi_from_fits(fits, [20_000.0], se_samples=0)
    inb, fitted = fits.net_benefits(np.array([20_000.0]))
    bound = np.abs(fitted - inb).max(axis=-1).mean(axis=-1)
    assert abs(out["evppi"].iloc[0] - out["evpi"].iloc[0]) <= bound[0] + 1e-9 * out["evpi"].iloc[0]


def test_an_irrelevant_parameter_has_evppi_near_zero():
    # NB independent of X: E[NB | X] is constant and EVPPI(X) = 0. The estimate is at most the mean
    # absolute deviation of the fitted values from their mean, whose root mean square is about
    # σ_ε sqrt(edf/N) per fitted outcome; 4 of those bound it.
    rng = np.random.default_rng(8)
    n = 2000
    de, dc = rng.normal(0.1, 0.1, n), rng.normal(2000, 1000, n)
    table = per_draw({"a": (np.zeros(n), np.zeros(n)), "b": (dc, de)})
    params = pd.DataFrame({"x": rng.normal(size=n)})
    wtp = np.array([20_000.0])  # mean INB = 0: the hardest case, EVPI is largest here
    fits = fit_incremental_means(table, params, ["x"])
    out = evppi_from_fits(fits, wtp, se_samples=0)
    d = fits.diagnostics.set_index("outcome")
    se = (wtp[0] * d.loc["delta_effects", "residual_sd"] * np.sqrt(d.loc["delta_effects", "edf"] / n)
          + d.loc["delta_costs", "residual_sd"] * np.sqrt(d.loc["delta_costs", "edf"] / n))
    assert 0 <= out["evppi"].iloc[0] <= 4 * se
    assert out["evppi"].iloc[0] < 0.1 * out["evpi"].iloc[0]


def test_evppi_is_between_zero_and_evpi_for_every_group_and_wtp():
    rng = np.random.default_rng(12)
    n = 600
    p = rng.normal(size=(n, 4))
    strategies = {
        "a": (np.zeros(n), np.zeros(n)),
        "b": (1000 + 400 * p[:, 0] + rng.normal(0, 300, n), 0.05 + 0.03 * p[:, 1] + rng.normal(0, 0.02, n)),
        "c": (1500 + 300 * p[:, 2] * p[:, 0] + rng.normal(0, 300, n), 0.07 + 0.02 * p[:, 3] ** 2),
    }
    table = per_draw(strategies)
    params = pd.DataFrame(p, columns=list("wxyz")).assign(draw=np.arange(n))
    grid = np.linspace(0, 60_000, 7)
    for group in (["w"], ["x"], ["w", "y"], ["w", "x", "y"], ["w", "x", "y", "z"]):
        out = evppi(table, params, group, grid, se_samples=0)
        assert (out["evppi"] >= 0).all() and (out["evppi"] <= out["evpi"]).all(), (group, out)
        assert (out["parameters"] == ", ".join(group)).all()


def test_regression_spline_reproduces_a_cubic_exactly():
    # A cubic lies in the null space of the curvature penalty and in the cubic B-spline span, so the
    # fit is exact whatever the smoothing (numpy polynomial as the reference).
    x = np.random.default_rng(1).uniform(-1, 3, 400)
    y = np.polynomial.Polynomial([1.0, -2.0, 0.5, 0.3])(x)
    fit = SplineBasis(x).fit(y)
    assert np.allclose(fit.fitted, y, rtol=0, atol=1e-8 * np.abs(y).max())


def test_evppi_refuses_unknown_parameters_and_missing_draws():
    n = 50
    table = per_draw({"a": (np.zeros(n), np.zeros(n)), "b": (np.ones(n), np.ones(n))})
    params = pd.DataFrame({"x": np.arange(n, dtype=float)})
    with pytest.raises(ValidationError) as err:
        evppi(table, params, ["y"], [1.0])
    assert err.value.problem.path == ("parameters", "y")
    with pytest.raises(ValidationError) as err:
        evppi(table, params.iloc[:-1], ["x"], [1.0])
    assert err.value.problem.path == ("parameters", "draw")
    with pytest.raises(ValidationError) as err:
        evppi(table, pd.DataFrame(np.ones((n, 5)), columns=list("abcde")), list("abcde"), [1.0])
    assert err.value.problem.path == ("parameters",)
    with pytest.raises(ValidationError) as err:
        evppi(table, params, "x", [1.0])
    assert err.value.problem.path == ("group",)
    # a two-parameter tensor basis has at least 4 x 4 columns: fewer than 32 draws are refused
    with pytest.raises(ValidationError) as err:
        evppi(table[table.draw < 20], params.assign(y=np.sin(np.arange(n))), ["x", "y"], [1.0])
    assert err.value.problem.path == ("draws",)


def test_evppi_standard_error_matches_the_spread_over_repeated_regression_noise():
    # The standard error describes the regression step given the draws: keep the parameter values
    # fixed, draw the residual noise afresh R times and compare the spread of the R estimates with
    # the mean reported standard error. The sample standard deviation of R values has relative
    # standard error 1/sqrt(2 (R - 1)) (normal theory, from memory): 4 of those bound the gap.
    rng = np.random.default_rng(17)
    n, reps = 250, 30
    x = rng.normal(size=n)
    params = pd.DataFrame({"x": x})
    estimates, ses = [], []
    for _ in range(reps):
        dc = -(600 + 1000 * x) + rng.normal(0, 1500, n)
        de = 0.01 * x + rng.normal(0, 0.02, n)
        table = per_draw({"a": (np.zeros(n), np.zeros(n)), "b": (dc, de)})
        out = evppi_from_fits(fit_incremental_means(table, params, ["x"]), [0.0, 20_000.0], se_samples=100)
        estimates.append(out["evppi"].to_numpy())
        ses.append(out["evppi_se"].to_numpy())
    spread = np.std(estimates, axis=0, ddof=1)
    reported = np.mean(ses, axis=0)
    assert np.all(np.abs(reported / spread - 1) <= 4 / np.sqrt(2 * (reps - 1))), (reported, spread)
    with pytest.raises(ValidationError) as err:
        evppi_from_fits(fit_incremental_means(table, params, ["x"]), [0.0], se_samples=1)
    assert err.value.problem.path == ("se_samples",)


def test_a_single_strategy_has_no_value_of_information():
    # With one strategy there is no decision: EVPI = EVPPI = 0 (definition).
    n = 100
    rng = np.random.default_rng(21)
    table = per_draw({"only": (rng.normal(size=n), rng.normal(size=n))})
    out = evppi(table, pd.DataFrame({"x": rng.normal(size=n)}), ["x"], [0.0, 1.0])
    assert (out[["evppi", "evppi_se", "evpi"]] == 0).all().all()
