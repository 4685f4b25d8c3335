"""Curves to the last horizon (issue 11 item 3): with a horizon in attained age and different entry
ages, the population occupancy on the time-since-entry scale, each patient counted at min(t, own
horizon), estimated from the simulation and computed exactly, agree to the last horizon."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats

from sim.analysis import (kaplan_meier, occupancy_to_own_horizon, state_occupancy, survival_to_own_horizon)
from sim.io import demo_path, load_scenario
from sim.pipeline import run_scenario, time_grid
from sim.pipeline.results import horizon_range
from sim.reference import exact_outcomes_and_occupancy

from .conftest import occupancy_from_log

LANTHIC = demo_path().parent / "lanthic_syndrome.toml"


@pytest.fixture(scope="module")
def lanthic():
    scenario = load_scenario(LANTHIC)
    return scenario, run_scenario(scenario, patients=100_000, seed=5, workers=2, study=False)


def test_the_grid_runs_to_the_last_horizon_and_keeps_the_old_points(lanthic):
    scenario, results = lanthic
    first, last = horizon_range(scenario)
    assert (first, last) == (25.0, 60.0)  # entry ages 40-75, horizon at attained age 100
    grid = time_grid(scenario)
    np.testing.assert_array_equal(grid[:121], np.linspace(0.0, first, 121))  # as before issue 11
    assert grid[-1] == last and np.all(np.diff(grid) > 0)
    np.testing.assert_allclose(np.diff(grid), first / 120, rtol=1e-9)
    np.testing.assert_array_equal(results.grid, grid)
    for table in (results.occupancy, results.exact_occupancy):
        assert table["time"].max() == last


def test_simulated_curves_match_the_exact_ones_past_the_earliest_horizon(lanthic):
    """Within 4 Monte Carlo standard errors (binomial, exact for independent patients) at times past
    the earliest horizon (25 years) up to the last (60), for every state and strategy."""
    _, results = lanthic
    both = results.occupancy.merge(results.exact_occupancy.rename(columns={"probability": "exact"}),
                                   on=["strategy", "time", "state"])
    past = both[both["time"].isin(results.grid[(results.grid > 25.0)][::24]) | (both["time"] == 60.0)]
    assert past["time"].nunique() >= 6
    z = (past["probability"] - past["exact"]) / past["std_error"]
    assert z.abs().max() < 4, past.assign(z=z).loc[z.abs().idxmax()]
    # Aalen-Johansen, which treats each horizon as censoring, estimates the younger entrants' curves
    # there instead: far from the population's
    ev, pt = results.simulation.strategy("usual care")
    aj = state_occupancy(ev, pt, ("well", "lanthic", "dead"), [50.0]).set_index("state")["probability"]
    at50 = both[(both["strategy"] == "usual care") & np.isclose(both["time"], 50.0)].set_index("state")
    assert len(at50) == 3
    assert abs(aj["dead"] - at50.loc["dead", "exact"]) > 10 * at50.loc["dead", "std_error"]  # 0.036, ~40 MCSE


def _direct_population_curve(t: float) -> np.ndarray:
    """The same population curve for "usual care" by an independent calculation: each entry age's
    forward equations by scipy.integrate.solve_ivp with the lanthic demo's hazards written out here,
    read at min(t, 100 - age), averaged over the truncated normal entry age (scipy.stats.truncnorm)
    and the 50/50 sex mix by scipy.integrate.quad, split at the kink age 100 - t."""
    dist = stats.truncnorm((40 - 55) / 8, (75 - 55) / 8, loc=55, scale=8)

    def occupancy(age: float, sex_rate: float) -> np.ndarray:
        end = min(t, 100.0 - age)

        def rhs(s, p):
            onset = (1.3 / 30.0) * (s / 30.0) ** 0.3
            bg = sex_rate * math.exp(0.085 * (age + s))
            well, sick, _ = p
            return [-(onset + bg) * well + 0.15 * sick, onset * well - (0.15 + 0.08 + bg) * sick,
                    bg * well + (0.08 + bg) * sick]
        return integrate.solve_ivp(rhs, (0.0, end), [1.0, 0.0, 0.0], method="DOP853", rtol=1e-11,
                                   atol=1e-13).y[:, -1]

    out = np.zeros(3)
    kink = min(max(100.0 - t, 40.0), 75.0)
    for j in range(3):
        for rate in (3e-5, 5e-5):
            for lo, hi in ((40.0, kink), (kink, 75.0)):
                if hi > lo:
                    out[j] += 0.5 * integrate.quad(lambda a: occupancy(a, rate)[j] * dist.pdf(a), lo, hi,
                                                   epsabs=1e-10, epsrel=1e-9, limit=100)[0]
    return out


@pytest.mark.parametrize("t", [40.0])
def test_the_exact_curve_past_the_earliest_horizon_against_an_independent_calculation(lanthic, t):
    scenario, _ = lanthic
    _, occ = exact_outcomes_and_occupancy(scenario.model, np.array([t]), ("usual care",))
    got = occ.set_index("state")["probability"].loc[["well", "lanthic", "dead"]].to_numpy()
    # 48 Gauss-Legendre entry ages across the kink of min(t, 100 - age): ~1e-5 (3e-7 with 192 nodes),
    # far below the Monte Carlo standard errors (~1e-3)
    np.testing.assert_allclose(got, _direct_population_curve(t), rtol=0, atol=3e-5)


# ----------------------------------------------------------------------------- the estimators
def _log_with_horizons():
    """A small hand-made log: patients 0-3 with horizons 2, 5, 5, 8 (censored) or absorbed earlier."""
    patients = pd.DataFrame({
        "strategy": "s", "patient": [0, 1, 2, 3, 4],
        "initial_state": ["a", "a", "a", "a", "a"],
        "exit_time": [2.0, 5.0, 3.0, 8.0, 6.0],
        "final_state": ["b", "a", "d", "b", "d"],
        "exit_reason": ["censored", "censored", "absorbed", "censored", "absorbed"]})
    events = pd.DataFrame({
        "strategy": "s", "patient": [0, 2, 2, 3, 4, 4],
        "time": [1.0, 1.5, 3.0, 7.0, 2.5, 6.0],
        "from_state": ["a", "a", "b", "a", "a", "b"], "to_state": ["b", "b", "d", "b", "b", "d"],
        "transition": ["ill", "ill", "die", "ill", "ill", "die"]})
    return events, patients


def test_occupancy_counts_each_patient_at_their_own_end():
    events, patients = _log_with_horizons()
    times = [0.0, 1.0, 2.5, 4.0, 5.5, 7.0, 9.0]
    got = occupancy_to_own_horizon(events, patients, ["a", "b", "d"], times)
    for t in times:
        # by hand: the state of each patient at min(t, exit time)
        expected = np.zeros(3)
        for i, row in patients.iterrows():
            moves = events[(events["patient"] == row["patient"]) & (events["time"] <= min(t, row["exit_time"]))]
            state = moves["to_state"].iloc[-1] if len(moves) else row["initial_state"]
            expected["abd".index(state)] += 1 / len(patients)
        p = got[got["time"] == t]["probability"].to_numpy()
        np.testing.assert_allclose(p, expected, rtol=0, atol=1e-15)
        np.testing.assert_allclose(got[got["time"] == t]["std_error"], np.sqrt(expected * (1 - expected) / 5),
                                   rtol=1e-14)
    # before the first horizon (2.0) it is the Aalen-Johansen estimate (nobody censored yet)
    aj = state_occupancy(events, patients, ["a", "b", "d"], [0.5, 1.0, 1.9])
    own = occupancy_to_own_horizon(events, patients, ["a", "b", "d"], [0.5, 1.0, 1.9])
    np.testing.assert_array_equal(own["probability"], aj["probability"])


def test_survival_is_kaplan_meier_up_to_the_earliest_horizon(lanthic):
    _, results = lanthic
    ev, pt = results.simulation.strategy("usual care")
    own = survival_to_own_horizon(pt)
    km = kaplan_meier(pt)
    first = pt.loc[pt["exit_reason"] == "censored", "exit_time"].min()
    a = own[own["time"] < first].set_index("time")["survival"]
    b = km[km["time"] < first].set_index("time")["survival"]
    pd.testing.assert_index_equal(a.index, b.index)
    np.testing.assert_allclose(a.to_numpy(), b.to_numpy(), rtol=0, atol=1e-12)
    # past it: one minus the share absorbed by min(t, own horizon), read from the log directly
    for t in (30.0, 45.0, 60.0):
        share_alive = 1.0 - np.mean((pt["exit_reason"] == "absorbed") & (pt["exit_time"] <= t))
        s = own.loc[own["time"] <= t, "survival"].iloc[-1]
        assert s == pytest.approx(share_alive, abs=1e-12)
    # and it is 1 minus the absorbing state's occupancy on the grid
    occ = results.occupancy[(results.occupancy["strategy"] == "usual care") & (results.occupancy["state"] == "dead")]
    at = np.searchsorted(own["time"].to_numpy(), occ["time"].to_numpy(), side="right") - 1
    np.testing.assert_allclose(own["survival"].to_numpy()[at], 1.0 - occ["probability"].to_numpy(), atol=1e-12)


def test_a_common_horizon_gives_the_same_curves_as_before():
    """Horizon in time since entry: the grid ends at it, and the curves are the proportions read from
    the log (as Aalen-Johansen is there)."""
    scenario = load_scenario(demo_path().parent / "ferrovian_progression.toml")
    assert horizon_range(scenario) == (30.0, 30.0)
    np.testing.assert_array_equal(time_grid(scenario), np.linspace(0.0, 30.0, 121))
    results = run_scenario(scenario, patients=3_000, seed=2, workers=2, study=False)
    ev, pt = results.simulation.strategy("watchful waiting")
    states = scenario.model.state_names
    occ = results.occupancy[results.occupancy["strategy"] == "watchful waiting"]
    for t in (0.0, 12.25, 30.0):
        p = occ[np.isclose(occ["time"], t)].set_index("state")["probability"].loc[list(states)].to_numpy()
        np.testing.assert_allclose(p, occupancy_from_log(ev, pt, states, t), rtol=0, atol=1e-15)
