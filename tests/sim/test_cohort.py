"""Cycle-based cohort traces against closed forms, scipy.linalg.expm and the exact solution."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, linalg

from sim.reference.cohort import CohortError, _jump_over, cohort_trace, quadrature_weights, trace_outcomes
from sim.reference.exact import solve_exact
from sim.hazards import Exponential, Gompertz, Weibull
from sim.reference.matrix_exp import expm_batched
from sim.model.multistate import Clock, Horizon, Model, State, Transition
from sim.model.population import FixedAge, Population, UniformAge
from sim.reference.study import observed_order
from sim.model.valuation import Valuation

from .conftest import single_exit
from .test_exact import Q_CONST, _constant_model

METHODS = ("per-transition", "competing-exit", "matrix-exponential")


def test_expm_batched_matches_scipy():
    rng = np.random.default_rng(3)
    stack = rng.normal(size=(7, 5, 5)) * np.array([0.01, 0.3, 1.0, 4.0, 20.0, 0.0, 60.0])[:, None, None]
    ref = np.array([linalg.expm(a) for a in stack])
    np.testing.assert_allclose(expm_batched(stack), ref, rtol=1e-11, atol=1e-14)
    with pytest.raises(ValueError, match="square matrices"):
        expm_batched(np.zeros((3, 2)))


@pytest.mark.parametrize("size", [1e-7, 1e-3, 0.02, 0.1, 0.4])
def test_expm_with_fewer_terms_for_small_generators_matches_scipy(size):
    # each stack is scaled alike, so the short Taylor series of small norms is what runs
    from sim.reference.matrix_exp import expm_rows

    rng = np.random.default_rng(11)
    q = rng.uniform(0.0, 1.0, size=(40, 4, 4))
    q[:, np.arange(4), np.arange(4)] = 0.0
    q[:, np.arange(4), np.arange(4)] = -q.sum(axis=2)  # generator: rows sum to 0
    stack = q * size / np.abs(q).sum(axis=1).max()  # largest 1-norm = size
    ref = np.array([linalg.expm(a) for a in stack])
    np.testing.assert_allclose(expm_batched(stack), ref, rtol=1e-13, atol=1e-16)
    rows = rng.integers(0, 4, size=40)
    np.testing.assert_allclose(expm_rows(stack, rows), ref[np.arange(40), rows], rtol=1e-13, atol=1e-16)


def test_three_state_closed_form():
    # Illness-death without recovery, constant intensities l12, l13, l23 (Jones, Epstein &
    # Garcia-Mochon 2017, Med Decis Making 37(7):779-789, closed forms for the three-state model):
    # P11 = e^{-(l12+l13)t}; P12 = l12 / (l12 + l13 - l23) (e^{-l23 t} - e^{-(l12+l13)t}); P22 = e^{-l23 t}.
    l12, l13, l23, t = 0.15, 0.03, 0.4, 2.5
    q = np.array([[-(l12 + l13), l12, l13], [0.0, -l23, l23], [0.0, 0.0, 0.0]])
    p = expm_batched(q * t)
    p11 = np.exp(-(l12 + l13) * t)
    p12 = l12 / (l12 + l13 - l23) * (np.exp(-l23 * t) - np.exp(-(l12 + l13) * t))
    np.testing.assert_allclose(p[0], [p11, p12, 1 - p11 - p12], rtol=1e-13)
    np.testing.assert_allclose(p[1], [0, np.exp(-l23 * t), 1 - np.exp(-l23 * t)], rtol=1e-13)
    # and the matrix-exponential trace of that model reproduces it at the first cycle boundary
    model = Model(states=(State("1"), State("2"), State("3", absorbing=True)),
                  transitions=(Transition("a", "1", "2", Exponential(l12)), Transition("b", "1", "3", Exponential(l13)),
                               Transition("c", "2", "3", Exponential(l23))),
                  population=Population(FixedAge(60), "1"), horizon=Horizon(5.0))
    tr = cohort_trace(model, "base", t, "matrix-exponential")
    np.testing.assert_allclose(tr.occupancy[0, 1], [p11, p12, 1 - p11 - p12], rtol=1e-13)


def test_competing_exit_probabilities_match_expm():
    # Two exits to two different absorbing states: expm(h Q) row 0 equals the competing-exit formula
    # p_k = r_k / sum r (1 - exp(-h sum r)) (docs/methods.md, 'Cycle-based cohort traces'; scipy.linalg.expm reference).
    r1, r2, h = 0.3, 0.7, 0.5
    model = Model(states=(State("alive"), State("d1", absorbing=True), State("d2", absorbing=True)),
                  transitions=(Transition("x", "alive", "d1", Exponential(r1)), Transition("y", "alive", "d2", Exponential(r2))),
                  population=Population(FixedAge(50), "alive"), horizon=Horizon(h))
    q = np.array([[-(r1 + r2), r1, r2], [0, 0, 0], [0, 0, 0.0]])
    ref = linalg.expm(q * h)[0]
    comp = cohort_trace(model, "base", h, "competing-exit").occupancy[0, 1]
    np.testing.assert_allclose(comp, ref, rtol=1e-13)
    # per-transition conversion is biased: its "stay" is short by exactly (1 - e^{-r1 h})(1 - e^{-r2 h})
    per = cohort_trace(model, "base", h, "per-transition").occupancy[0, 1]
    np.testing.assert_allclose(ref[0] - per[0], (1 - np.exp(-r1 * h)) * (1 - np.exp(-r2 * h)), rtol=1e-12)
    assert ref[0] - per[0] > 0.04
    # with long cycles the per-transition "stay" goes negative: kept (rows sum to 1) and reported
    long = cohort_trace(Model(**{**model.__dict__, "horizon": Horizon(3.0)}), "base", 1.5, "per-transition")
    assert long.negative_stay == 2 and long.occupancy[0, 1, 0] < 0
    np.testing.assert_allclose(long.occupancy[0, 1].sum(), 1.0, rtol=1e-14)


def test_matrix_exponential_trace_is_exact_for_constant_intensities():
    # Constant intensities: the matrix-exponential trace equals expm(t Q) and the Kolmogorov
    # solution at every cycle boundary (to 1e-8).
    h = 0.5
    model = _constant_model(horizon=12.0)
    tr = cohort_trace(model, "base", h, "matrix-exponential")
    times = np.arange(0, 12.0 + 1e-9, h)
    exact = solve_exact(model, times).occupancy.pivot(index="time", columns="state", values="probability")
    for k, t in enumerate(times):
        np.testing.assert_allclose(tr.occupancy[0, k], linalg.expm(t * Q_CONST)[0], rtol=0, atol=1e-12)
        np.testing.assert_allclose(tr.occupancy[0, k], exact.loc[t, ["healthy", "sick", "dead"]], rtol=0, atol=1e-8)
    # with two exits from "sick", per-transition and competing-exit conversions are measurably off
    for method in ("per-transition", "competing-exit"):
        other = cohort_trace(model, "base", h, method).occupancy[0, -1]
        assert np.abs(other - tr.occupancy[0, -1]).max() > 1e-3


def test_jump_over_mass_matches_expm():
    # Probability of two or more moves within dt from state 1 of 1 -> 2 -> D2, 1 -> D1: the mass in D2
    # after dt, from scipy.linalg.expm.
    a, b, c = 0.7, 0.4, 0.9
    q = np.array([[-(a + b), a, b, 0], [0, -c, 0, c], [0, 0, 0, 0], [0, 0, 0, 0.0]])
    for dt in (0.1, 1.0, 3.0):
        np.testing.assert_allclose(_jump_over(q[None], np.array([dt]))[0][0], linalg.expm(q * dt)[0, 3], rtol=1e-12)


@pytest.mark.parametrize("method", METHODS)
def test_constant_hazard_annual_cycles_geometric_series(method):
    # One exit at constant rate r, annual cycles, 20 years: S_k = e^{-rk}, so life years are the
    # geometric series sum_{k<20} e^{-rk} = (1 - e^{-20r}) / (1 - e^{-r}) counting at cycle starts,
    # e^{-r} times that at cycle ends, their mean with the half-cycle correction; the exact value is
    # (1 - e^{-rT}) / r (common practice, no source: geometric series and integral of e^{-rt}).
    r, T = 0.1, 20
    model = single_exit(Exponential(r), horizon=float(T))
    tr = cohort_trace(model, "base", 1.0, method)
    start = (1 - np.exp(-T * r)) / (1 - np.exp(-r))
    end = np.exp(-r) * start
    got = {c: trace_outcomes(tr, c)["life_years"] for c in ("start", "end", "half-cycle")}
    np.testing.assert_allclose([got["start"], got["end"], got["half-cycle"]], [start, end, (start + end) / 2], rtol=1e-13)
    exact = (1 - np.exp(-r * T)) / r
    assert abs(got["half-cycle"] - exact) < abs(got["start"] - exact)


def test_discount_factors_nice_and_us_panel_rates():
    # Discount factor after t years at annual rate d: (1 + d)^-t; 3.5% (NICE health technology
    # evaluations manual 2022) and 3% (Sanders et al. 2016, JAMA 316(10):1093-1103). A cohort that
    # never dies over 10 annual cycles, counted at cycle starts, accrues sum_{k<10} (1 + d)^-k.
    model = Model(states=(State("alive"), State("dead", absorbing=True)),
                  transitions=(Transition("death", "alive", "dead", Exponential(0.0)),),
                  population=Population(FixedAge(50), "alive"), horizon=Horizon(10.0))
    for d in (0.035, 0.03):
        m = Model(**{**model.__dict__, "valuation": Valuation(utilities={"alive": 1.0}, discount_costs=d,
                                                               discount_effects=d)})
        out = trace_outcomes(cohort_trace(m, "base", 1.0, "competing-exit"), "start")
        np.testing.assert_allclose(out["qalys_discounted"], sum((1 + d) ** -k for k in range(10)), rtol=1e-13)
        # continuous-time value: integral of (1 + d)^-t over [0, 10] = (1 - (1 + d)^-10) / ln(1 + d)
        from sim.reference.exact_outcomes import exact_outcomes

        ex = exact_outcomes(m).set_index("outcome")["value"]
        np.testing.assert_allclose(ex["qalys_discounted"], (1 - (1 + d) ** -10) / np.log1p(d), rtol=1e-9)
    np.testing.assert_allclose(1.035**-10, 0.7089188, rtol=1e-6)  # value from the formula above


def test_correction_orders_on_smooth_survival():
    # Single Gompertz exit: with the cumulative-hazard rule the trace is exact at the cycle
    # boundaries (S(t+h)/S(t) = exp(-(H(t+h) - H(t)))), so the life-years error is the quadrature
    # error of the within-cycle correction: order 1 (end of cycle), 2 (half-cycle / trapezoid),
    # 4 (Simpson) (Elbasha & Chhatwal 2016, Med Decis Making 36(1):115-131).
    b, g, a0, T = 5e-4, 0.09, 60.0, 24.0
    model = single_exit(Gompertz(b, g), Clock.AGE, age=a0, horizon=T)
    exact = integrate.quad(lambda t: np.exp(-(b / g) * (np.exp(g * (a0 + t)) - np.exp(g * a0))), 0, T,
                           epsabs=1e-14, epsrel=1e-13)[0]
    hs = np.array([2.0, 1.0, 0.5, 0.25])
    expected = {"end": 1.0, "half-cycle": 2.0, "simpson": 4.0}
    for corr, p in expected.items():
        err = [trace_outcomes(cohort_trace(model, "base", h, "matrix-exponential"), corr)["life_years"] - exact
               for h in hs]
        assert abs(observed_order(hs, np.array(err), 1e-13) - p) < 0.25, (corr, err)


def test_quadrature_weights_integrate_cubics_with_simpson():
    # Simpson's rules are exact for cubics (common practice, no source); partial last cycles fall back
    # to the trapezoid.
    for n_cycles in (2, 3, 4, 5, 7):
        times = np.arange(n_cycles + 1)[None, :] * 0.5
        q = quadrature_weights(times, 0.5, "simpson")[0]
        np.testing.assert_allclose((q * times[0] ** 3).sum(), times[0, -1] ** 4 / 4, rtol=1e-13)


def test_strata_remove_the_mean_age_bias():
    # Gompertz on attained age, entry ages U(40, 80): tracing at the mean entry age is biased (the
    # survival curve is not linear in age); strata follow the exact population average.
    model = Model(states=(State("alive"), State("dead", absorbing=True)),
                  transitions=(Transition("death", "alive", "dead", Gompertz(4e-5, 0.1), Clock.AGE),),
                  population=Population(UniformAge(40.0, 80.0), "alive"), horizon=Horizon(30.0))
    exact = solve_exact(model, [1.0]).life_expectancy["years"].iloc[0]
    strata = trace_outcomes(cohort_trace(model, "base", 0.25, "matrix-exponential", entry_ages="strata"), "simpson")
    mean = trace_outcomes(cohort_trace(model, "base", 0.25, "matrix-exponential", entry_ages="mean-age"), "simpson")
    assert abs(strata["life_years"] - exact) < 1e-6
    assert abs(mean["life_years"] - exact) > 0.01 > 1000 * abs(strata["life_years"] - exact)


def test_tunnel_states_for_time_in_state_clock():
    # A Weibull on the time-in-state clock in the initial state is the same as on time since entry
    # (the patient entered that state at time 0): with enough tunnel states the traces agree.
    def model(clock):
        return Model(states=(State("sick"), State("dead", absorbing=True)),
                     transitions=(Transition("death", "sick", "dead", Weibull(1.6, 5.0), clock),),
                     population=Population(FixedAge(50), "sick"), horizon=Horizon(6.0))
    with pytest.raises(CohortError, match=r"\['death'\].*time-in-state clock.*tunnel_cycles"):
        cohort_trace(model(Clock.STATE), "base", 0.5, "competing-exit")
    for method in METHODS:
        a = cohort_trace(model(Clock.STATE), "base", 0.5, method, tunnel_cycles=12)
        b = cohort_trace(model(Clock.ENTRY), "base", 0.5, method)
        np.testing.assert_allclose(a.occupancy, b.occupancy, rtol=0, atol=1e-14)


def test_bad_arguments():
    model = single_exit(Exponential(0.1))
    with pytest.raises(CohortError, match="conversion must be one of .* got 'linear'"):
        cohort_trace(model, "base", 1.0, "linear")
    with pytest.raises(CohortError, match="cycle_length must be a positive number of years, got 0"):
        cohort_trace(model, "base", 0, "competing-exit")
    with pytest.raises(CohortError, match="correction must be one of"):
        trace_outcomes(cohort_trace(model, "base", 1.0), "middle")
