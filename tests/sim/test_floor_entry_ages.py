"""``at_least_background`` on the time-since-entry clock when entry ages vary (issue 15 item 5): for a
patient who entered at age ``a`` the transition's hazard is ``max(h_fit(t), h_bg(a + t))``, ``t`` the
time since entry (docs/methods.md, 'The larger of a fit and the background hazard').

References outside the project:

- the exact solver against ``scipy.integrate.quad``: survival ``exp(-∫ (max(h_fit, h_bg) + h_bg))`` per
  entry age (the background death that competes from every living state adds ``h_bg`` again;
  competing risks, Beyersmann et al. 2009, Stat Med 28:956-971), averaged over the uniform entry-age
  distribution by an outer ``quad``;
- the engine against the exact solver within 4 binomial Monte Carlo standard errors (fixed seeds);
- the per-patient sampler against the definition of the conditional time, ``H_a(x + T) - H_a(x) = E``
  (Bender, Augustin & Blettner 2005, Stat Med 24(11):1713-1723), ``H_a`` integrated by ``quad``.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, optimize, stats

from sim.engine import simulate, simulate_draws, simulate_range
from sim.hazards import (KERNEL_ERRSTATE, AtLeastHazard, EntryAgeFloor, Exponential, Gompertz, LogNormal,
                         PiecewiseConstant, ShiftedClock, Weibull)
from sim.model import (BackgroundMortality, Clock, EmpiricalAge, FixedAge, Horizon, Model, ModelError, NormalAge,
                       Population, State, Transition, UniformAge, transition_effect_words)
from sim.reference.cohort import cohort_trace
from sim.reference.exact import population_pairs, solve_exact

from .conftest import FULL, simulate_within_4_mcse

# invented numbers: a falling Weibull disease-death hazard fitted on time since entry, and a Gompertz
# background on attained age with the adult slope near 0.085/year (Finch, Pike & Witten 1990, Science
# 249:902-905). Entering at 60 the fit falls below the background about 17 years after entry; at 75,
# about 7 years after.
FIT = Weibull(shape=0.6, scale=5.0)
BG = Gompertz(rate=1e-4, shape=0.085)
BANDS = np.arange(0.0, 111.0, 1.0)  # a life table of 1-year bands built from the same law
LIFE_TABLE = PiecewiseConstant(tuple(BANDS), tuple(1e-4 * np.exp(0.085 * (BANDS + 0.5))))
LOW, HIGH, FOLLOW = 55.0, 80.0, 30.0


def two_state(entry_age, background=BG, clock: Clock = Clock.ENTRY) -> Model:
    return Model(
        states=(State("alive"), State("dead", absorbing=True)),
        transitions=(Transition("disease death", "alive", "dead", FIT, clock, at_least_background=True),),
        background=BackgroundMortality("dead", {"all": background}, Clock.AGE),
        population=Population(entry_age, "alive"),
        horizon=Horizon(FOLLOW, "time"),
    )


def illness_death(entry_age=UniformAge(LOW, HIGH)) -> Model:
    """healthy -> sick -> dead with the floored disease death leaving 'sick' (entered during follow-up,
    so the engine samples it from a time since entry x > 0); invented numbers."""
    return Model(
        states=(State("healthy"), State("sick"), State("dead", absorbing=True)),
        transitions=(
            Transition("onset", "healthy", "sick", Exponential(0.15), Clock.ENTRY),
            Transition("disease death", "sick", "dead", FIT, Clock.ENTRY, at_least_background=True),
        ),
        background=BackgroundMortality("dead", {"all": BG}, Clock.AGE),
        population=Population(entry_age, "healthy"),
        horizon=Horizon(FOLLOW, "time"),
    )


def floored(model: Model):
    return next(e for per in model.resolve("base") for e in per if e.name == "disease death").hazards[0]


def fit_ref(u: float) -> float:
    """The Weibull hazard written out: (k / lam) (u / lam)^(k - 1) (docs/methods.md's H = (t / scale)^shape)."""
    return 0.6 / 5.0 * (u / 5.0) ** -0.4 if u > 0 else math.inf


def gompertz_ref(s: float) -> float:
    return 1e-4 * math.exp(0.085 * s)


def table_ref(s: float) -> float:
    return 1e-4 * math.exp(0.085 * (math.floor(s) + 0.5))


def lognormal_ref(u: float) -> float:
    """The log-normal hazard pdf / sf written out (mu = 1, sigma = 0.6; checked against scipy.stats below)."""
    z = (math.log(u) - 1.0) / 0.6
    return math.exp(-0.5 * z * z) / (u * 0.6 * math.sqrt(2.0 * math.pi)) / (0.5 * math.erfc(z / math.sqrt(2.0)))


def test_written_out_hazards_match_scipy_stats():
    u = np.array([0.3, 2.0, 9.0, 25.0])
    for ref, dist in ((fit_ref, stats.weibull_min(c=0.6, scale=5.0)), (lognormal_ref, stats.lognorm(s=0.6, scale=math.e)),
                      (gompertz_ref, stats.gompertz(c=1e-4 / 0.085, scale=1 / 0.085))):
        np.testing.assert_allclose([ref(v) for v in u], dist.pdf(u) / dist.sf(u), rtol=1e-12)


REF = {id(BG): gompertz_ref, id(LIFE_TABLE): table_ref, id(FIT): fit_ref}


def breaks(f, g, a: float, lo: float, hi: float) -> list[float]:
    """Break points for quad on (lo, hi) of max(f(u), g(a + u)): the life table's band edges and where
    the two hazards cross (sign changes on a 0.01-year grid, each located by scipy.optimize.brentq). A
    kink left undeclared can cost quad 1e-8 relative while its error estimate says 1e-14."""
    grid = np.linspace(lo, hi, max(2, int(math.ceil((hi - lo) * 100)) + 1))[1:-1]
    if grid.size < 2:
        return []
    d = np.array([f(u) - g(a + u) for u in grid])
    found = [optimize.brentq(lambda u: f(u) - g(a + u), grid[i], grid[i + 1], xtol=1e-14)
             for i in np.flatnonzero(np.sign(d[:-1]) != np.sign(d[1:]))]
    if g is table_ref:
        found += [b - a for b in BANDS if lo < b - a < hi]
    out: list[float] = []
    for p in sorted(found):  # a crossing at a band edge is found twice: keep one
        if lo + 1e-9 < p < hi - 1e-9 and (not out or p - out[-1] > 1e-9):
            out.append(p)
    return out


def alive_by_quad(a: float, t: float, background=BG) -> float:
    """Share alive at t of patients entering at age a: exp(-∫_0^t max(h_fit(u), h_bg(a + u)) + h_bg(a + u) du)
    by scipy quad, in w = u^0.6 (du = w^(2/3) dw / 0.6), where the Weibull fit's u^-0.4 is bounded."""
    g = REF[id(background)]

    def rate(w: float) -> float:
        u = w ** (1.0 / 0.6)
        return (max(fit_ref(u), g(a + u)) + g(a + u)) * w ** (2.0 / 3.0) / 0.6

    points = [p ** 0.6 for p in breaks(fit_ref, g, a, 0.0, t)] or None
    inner, _ = integrate.quad(rate, 0.0, t ** 0.6, points=points, limit=400, epsabs=1e-12, epsrel=1e-10)
    return math.exp(-inner)


def survival_by_quad(t: float, background=BG) -> float:
    """Share alive at t, averaged over entry ages uniform on [LOW, HIGH] by an outer quad (with a life
    table, breaking at the entry ages where a or a + t is a band edge: kinks of the integrand)."""
    kinks = [b for b in BANDS if LOW < b < HIGH] + [b - t for b in BANDS if LOW < b - t < HIGH]
    value, _ = integrate.quad(alive_by_quad, LOW, HIGH, args=(t, background), epsabs=1e-12, epsrel=1e-11,
                              limit=400, points=sorted(kinks) if background is LIFE_TABLE else None)
    return value / (HIGH - LOW)


def node_rule(model: Model, t: float, background=BG) -> float:
    """The same average by the solvers' rule: alive_by_quad at their entry-age nodes and weights."""
    ages, _, weights = population_pairs(model)
    return float(sum(w * alive_by_quad(a, t, background) for a, w in zip(ages, weights)))


# ------------------------------------------------------------------------------------------- validation
def test_varying_entry_ages_are_accepted_and_read_each_entry_age():
    m = two_state(UniformAge(LOW, HIGH))
    h = floored(m)
    assert isinstance(h, EntryAgeFloor) and (h.low, h.high, h.until, h.ages) == (LOW, HIGH, FOLLOW, ())
    assert h.at(62.5) == AtLeastHazard(FIT, ShiftedClock(BG, 62.5), FOLLOW)
    empirical = floored(two_state(EmpiricalAge((60.0, 70.0, 80.0), (1.0, 2.0, 1.0))))
    assert empirical.ages == (60.0, 70.0, 80.0)
    assert isinstance(floored(two_state(FixedAge(70.0))), AtLeastHazard)  # one entry age: unchanged path


def test_floor_still_refused_on_the_time_in_state_clock():
    with pytest.raises(ModelError) as err:
        two_state(UniformAge(LOW, HIGH), clock=Clock.STATE)
    (problem,) = [p for p in err.value.problems if p.path[-1] == "at_least_background"]
    assert "on 'entry' with background on 'age'" in problem.rule


def test_check_words_name_the_youngest_and_oldest_entrants():
    (words,) = transition_effect_words(two_state(UniformAge(LOW, HIGH)), "disease death")
    from scipy.optimize import brentq
    parts = []
    for a in (LOW, HIGH):  # where the fit falls below the background, by brentq on the two hazards
        t = brentq(lambda u: float(FIT.hazard(u) - BG.hazard(a + u)), 0.01, FOLLOW, xtol=1e-12)
        parts.append(f"entering at age {a:.1f} the fit falls below it from age {a + t:.1f}")
    assert words == "hazard at least the background hazard; " + ", ".join(parts)


# ------------------------------------------------------------------------------------------ the sampler
@pytest.mark.parametrize("fit, background", [(FIT, BG), (LogNormal(1.0, 0.6), LIFE_TABLE)],
                         ids=["weibull-gompertz", "lognormal-lifetable"])
def test_patient_times_solve_the_cumulative_hazard(fit, background):
    """T from the per-patient sampler satisfies ∫_x^{x+T} max(h_fit(u), h_bg(a + u)) du = E (quad of
    the hazards written out above; the log-normal from scipy.stats)."""
    h = EntryAgeFloor(fit, background, FOLLOW, LOW, HIGH)
    f_ref, g_ref = REF.get(id(fit), lognormal_ref), REF[id(background)]
    rng = np.random.default_rng(20261205)
    n = 40
    a, e = rng.uniform(LOW, HIGH, n), rng.exponential(size=n)
    x = np.where(rng.random(n) < 0.5, 0.0, rng.uniform(0.0, 20.0, n))
    with np.errstate(**KERNEL_ERRSTATE):
        t = h._conditional_time_at_entry(x, e, a)
    assert np.all(np.isfinite(t)) and np.all(t > 0)
    for ai, xi, ei, ti in zip(a, x, e, t):
        got, _ = integrate.quad(lambda u: max(f_ref(u), g_ref(ai + u)), xi, xi + ti, limit=400,
                                points=breaks(f_ref, g_ref, ai, xi, xi + ti) or None, epsabs=1e-13, epsrel=1e-12)
        assert got == pytest.approx(ei, rel=1e-9)  # quad to 1e-12; crossings located to 1e-10 years


@pytest.mark.parametrize("fit, background", [(FIT, BG), (LogNormal(1.0, 0.6), LIFE_TABLE)],
                         ids=["weibull-gompertz", "lognormal-lifetable"])
def test_per_patient_path_matches_the_shifted_clock_hazard_of_each_entry_age(fit, background):
    """The continuous-distribution sampler gives each patient the times of AtLeastHazard(fit,
    ShiftedClock(bg, a)) of its own entry age a (the fixed-entry-age path), at one age for everyone
    and at ages that differ: to 1e-9 relative (each crossing is located to 1e-10 years from its own
    bracket; with the life table this needs the band edges as nodes: a sliver where the table jumps
    above the rising log-normal and the fit overtakes it within one grid cell)."""
    h = EntryAgeFloor(fit, background, FOLLOW, LOW, HIGH)
    rng = np.random.default_rng(7)
    n = 1500
    e = rng.exponential(size=n)
    x = np.where(rng.random(n) < 0.5, 0.0, rng.uniform(0.0, 25.0, n))
    for ages in (np.full(n, LOW), np.full(n, 63.3), np.full(n, HIGH), rng.uniform(LOW, HIGH, n)):
        with np.errstate(**KERNEL_ERRSTATE):
            got = h._conditional_time_at_entry(x, e, ages)
            want = np.array([AtLeastHazard(fit, ShiftedClock(background, a), FOLLOW)._conditional_time(
                np.array([xi]), np.array([ei]))[0] for a, xi, ei in zip(ages[:300], x, e)])
        np.testing.assert_allclose(got[:300], want, rtol=1e-9)


# ------------------------------------------------------------------------------------- bit identity
def test_single_entry_age_is_bit_identical_to_the_shifted_clock_path():
    """An empirical distribution whose only weighted age is 70 goes through EntryAgeFloor (entry ages
    vary between 60 and 70 as far as the model knows); every patient enters at 70, and the histories
    are those of FixedAge(70) (ShiftedClock path) bit for bit."""
    one = two_state(FixedAge(70.0))
    via = two_state(EmpiricalAge((60.0, 70.0), (0.0, 1.0)))
    assert isinstance(floored(via), EntryAgeFloor)
    a, b = simulate(one, 20_000, seed=11), simulate(via, 20_000, seed=11)
    assert a.events.equals(b.events)
    assert a.patients.drop(columns="entry_age").equals(b.patients.drop(columns="entry_age"))
    assert np.array_equal(a.patients["entry_age"], b.patients["entry_age"])
    exact_one = solve_exact(one, [5.0, 20.0]).occupancy["probability"].to_numpy()
    exact_via = solve_exact(via, [5.0, 20.0]).occupancy["probability"].to_numpy()
    np.testing.assert_allclose(exact_via, exact_one, rtol=1e-9, atol=1e-12)


def test_same_histories_for_any_chunking_and_thread_count():
    m = illness_death()
    whole = simulate(m, 6_000, seed=5, chunk_size=6_000)
    split = simulate(m, 6_000, seed=5, chunk_size=777, workers=2)
    assert whole.events.equals(split.events) and whole.patients.equals(split.patients)
    events, _ = simulate_range(m, 5, 2_500, 4_100)
    want = whole.events[(whole.events["patient"] >= 2_500) & (whole.events["patient"] < 4_100)]
    assert np.array_equal(events["time"].to_numpy(), want["time"].to_numpy())


def test_parameter_draws_read_each_patients_entry_age():
    """A block of parameter draws in one engine call (simulate_draws): each draw's histories are those
    of its own model's run, bit for bit, with the floor read at every patient's entry age."""
    def with_fit(fit) -> Model:
        m = illness_death()
        t = dataclasses.replace(m.transitions[1], hazard=fit)
        return dataclasses.replace(m, transitions=(m.transitions[0], t))

    models = [with_fit(FIT), with_fit(Weibull(shape=0.6, scale=4.0)), with_fit(Weibull(shape=0.7, scale=5.0))]
    n, seed = 1_500, 31
    events, _ = simulate_draws(models, seed, n)
    for i, model in enumerate(models):
        assert isinstance(floored(model), EntryAgeFloor)
        ev, _ = simulate_range(model, seed, i * n, (i + 1) * n)
        got = events[(events["patient"] >= i * n) & (events["patient"] < (i + 1) * n)].reset_index(drop=True)
        pd.testing.assert_frame_equal(got, ev, check_exact=True)


# ------------------------------------------------------------------------------- exact and the engine
@pytest.mark.parametrize("background, times", [(BG, (3.0, 10.0, 20.0, 29.0)), (LIFE_TABLE, (10.0, 29.0))],
                         ids=["gompertz", "lifetable"])
def test_exact_solver_matches_quadrature_over_entry_ages(background, times):
    """solve_exact against scipy quad: at its own entry-age nodes to 1e-8 (the forward equations per
    entry age), and against the full average over entry ages no further than its node rule is
    (48 Gauss-Legendre nodes in the quantile: measured 8e-7 relative with the Gompertz background, up
    to 7e-5 with the life table, whose bands put kinks into the integrand over entry age)."""
    m = two_state(UniformAge(LOW, HIGH), background)
    exact = solve_exact(m, np.array(times)).occupancy
    alive = exact[exact["state"] == "alive"]["probability"].to_numpy()
    for t, got in zip(times, alive):
        rule, full = node_rule(m, t, background), survival_by_quad(t, background)
        assert got == pytest.approx(rule, rel=1e-8)
        assert abs(got - full) <= abs(rule - full) + 1e-8 * full


def test_cohort_trace_reads_the_same_hazard_per_entry_age():
    """Two states: with the cumulative rate rule a cycle's survival is exp(-(ΔH_floor + ΔH_bg)) exactly,
    so the stratified trace at the cycle ends equals quad at the same entry-age strata."""
    m = two_state(UniformAge(LOW, HIGH))
    trace = cohort_trace(m, "base", 1.0, conversion="matrix-exponential", rate_rule="cumulative")
    for k in (3, 10, 29):
        got = float(trace.weights @ trace.occupancy[:, k, 0])
        assert got == pytest.approx(node_rule(m, float(k)), rel=1e-8)


@pytest.mark.parametrize("model", [two_state(UniformAge(LOW, HIGH), LIFE_TABLE), illness_death()],
                         ids=["lifetable", "illness-death"])
def test_engine_matches_exact_solver_within_4_mcse(model):
    simulate_within_4_mcse(model, 30_000, 2026, np.array([2.0, 7.0, 15.0, 29.0]))


@pytest.mark.slow
@pytest.mark.parametrize("n", [1_000_000 if FULL else 100_000])
@pytest.mark.parametrize("model", [illness_death(NormalAge(65.0, 8.0, 45.0, 85.0)),
                                   two_state(NormalAge(65.0, 8.0, 45.0, 85.0), LIFE_TABLE)],
                         ids=["illness-death", "lifetable"])
def test_engine_matches_exact_solver_at_size(model, n):
    """The same check with a normal entry-age distribution (truncated to 45-85) and more patients, so
    that 4 MCSE is small enough to see a bias of the per-patient sampler of 1e-3 (1e-4 at full size)."""
    assert isinstance(floored(model), EntryAgeFloor)
    simulate_within_4_mcse(model, n, 77, np.array([1.0, 5.0, 12.0, 20.0, 29.0]))
