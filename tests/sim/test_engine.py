"""The continuous-time engine: schema, reproducibility, common random numbers, and statistical
agreement with exact solutions (tolerances: 4 Monte Carlo standard errors, fixed seeds)."""

from __future__ import annotations

import threading

import numpy as np
import pandas as pd
import pytest

from sim.engine.histories import SimulationCancelled, SimulationError, simulate
from sim.reference.exact import solve_exact
from sim.hazards import Exponential, Gompertz
from sim.model.multistate import BackgroundMortality, Clock, Horizon, Model, State, Strategy, Transition
from sim.model.population import FixedAge, Population, UniformAge

from .conftest import FULL, illness_death, occupancy_from_log, single_exit

Z = 4.0  # tolerance in Monte Carlo standard errors


# ----------------------------------------------------------------------------- schema
def test_event_log_and_patient_table_schema():
    model = illness_death(strategies=(Strategy("a"), Strategy("b", hazard_ratios={"onset": 0.5})))
    run = simulate(model, 2000, seed=1)
    ev, pt = run.events, run.patients
    assert list(ev.columns) == ["strategy", "patient", "time", "age", "from_state", "to_state", "transition"]
    assert list(pt.columns) == ["strategy", "patient", "entry_age", "sex", "initial_state", "exit_time",
                                "exit_age", "final_state", "exit_reason"]
    assert len(pt) == 2 * 2000 and run.seed == 1
    assert ev["patient"].dtype == np.int64 and ev["time"].dtype == np.float64
    for col in ("strategy", "from_state", "to_state", "transition"):
        assert isinstance(ev[col].dtype, pd.CategoricalDtype)
    # sorted by strategy, patient, time; times strictly inside follow-up
    for _, g in ev.groupby("strategy", observed=True):
        key = g[["patient", "time"]].to_numpy()
        assert np.all(np.diff(g["patient"].to_numpy()) >= 0)
        same = np.diff(key[:, 0]) == 0
        assert np.all(np.diff(key[:, 1])[same] > 0)
    assert np.all(ev["time"] > 0) and np.all(ev["time"] < 30.0)
    np.testing.assert_allclose(ev["age"] - ev["time"],
                               pt.set_index(["strategy", "patient"]).loc[
                                   list(zip(ev["strategy"], ev["patient"])), "entry_age"].to_numpy(),
                               rtol=0, atol=1e-9)
    # consistency: absorbed patients end in dead with their last event's time; censored at the horizon
    absorbed = pt["exit_reason"] == "absorbed"
    assert set(pt.loc[absorbed, "final_state"].astype(str)) <= {"dead"}
    np.testing.assert_array_equal(pt.loc[~absorbed, "exit_time"], 30.0)
    last = ev.groupby(["strategy", "patient"], observed=True).last()
    merged = pt[absorbed].set_index(["strategy", "patient"]).join(last, rsuffix="_ev")
    np.testing.assert_array_equal(merged["exit_time"], merged["time"])
    # the moves follow the model's transitions only
    allowed = {("healthy", "sick"), ("sick", "healthy"), ("sick", "dead"), ("healthy", "dead")}
    assert set(zip(ev["from_state"].astype(str), ev["to_state"].astype(str))) <= allowed


# ----------------------------------------------------------------------------- reproducibility
@pytest.fixture(scope="module")
def two_strategy_model():
    return illness_death(horizon=Horizon(90.0, "age"), entry_age=UniformAge(40, 80),
                         strategies=(Strategy("usual"), Strategy("new", hazard_ratios={"disease death": 0.6})))


@pytest.mark.parametrize("chunk_size, workers", [(1500, 1), (1000, 2), (215, 1), (215, 2), (4000, 2)])
def test_bit_identical_for_any_chunking_and_threads(two_strategy_model, chunk_size, workers):
    # 1, 2 and 7 chunks (1500 patients: chunk sizes 1500, 1000 -> 2 chunks, 215 -> 7 chunks),
    # one and two worker threads: the same log bit for bit.
    ref = simulate(two_strategy_model, 1500, seed=99, chunk_size=1500, workers=1)
    run = simulate(two_strategy_model, 1500, seed=99, chunk_size=chunk_size, workers=workers)
    pd.testing.assert_frame_equal(run.events, ref.events, check_exact=True)
    pd.testing.assert_frame_equal(run.patients, ref.patients, check_exact=True)


def test_bit_identical_for_any_chunking_with_a_newton_polished_family():
    # A log-normal hazard on attained age (median 20 years, so H(age) is large at entry and many draws
    # take the Newton polish of Hazard._conditional_time, whose quadrature runs over each call's lanes).
    from sim.hazards import LogNormal

    model = Model(states=(State("a"), State("b"), State("dead", absorbing=True)),
                  transitions=(Transition("ab", "a", "b", LogNormal(3.0, 0.15), Clock.AGE),
                               Transition("ba", "b", "a", LogNormal(0.5, 0.8), Clock.ENTRY),
                               Transition("bd", "b", "dead", Exponential(0.1), Clock.STATE)),
                  background=BackgroundMortality("dead", {"all": Gompertz(0.001 * np.exp(-0.09 * 40), 0.09)},
                                                 Clock.AGE),
                  population=Population(UniformAge(40, 70), "a"), horizon=Horizon(60.0))
    ref = simulate(model, 20_000, seed=3, chunk_size=20_000)
    run = simulate(model, 20_000, seed=3, chunk_size=777)
    pd.testing.assert_frame_equal(run.events, ref.events, check_exact=True)


def test_seed_changes_results(two_strategy_model):
    a = simulate(two_strategy_model, 500, seed=1)
    b = simulate(two_strategy_model, 500, seed=2)
    assert not a.patients["exit_time"].equals(b.patients["exit_time"])


def test_common_random_numbers_across_strategies(two_strategy_model):
    run = simulate(two_strategy_model, 3000, seed=5)
    (ev_u, pt_u), (ev_n, pt_n) = run.strategy("usual"), run.strategy("new")
    # same patients
    np.testing.assert_array_equal(pt_u["entry_age"], pt_n["entry_age"])
    np.testing.assert_array_equal(pt_u["sex"], pt_n["sex"])
    # the strategy changes only disease death, so each patient's first move out of "healthy"
    # (drawn before any difference can arise) is identical in both strategies
    first_u = ev_u.groupby("patient").first()
    first_n = ev_n.groupby("patient").first()
    pd.testing.assert_frame_equal(first_u.drop(columns="strategy"), first_n.drop(columns="strategy"))
    # and the histories do differ later on
    assert not pt_u["exit_time"].equals(pt_n["exit_time"])


def test_identical_strategies_give_identical_histories():
    model = illness_death(strategies=(Strategy("a"), Strategy("b", hazard_ratios={"onset": 1.0})))
    run = simulate(model, 2000, seed=3)
    (ea, pa), (eb, pb) = run.strategy("a"), run.strategy("b")
    cols = ["patient", "time", "age", "from_state", "to_state", "transition"]
    pd.testing.assert_frame_equal(ea[cols], eb[cols], check_exact=True)
    pd.testing.assert_frame_equal(pa.drop(columns="strategy"), pb.drop(columns="strategy"), check_exact=True)


def test_progress_and_cancel(two_strategy_model):
    seen = []
    simulate(two_strategy_model, 1000, seed=1, chunk_size=300, progress=lambda d, n: seen.append((d, n)))
    assert seen == [(300, 1000), (600, 1000), (900, 1000), (1000, 1000)]
    stop = threading.Event()

    def progress(done, total):
        if done >= 300:
            stop.set()

    with pytest.raises(SimulationCancelled):
        simulate(two_strategy_model, 1000, seed=1, chunk_size=300, progress=progress, cancel=stop)
    with pytest.raises(SimulationCancelled):
        simulate(two_strategy_model, 1000, seed=1, chunk_size=300, workers=2, cancel=lambda: True)


def test_bad_arguments_are_named():
    model = single_exit(Exponential(0.1))
    with pytest.raises(ValueError, match="n_patients must be a positive integer, got 0"):
        simulate(model, 0, seed=1)
    with pytest.raises(ValueError, match="chunk_size must be a positive integer, got -5"):
        simulate(model, 10, seed=1, chunk_size=-5)
    with pytest.raises(ValueError, match="strategy must be one of"):
        simulate(model, 10, seed=1, strategies=("nope",))


def test_runaway_loop_is_reported():
    model = Model(
        states=(State("a"), State("b"), State("dead", absorbing=True)),
        transitions=(Transition("ab", "a", "b", Exponential(1e4)), Transition("ba", "b", "a", Exponential(1e4)),
                     Transition("die", "a", "dead", Exponential(1e-6))),
        population=Population(FixedAge(50), "a"), horizon=Horizon(10.0))
    with pytest.raises(SimulationError, match="more than 50 transitions"):
        simulate(model, 10, seed=1, max_transitions=50)


# ----------------------------------------------------------------------------- statistics
def _check_within(estimate, reference, se, what):
    estimate, reference, se = map(np.asarray, (estimate, reference, se))
    bad = np.abs(estimate - reference) > Z * se
    assert not bad.any(), f"{what}: estimate {estimate[bad]} vs reference {reference[bad]}, 4 MCSE {Z * se[bad]}"


def test_rate_and_risk_from_constant_hazard():
    # Constant hazard r, follow-up T: deaths / person-years estimates the rate r; deaths / N
    # estimates the risk 1 - exp(-r T) (Miller & Homan 1994, Med Decis Making 14:52-58), not r T.
    r, T, n = 0.2, 5.0, 40_000
    run = simulate(single_exit(Exponential(r), horizon=T), n, seed=2024)
    pt = run.patients
    deaths = int((pt["exit_reason"] == "absorbed").sum())
    person_years = float(pt["exit_time"].sum())
    rate = deaths / person_years
    _check_within(rate, r, np.sqrt(deaths) / person_years, "rate")  # Poisson SE of a rate
    risk = deaths / n
    p = -np.expm1(-r * T)
    se_risk = np.sqrt(p * (1 - p) / n)
    _check_within(risk, p, se_risk, "risk")
    assert abs(risk - r * T) > 10 * se_risk  # the naive risk r T = 1 is far off


@pytest.mark.parametrize("n_exits", [2, 4, 6])
def test_competing_exits_share_the_events_in_proportion_to_their_hazards(n_exits):
    # Constant competing hazards r_j: the exit taken is j with probability r_j / sum(r) and the time
    # to it is exponential with rate sum(r), whatever the number of exits (common practice, no
    # source needed: the minimum of independent exponentials). Six exits take the engine's path for
    # a fifth exit and beyond.
    rates = np.array([0.05, 0.3, 0.12, 0.02, 0.2, 0.08])[:n_exits]
    n = 40_000
    model = Model(states=(State("alive"), State("dead", absorbing=True)),
                  transitions=tuple(Transition(f"cause {j}", "alive", "dead", Exponential(float(r)), Clock.ENTRY)
                                    for j, r in enumerate(rates)),
                  population=Population(FixedAge(50.0), "alive"), horizon=Horizon(400.0, "time"))
    run = simulate(model, n, seed=99)
    assert (run.patients["exit_reason"] == "absorbed").all()
    share = run.events["transition"].value_counts(normalize=True).reindex([f"cause {j}" for j in range(n_exits)])
    p = rates / rates.sum()
    _check_within(share.to_numpy(), p, np.sqrt(p * (1 - p) / n), "shares of the exits")
    mean_time = float(run.patients["exit_time"].mean())
    _check_within(mean_time, 1 / rates.sum(), 1 / rates.sum() / np.sqrt(n), "mean time to the first exit")


def test_gompertz_on_age_is_conditional_survival():
    # Everyone enters alive at 60: S(t | 60) = S(60 + t) / S(60) with the Gompertz survival
    # S(a) = exp(-(b/g)(exp(g a) - 1)) (docs/methods.md, 'Hazards and survival').
    b, g, a0, n = 5e-5, 0.09, 60.0, 40_000
    run = simulate(single_exit(Gompertz(rate=b, shape=g), Clock.AGE, age=a0, horizon=40.0), n, seed=7)
    pt = run.patients
    for t in (5.0, 15.0, 30.0):
        s_true = np.exp(-(b / g) * (np.exp(g * (a0 + t)) - np.exp(g * a0)))
        s_hat = float((pt["exit_time"] > t).mean())
        _check_within(s_hat, s_true, np.sqrt(s_true * (1 - s_true) / n), f"S({t} | {a0})")


def test_improper_gompertz_never_event_fraction():
    # g < 0: with probability exp(b/g) the event never happens (docs/methods.md, 'Hazards and survival').
    b, g, n = 0.5, -0.4, 40_000
    run = simulate(single_exit(Gompertz(rate=b, shape=g), Clock.ENTRY, horizon=100.0), n, seed=8)
    never = float((run.patients["exit_reason"] == "censored").mean())
    p = np.exp(b / g)
    # after 100 years the remaining event probability is (b/|g|) e^{-40} ~ 0: censored == never
    _check_within(never, p, np.sqrt(p * (1 - p) / n), "never-event fraction")


def test_zero_hazard_ratio_means_never():
    model = Model(states=(State("alive"), State("dead", absorbing=True)),
                  transitions=(Transition("death", "alive", "dead", Exponential(0.3)),),
                  population=Population(FixedAge(40), "alive"), horizon=Horizon(20.0),
                  strategies=(Strategy("cure", hazard_ratios={"death": 0.0}),))
    run = simulate(model, 1000, seed=1)
    assert len(run.events) == 0
    assert (run.patients["exit_reason"] == "censored").all()
    np.testing.assert_array_equal(run.patients["exit_time"], 20.0)


def test_sex_specific_background_mortality():
    b_f, b_m, g, a0, T, n = 3e-5, 9e-5, 0.085, 70.0, 10.0, 40_000
    model = Model(states=(State("alive"), State("dead", absorbing=True)), transitions=(),
                  background=BackgroundMortality("dead", {"female": Gompertz(b_f, g), "male": Gompertz(b_m, g)}),
                  population=Population(FixedAge(a0), "alive", {"female": 0.3, "male": 0.7}),
                  horizon=Horizon(T))
    pt = simulate(model, n, seed=21).patients
    share_f = float((pt["sex"] == "female").mean())
    _check_within(share_f, 0.3, np.sqrt(0.21 / n), "female share")
    for sex, b in (("female", b_f), ("male", b_m)):
        grp = pt[pt["sex"] == sex]
        p = -np.expm1(-(b / g) * (np.exp(g * (a0 + T)) - np.exp(g * a0)))
        dead = float((grp["exit_reason"] == "absorbed").mean())
        _check_within(dead, p, np.sqrt(p * (1 - p) / len(grp)), f"{sex} 10-year death risk")


@pytest.mark.slow
@pytest.mark.parametrize("n", [1_000_000 if FULL else 60_000])
def test_illness_death_occupancy_matches_kolmogorov(n):
    # Simulated state occupancy vs the exact Kolmogorov forward solution (scipy.integrate.solve_ivp
    # at rtol 1e-10), averaged over the entry-age distribution and sex mix.
    model = illness_death(horizon=Horizon(30.0, "time"))
    times = np.array([2.0, 5.0, 10.0, 20.0, 29.0])
    exact = solve_exact(model, times).occupancy.pivot(index="time", columns="state", values="probability")
    run = simulate(model, n, seed=20261201, workers=2)
    for t in times:
        p_hat = occupancy_from_log(run.events, run.patients, model.state_names, t)
        p = exact.loc[t, list(model.state_names)].to_numpy()
        _check_within(p_hat, p, np.sqrt(p * (1 - p) / n), f"occupancy at t={t}")
    # life expectancy to the horizon: mean follow-up alive vs the integral of the exact occupancy
    le = solve_exact(model, [1.0]).life_expectancy["years"].iloc[0]
    x = run.patients["exit_time"].to_numpy()
    _check_within(x.mean(), le, x.std(ddof=1) / np.sqrt(n), "life expectancy")


def test_entry_age_and_sex_draws():
    from scipy import stats

    model = illness_death(entry_age=UniformAge(40, 80))
    pt = simulate(model, 20_000, seed=4, strategies=("base",)).patients
    # entry ages follow the declared distribution (Kolmogorov-Smirnov vs scipy.stats.uniform)
    assert stats.kstest(pt["entry_age"], stats.uniform(loc=40, scale=40).cdf).pvalue > 1e-3


# ----------------------------------------------------------------------------- estimators on engine logs
def test_kaplan_meier_of_engine_log_matches_lifelines():
    # Reference: lifelines.KaplanMeierFitter (a general-purpose survival library from PyPI) on the
    # engine's patient table, with censoring that varies by patient (horizon at attained age 85).
    from lifelines import KaplanMeierFitter

    from sim.analysis import kaplan_meier

    model = illness_death(horizon=Horizon(85.0, "age"), entry_age=UniformAge(45, 75))
    pt = simulate(model, 5000, seed=31).patients
    km = kaplan_meier(pt)
    with np.errstate():  # lifelines changes numpy's error state globally inside fit
        ref = KaplanMeierFitter().fit(pt["exit_time"], pt["exit_reason"] == "absorbed")
        s_ref = ref.survival_function_at_times(km["time"].to_numpy()).to_numpy()
    np.testing.assert_allclose(km["survival"].to_numpy(), s_ref, rtol=1e-12, atol=1e-14)


@pytest.mark.slow
@pytest.mark.parametrize("n", [400_000 if FULL else 40_000])
def test_aalen_johansen_of_engine_log_matches_kolmogorov(n):
    # Aalen-Johansen occupancy from the simulated log vs the exact forward equations, within 4 MCSE.
    from sim.analysis import state_occupancy

    model = illness_death(horizon=Horizon(30.0, "time"))
    times = np.array([3.0, 12.0, 25.0])
    exact = solve_exact(model, times).occupancy.pivot(index="time", columns="state", values="probability")
    run = simulate(model, n, seed=77)
    aj = state_occupancy(run.events, run.patients, model.state_names, times)
    for row in aj.itertuples():
        p = exact.loc[row.time, row.state]
        _check_within(row.probability, p, np.sqrt(p * (1 - p) / n), f"AJ {row.state} at {row.time}")


@pytest.mark.slow
@pytest.mark.parametrize("n, chunk", [(1_000_000, 50_000) if FULL else (100_000, 5_000)])
def test_memory_is_bounded_by_results_and_chunk(n, chunk):
    # Peak traced memory stays within about twice the returned tables (chunk results are joined once)
    # plus a working set proportional to the chunk size: bounded memory for any number of patients
    # beyond what the results themselves need. (A design budget, not a statistical tolerance.)
    import tracemalloc

    model = illness_death(horizon=Horizon(100.0, "age"))
    tracemalloc.start()
    try:
        run = simulate(model, n, seed=1, chunk_size=chunk)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    out = run.events.memory_usage(deep=True).sum() + run.patients.memory_usage(deep=True).sum()
    assert peak <= 2.1 * out + 1000 * chunk, (peak, out)


def test_streamed_chunks_equal_the_whole_run(two_strategy_model):
    from sim.engine.histories import simulate_chunks

    whole = simulate(two_strategy_model, 1000, seed=9)
    parts = list(simulate_chunks(two_strategy_model, 1000, seed=9, chunk_size=300, workers=2))
    assert len(parts) == 4
    ev = pd.concat([e for e, _ in parts]).sort_values(["strategy", "patient", "time"], kind="stable")
    pt = pd.concat([p for _, p in parts]).sort_values(["strategy", "patient"], kind="stable")
    pd.testing.assert_frame_equal(ev.reset_index(drop=True), whole.events, check_exact=True)
    pd.testing.assert_frame_equal(pt.reset_index(drop=True), whole.patients, check_exact=True)
