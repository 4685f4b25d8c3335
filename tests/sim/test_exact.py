"""Exact Kolmogorov reference against closed forms, scipy.linalg.expm and scipy.integrate.quad."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, linalg

from sim.reference.exact import NoExactSolution, occupancy_for_entry, solve_exact
from sim.hazards import Exponential, Gompertz, Weibull
from sim.model.multistate import BackgroundMortality, Clock, Horizon, Model, State, Strategy, Transition
from sim.model.population import FixedAge, Population, UniformAge

from .conftest import illness_death, single_exit


def _constant_model(horizon=12.0):
    """Illness-death with recovery, all intensities constant (the clocks do not matter)."""
    return Model(
        states=(State("healthy"), State("sick"), State("dead", absorbing=True)),
        transitions=(
            Transition("onset", "healthy", "sick", Exponential(0.12), Clock.ENTRY),
            Transition("recovery", "sick", "healthy", Exponential(0.3), Clock.STATE),
            Transition("disease death", "sick", "dead", Exponential(0.2), Clock.AGE),
        ),
        background=BackgroundMortality("dead", {"all": Exponential(0.02)}),
        population=Population(FixedAge(50.0), "healthy"),
        horizon=Horizon(horizon),
        strategies=(Strategy("base"),),
    )


Q_CONST = np.array([[-(0.12 + 0.02), 0.12, 0.02],
                    [0.3, -(0.3 + 0.2 + 0.02), 0.2 + 0.02],
                    [0.0, 0.0, 0.0]])


def test_constant_intensities_match_matrix_exponential():
    # P(t) = expm(t Q) for constant intensities (docs/methods.md, 'Exact solution'; scipy.linalg.expm reference).
    times = np.array([0.0, 0.5, 1.0, 3.0, 7.5, 12.0])
    occ = solve_exact(_constant_model(), times).occupancy.pivot(index="time", columns="state", values="probability")
    for t in times:
        expected = linalg.expm(t * Q_CONST)[0]
        np.testing.assert_allclose(occ.loc[t, ["healthy", "sick", "dead"]].to_numpy(), expected, rtol=0, atol=1e-9)


def test_time_in_state_matches_van_loan_integral():
    # Integral of expm(t Q) over [0, T] from the block matrix expm([[Q, I], [0, 0]] T) (Van Loan 1978,
    # IEEE Trans Autom Control 23(3):395-404); discounted: the same with Q - delta I.
    T, d = 12.0, 0.035
    for rate, col in ((0.0, "years"), (d, "discounted_years")):
        delta = np.log1p(rate)
        n = 3
        block = np.zeros((2 * n, 2 * n))
        block[:n, :n] = Q_CONST - delta * np.eye(n)
        block[:n, n:] = np.eye(n)
        integral = linalg.expm(block * T)[:n, n:][0]
        tis = solve_exact(_constant_model(T), [T], discount_rate=d).time_in_state
        np.testing.assert_allclose(tis[col].to_numpy(), integral, rtol=1e-9, atol=1e-10)
        le = solve_exact(_constant_model(T), [T], discount_rate=d).life_expectancy[col].iloc[0]
        np.testing.assert_allclose(le, integral[:2].sum(), rtol=1e-9)


def test_gompertz_on_age_closed_form_and_life_expectancy():
    # S(t | a0) = exp(-(b/g)(exp(g (a0 + t)) - exp(g a0))) (Gompertz survival, docs/methods.md, 'Hazards and survival');
    # restricted life expectancy = integral of S over [0, T] by scipy.integrate.quad.
    b, g, a0, T = 4e-5, 0.09, 65.0, 35.0
    model = single_exit(Gompertz(rate=b, shape=g), Clock.AGE, age=a0, horizon=T)
    times = np.array([1.0, 10.0, 20.0, 35.0])
    sol = solve_exact(model, times)
    surv = lambda t: np.exp(-(b / g) * (np.exp(g * (a0 + t)) - np.exp(g * a0)))  # noqa: E731
    alive = sol.occupancy[sol.occupancy["state"] == "alive"]["probability"].to_numpy()
    np.testing.assert_allclose(alive, surv(times), rtol=1e-8)
    le_ref = integrate.quad(surv, 0, T, epsabs=1e-13, epsrel=1e-12)[0]
    np.testing.assert_allclose(sol.life_expectancy["years"].iloc[0], le_ref, rtol=1e-8)


def test_weibull_singular_at_zero_is_handled():
    # Weibull with shape < 1 has an infinite hazard at t = 0; S(t) = exp(-(t/scale)^shape).
    k, lam = 0.6, 8.0
    model = single_exit(Weibull(shape=k, scale=lam), Clock.ENTRY, horizon=20.0)
    times = np.array([0.01, 1.0, 5.0, 20.0])
    sol = solve_exact(model, times)
    alive = sol.occupancy[sol.occupancy["state"] == "alive"]["probability"].to_numpy()
    np.testing.assert_allclose(alive, np.exp(-(times / lam) ** k), rtol=1e-8)


def test_average_over_uniform_entry_ages():
    # E over A ~ U(40, 80) of S(t | A) for a Gompertz on age, by scipy.integrate.quad over A.
    b, g, t = 4e-5, 0.09, 15.0
    model = Model(states=(State("alive"), State("dead", absorbing=True)),
                  transitions=(Transition("death", "alive", "dead", Gompertz(b, g), Clock.AGE),),
                  population=Population(UniformAge(40.0, 80.0), "alive"), horizon=Horizon(30.0))
    sol = solve_exact(model, [t])
    alive = sol.occupancy.query("state == 'alive'")["probability"].iloc[0]
    ref = integrate.quad(lambda a: np.exp(-(b / g) * (np.exp(g * (a + t)) - np.exp(g * a))), 40, 80)[0] / 40
    np.testing.assert_allclose(alive, ref, rtol=1e-8)


def test_age_horizon_per_entry_age():
    # Horizon at attained age 90 with entry at 70 -> 20 years of follow-up.
    model_age = single_exit(Exponential(0.1), age=70.0)
    model_age = Model(states=model_age.states, transitions=model_age.transitions,
                      population=model_age.population, horizon=Horizon(90.0, "age"))
    le = solve_exact(model_age, [1.0]).life_expectancy["years"].iloc[0]
    np.testing.assert_allclose(le, (1 - np.exp(-0.1 * 20)) / 0.1, rtol=1e-9)  # integral of e^{-rt} over [0, 20]


def test_semi_markov_has_no_exact_solution():
    model = Model(states=(State("well"), State("sick"), State("dead", absorbing=True)),
                  transitions=(Transition("onset", "well", "sick", Exponential(0.1)),
                               Transition("death", "sick", "dead", Weibull(1.5, 4.0), Clock.STATE)),
                  population=Population(FixedAge(50), "well"), horizon=Horizon(10.0))
    assert not model.is_markov
    with pytest.raises(NoExactSolution, match=r"\['death'\].*time-in-state clock.*semi-Markov"):
        solve_exact(model, [1.0])


def test_occupancy_rows_sum_to_one():
    model = illness_death()
    occ, years, _ = occupancy_for_entry(model, "base", 55.0, 0, np.linspace(0, 30, 7), 30.0)
    np.testing.assert_allclose(occ.sum(axis=1), 1.0, rtol=0, atol=1e-10)
    np.testing.assert_allclose(years.sum(), 30.0, rtol=1e-10)  # total time in all states = horizon


def test_age_horizon_with_varying_entry_ages():
    # Life expectancy to attained age 95 for entry ages U(50, 80) under a Gompertz on age:
    # E_A[ integral_0^{95 - A} S(t | A) dt ] by nested scipy.integrate.quad (each patient has their
    # own follow-up time, read from the dense solution at that time).
    b, g, top = 4e-5, 0.09, 95.0
    model = Model(states=(State("alive"), State("dead", absorbing=True)),
                  transitions=(Transition("death", "alive", "dead", Gompertz(b, g), Clock.AGE),),
                  population=Population(UniformAge(50.0, 80.0), "alive"), horizon=Horizon(top, "age"))
    le = solve_exact(model, [1.0], n_nodes=32).life_expectancy["years"].iloc[0]

    def inner(a):
        return integrate.quad(lambda t: np.exp(-(b / g) * (np.exp(g * (a + t)) - np.exp(g * a))), 0, top - a,
                              epsabs=1e-13, epsrel=1e-12)[0]

    ref = integrate.quad(inner, 50, 80, epsabs=1e-12, epsrel=1e-11)[0] / 30
    np.testing.assert_allclose(le, ref, rtol=1e-8)
