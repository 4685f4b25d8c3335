"""Stiff but legal models (issue 13 item 2): the exact solver switches to an implicit method, bounds its
work and either gives the exact answer (checked against scipy.linalg.expm) or raises a clean
NoExactSolution, which a run reports as a note while keeping the simulation's results. The tests bound
the solver's work by counting its cancel checks, never by wall time."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import linalg

from sim.hazards import Exponential, Gompertz
from sim.io.demo import demo_path
from sim.io.scenario.reader import parse_scenario
from sim.model.multistate import BackgroundMortality, Clock, Horizon, Model, State, Strategy, Transition
from sim.model.population import FixedAge, Population
from sim.pipeline import run_scenario
from sim.reference import NoExactSolution, solve_exact
from sim.reference import forward

# each cancel check stands for at most CANCEL_EVERY right-hand-side or Jacobian evaluations
CHECK_BOUND = forward.MAX_EVALUATIONS // forward.CANCEL_EVERY + 1000


class WorkMeter:
    """A cancel token that never cancels but counts the solver's checks (its work), and stops a
    runaway solve (returns True) beyond the bound, so that a regression fails instead of hanging."""

    def __init__(self, bound: int = CHECK_BOUND) -> None:
        self.bound, self.checks = bound, 0

    def is_set(self) -> bool:
        self.checks += 1
        return self.checks > self.bound


def _illness_death(background, hr: float = 1.0, horizon: float = 20.0) -> Model:
    return Model(
        states=(State("healthy"), State("sick"), State("dead", absorbing=True)),
        transitions=(
            Transition("onset", "healthy", "sick", Exponential(0.1), Clock.ENTRY),
            Transition("recovery", "sick", "healthy", Exponential(0.3), Clock.STATE),
            Transition("disease death", "sick", "dead", Exponential(0.05), Clock.STATE),
        ),
        background=BackgroundMortality("dead", {"all": background}, Clock.AGE),
        population=Population(FixedAge(40.0), "healthy"),
        horizon=Horizon(horizon),
        strategies=(Strategy("usual"), Strategy("extreme", hazard_ratios={"onset": hr})),
    )


def _generator(onset: float, background: float) -> np.ndarray:
    return np.array([[-(onset + background), onset, background],
                     [0.3, -(0.3 + 0.05 + background), 0.05 + background],
                     [0.0, 0.0, 0.0]])


def test_hazard_ratio_1e6_matches_matrix_exponential_with_bounded_work():
    # onset at 0.1 x 1e6 = 1e5 per year beside a recovery of 0.3: an explicit method would need
    # millions of steps; the implicit one reaches expm(t Q) (scipy.linalg.expm) with bounded work
    model = _illness_death(Exponential(0.02), hr=1e6)
    times = np.array([0.0, 1e-6, 1e-3, 0.5, 5.0, 20.0])
    meter = WorkMeter()
    occ = solve_exact(model, times, strategies=("extreme",), cancel=meter).occupancy
    got = occ.pivot(index="time", columns="state", values="probability")[["healthy", "sick", "dead"]]
    q = _generator(0.1 * 1e6, 0.02)
    for t in times:
        np.testing.assert_allclose(got.loc[t].to_numpy(), linalg.expm(t * q)[0], rtol=0, atol=1e-9)
    assert meter.checks <= CHECK_BOUND


def test_steep_gompertz_background_matches_closed_form_with_bounded_work():
    # Gompertz background rate 0.5 (shape 0.085) from age 40: 15 per year at entry, about 2,500 at 100.
    # The background is the same from every living state, so the living occupancy factorises:
    # p(t) = exp(-H(t)) [expm(t Q0)]_living with Q0 the disease generator (scipy.linalg.expm) and
    # H(t) = rate/shape (exp(shape (40 + t)) - exp(shape 40)) the Gompertz cumulative hazard.
    rate, shape = 0.5, 0.085
    model = _illness_death(Gompertz(rate=rate, shape=shape), horizon=60.0)
    times = np.array([0.0, 0.01, 0.1, 0.5, 1.0, 2.0])
    meter = WorkMeter()
    sol = solve_exact(model, times, strategies=("usual",), cancel=meter)
    got = sol.occupancy.pivot(index="time", columns="state", values="probability")[["healthy", "sick", "dead"]]
    q0 = _generator(0.1, 0.0)
    for t in times:
        surv = np.exp(-rate / shape * (np.exp(shape * (40.0 + t)) - np.exp(shape * 40.0)))
        living = surv * linalg.expm(t * q0)[0, :2]
        # absolute on probabilities that start at 1 (the implicit method's global error: 4e-11 here)
        np.testing.assert_allclose(got.loc[t, ["healthy", "sick"]].to_numpy(), living, rtol=0, atol=2e-10)
    assert meter.checks <= CHECK_BOUND


def test_work_limit_gives_a_clean_no_exact_solution(monkeypatch):
    # With the work limit lowered below what the stiff solve needs, the solver stops there and says
    # why, as data the pipeline turns into a note ("no exact solution: ...").
    monkeypatch.setattr(forward, "MAX_EVALUATIONS", 300)
    meter = WorkMeter(bound=300 // forward.CANCEL_EVERY + 100)
    with pytest.raises(NoExactSolution, match="^no exact solution: .*work limit"):
        solve_exact(_illness_death(Exponential(0.02), hr=1e6), [1.0], strategies=("extreme",), cancel=meter)
    assert meter.checks <= meter.bound


def test_overflowing_rates_give_a_clean_no_exact_solution():
    # A Gompertz background so steep that its hazard overflows to inf within the horizon (finite at entry).
    model = _illness_death(Gompertz(rate=1.0, shape=12.0), horizon=60.0)  # 1e208 at 40, inf from 59.2
    with pytest.raises(NoExactSolution, match="^no exact solution: "):
        solve_exact(model, [1.0], strategies=("usual",), cancel=WorkMeter())


@pytest.mark.parametrize("edit", [("rate = 3.0e-5", "rate = 0.5"), ("onset = 0.7", "onset = 1e6")],
                         ids=["gompertz_rate_0.5", "hazard_ratio_1e6"])
def test_the_issue_cases_finish_in_a_run(edit, monkeypatch):
    # The two cases of issue 13 on the lanthic demo. With the solver's real limits the run gives an
    # exact column; with a work limit too small for the stiff solve it keeps the simulated outcomes
    # and says "no exact solution". Work is bounded by the counting cancel token either way.
    text = demo_path("lanthic").read_text().replace(*edit)
    if edit[0].startswith("rate"):
        text = text.replace("rate = 5.0e-5", "rate = 0.5")
    scenario = parse_scenario(text, base_dir=demo_path("lanthic").parent)
    meter = WorkMeter()
    res = run_scenario(scenario, patients=400, seed=3, workers=1, study=False, cancel=meter)
    assert res.exact_note == ""
    assert np.all(np.isfinite(res.outcomes["exact"]))
    assert meter.checks <= CHECK_BOUND
    monkeypatch.setattr(forward, "MAX_EVALUATIONS", 200)
    res = run_scenario(scenario, patients=400, seed=3, workers=1, study=False, cancel=WorkMeter())
    assert res.exact_note.startswith("no exact solution: ")
    assert res.outcomes["exact"].isna().all()
    assert np.all(np.isfinite(res.outcomes["mean"]))
