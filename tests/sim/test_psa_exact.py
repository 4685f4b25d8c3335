"""The exact probabilistic analysis: per-draw Kolmogorov results checked against scipy (constant
rates), against the project's forward-equation solver, and against the simulated analysis of the
same draws (the same model solved two ways: per draw the simulated mean differs from the exact value
only by inner-loop Monte Carlo noise, independent between draws, so the difference of the means over
draws has standard error sqrt(sum of mcse_d^2) / D)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
import scipy.integrate
import scipy.linalg

from sim.analysis import OUTCOMES
from sim.hazards import Exponential
from sim.model import BackgroundMortality, FixedAge, Population
from sim.psa.cohort_draws import CycleMethod, cycle_methods, cycle_per_draw
from sim.psa.draws_run import models_for_draws, simulated_vectorised
from sim.psa.exact_draws import constant_intensities, exact_constant_draws, exact_per_draw
from sim.reference import cohort_trace, exact_outcomes, trace_outcomes
from sim.problems import ValidationError

from .test_psa_fixtures import apply_values, draws_table, markov_model


def _scipy_outcomes(model, strategy, quadrature=False):
    """Outcomes of the constant generator Q (one sex, fixed entry age) from scipy.linalg.expm: the
    discounted occupancy integral int_0^T exp(-delta t) p0 expm(Q t) dt as the upper right block of
    expm([[Q - delta I, I], [0, 0]] T) (Van Loan 1978, IEEE Trans Autom Control 23(3):395-404), or,
    with ``quadrature``, by scipy.integrate.quad_vec of p0 expm(Q t) exp(-delta t) itself."""
    names = model.state_names
    q = np.zeros((len(names), len(names)))
    rates = {}
    for exits in model.resolve(strategy):
        for ex in exits:
            r = float(ex.hazards[0].hazard(0.0))
            q[ex.source, ex.target] += r
            q[ex.source, ex.source] -= r
            rates[ex.index] = (ex.source, r)
    p0 = model.population.initial_matrix(names)[0]
    T = model.horizon.value

    def integral(d):
        delta = np.log1p(d)
        if quadrature:
            return scipy.integrate.quad_vec(lambda t: p0 @ scipy.linalg.expm(q * t) * np.exp(-delta * t), 0.0, T,
                                            epsabs=1e-12, epsrel=1e-11)[0]
        n = q.shape[0]
        block = np.zeros((2 * n, 2 * n))
        block[:n, :n] = q - delta * np.eye(n)
        block[:n, n:] = np.eye(n)
        return p0 @ scipy.linalg.expm(block * T)[:n, n:]

    val = model.valuation
    y, y_e, y_c = integral(0.0), integral(val.discount_effects), integral(val.discount_costs)
    u, c = model.state_values(strategy)
    cost = model.exit_costs(strategy)
    alive = np.array([not s.absorbing for s in model.states])
    one_off = sum(cost[k] * r * y[s] for k, (s, r) in rates.items())
    one_off_d = sum(cost[k] * r * y_c[s] for k, (s, r) in rates.items())
    return {"life_years": y[alive].sum(), "life_years_discounted": y_e[alive].sum(), "qalys": y @ u,
            "qalys_discounted": y_e @ u, "costs": y @ c + one_off, "costs_discounted": y_c @ c + one_off_d}


def test_constant_rates_match_scipy_expm():
    model = markov_model()
    models = models_for_draws(model, draws_table(4), apply_values)
    assert all(constant_intensities(m) for m in models)
    table = exact_constant_draws(models, [10, 11, 12, 13])
    assert list(table["draw"].unique()) == [10, 11, 12, 13]
    for i, m in enumerate(models):
        for s in m.strategy_names:
            row = table[(table["draw"] == 10 + i) & (table["strategy"] == s)].iloc[0]
            assert row["method"] == "exact" and row["patients"] == 0
            ref = _scipy_outcomes(m, s)
            for o in OUTCOMES:
                assert row[o] == pytest.approx(ref[o], rel=1e-12)
                assert row[f"{o}_mcse"] == 0.0
    ref = _scipy_outcomes(models[0], "new", quadrature=True)
    row = table[(table["draw"] == 10) & (table["strategy"] == "new")].iloc[0]
    for o in OUTCOMES:
        assert row[o] == pytest.approx(ref[o], rel=1e-9)


def test_sex_specific_constant_rates_match_the_forward_equations():
    base = markov_model(horizon=30.0)
    model = dataclasses.replace(base, population=Population(FixedAge(60.0), "healthy", {"female": 0.55, "male": 0.45}),
                                background=BackgroundMortality("dead", {"female": Exponential(0.011),
                                                                        "male": Exponential(0.017)}))
    models = models_for_draws(model, draws_table(3), apply_values)
    table = exact_per_draw(models, range(3))
    for d, m in enumerate(models):
        ref = exact_outcomes(m).pivot(index="strategy", columns="outcome", values="value")
        for s in m.strategy_names:
            row = table[(table["draw"] == d) & (table["strategy"] == s)].iloc[0]
            for o in OUTCOMES:  # the ODE solver's tolerance is rtol 1e-10
                assert row[o] == pytest.approx(ref.loc[s, o], rel=1e-8)


def test_time_varying_hazards_are_solved_exactly():
    model = markov_model(background=True)  # Gompertz background mortality on attained age
    models = models_for_draws(model, draws_table(2), apply_values)
    assert not constant_intensities(models[0])
    with pytest.raises(ValueError, match="constant"):
        exact_constant_draws(models, [0, 1])
    table = exact_per_draw(models, [0, 1])
    ref = exact_outcomes(models[1]).pivot(index="strategy", columns="outcome", values="value")
    row = table[(table["draw"] == 1) & (table["strategy"] == "new")].iloc[0]
    assert row["qalys_discounted"] == pytest.approx(ref.loc["new", "qalys_discounted"], rel=1e-9)


@pytest.mark.parametrize("background", [False, True])
def test_simulated_and_exact_means_agree_within_4_mcse(background):
    model = markov_model(background=background)
    draws = draws_table(40, seed=17)
    models = models_for_draws(model, draws, apply_values)
    sim = simulated_vectorised(models, draws.index, 400, seed=123)
    ex = exact_per_draw(models, draws.index)
    for s in model.strategy_names:
        a = sim[sim["strategy"] == s].set_index("draw")
        b = ex[ex["strategy"] == s].set_index("draw")
        for o in ("life_years", "qalys_discounted", "costs_discounted"):
            se = np.sqrt((a[f"{o}_mcse"] ** 2).sum()) / len(a)
            assert abs(a[o].mean() - b[o].mean()) <= 4 * se, (s, o, a[o].mean(), b[o].mean(), se)


def test_cycle_based_rows_are_the_cohort_traces():
    model = markov_model()
    models = models_for_draws(model, draws_table(3), apply_values)
    methods = cycle_methods(["competing-exit", "matrix-exponential"], [1.0, 0.25], ["half-cycle", "start"])
    table = cycle_per_draw(models, [5, 6, 7], methods)
    assert len(table) == 3 * 2 * len(methods)
    row = table[(table["draw"] == 6) & (table["strategy"] == "new")
                & (table["method"] == "matrix-exponential|0.25|half-cycle")].iloc[0]
    ref = trace_outcomes(cohort_trace(models[1], "new", 0.25, "matrix-exponential"), "half-cycle")
    for o in OUTCOMES:
        assert row[o] == ref[o]
    # with quarter-year cycles and the half-cycle correction the trace is close to the exact value
    # (error O(h^2): Elbasha & Chhatwal 2016, Med Decis Making 36(1):115-131)
    exact = exact_per_draw(models, [5, 6, 7])
    e = exact[(exact["draw"] == 6) & (exact["strategy"] == "new")].iloc[0]
    assert row["life_years"] == pytest.approx(e["life_years"], rel=2e-3)


def test_cycle_methods_are_checked():
    with pytest.raises(ValidationError, match="conversion"):
        CycleMethod("rounded", 1.0, "half-cycle")
    with pytest.raises(ValidationError, match="cycle_length"):
        CycleMethod("competing-exit", 0.0, "half-cycle")
    with pytest.raises(ValidationError, match="correction"):
        CycleMethod("competing-exit", 1.0, "midway")
    assert CycleMethod("competing-exit", 1, "start").label == "competing-exit|1.0|start"


@pytest.mark.parametrize("weibull,spread", [(False, True), (True, False)])
def test_stacked_forward_equations_match_the_reference_solver(weibull, spread):
    # Gompertz background on attained age with an entry-age spread (48 strata per sex), hazard ratios
    # on the progression hazard: every draw and strategy in one ODE system, against the project's
    # forward-equation solver draw by draw (its tolerance rtol 1e-10)
    from sim.psa.exact_stacked import exact_stacked, stackable

    from .test_psa_fixtures import entry_spread

    model = markov_model(background=True, weibull=weibull, entry=entry_spread() if spread else None)
    models = models_for_draws(model, draws_table(5), apply_values)
    assert stackable(models, model.strategy_names)
    table = exact_stacked(models, range(5))
    assert table.equals(exact_per_draw(models, range(5)))
    for d in (0, 4):
        ref = exact_outcomes(models[d]).pivot(index="strategy", columns="outcome", values="value")
        for s in model.strategy_names:
            row = table[(table["draw"] == d) & (table["strategy"] == s)].iloc[0]
            for o in OUTCOMES:
                assert row[o] == pytest.approx(ref.loc[s, o], rel=1e-8)


@pytest.mark.parametrize("background", [False, True])
def test_a_draws_exact_row_does_not_depend_on_its_block(background):
    # constant rates (one matrix-exponential stack per draw) and a Gompertz background (one ODE
    # system per draw): the same bits alone and among other draws
    model = markov_model(background=background)
    models = models_for_draws(model, draws_table(6), apply_values)
    together = exact_per_draw(models, range(6))
    alone = pd.concat([exact_per_draw(models[d:d + 1], [d]) for d in range(6)], ignore_index=True)
    pd.testing.assert_frame_equal(together, alone, check_exact=True)


def test_a_life_table_goes_to_the_reference_solver():
    from sim.hazards import PiecewiseConstant
    from sim.psa.exact_stacked import stackable

    base = markov_model(horizon=15.0)
    table = PiecewiseConstant((0.0, 65.0, 70.0), (0.01, 0.02, 0.04))  # invented rates by attained age
    model = dataclasses.replace(base, background=BackgroundMortality("dead", {"all": table}))
    models = models_for_draws(model, draws_table(2), apply_values)
    assert not stackable(models, model.strategy_names)
    exact = exact_per_draw(models, [0, 1])
    ref = exact_outcomes(models[1]).pivot(index="strategy", columns="outcome", values="value")
    assert exact[(exact["draw"] == 1) & (exact["strategy"] == "usual")].iloc[0]["qalys"] == ref.loc["usual", "qalys"]
