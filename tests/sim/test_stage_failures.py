"""A finished simulation is never lost (issue 13, item 3): when a stage after the simulation fails
(exact solution, estimates, error study), the run still returns the event log and the outcomes
already computed, identical to those of a run where nothing failed, and records the failed stage and
whether the user's input caused it (the command line then exits 2, else 1)."""

from __future__ import annotations

import pickle
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

import sim.pipeline.run as run_module
import sim.pipeline.stages as stages
from sim.engine import SimulationCancelled, SimulationError
from sim.io import load_scenario
from sim.io.demo import SCENARIO_DIR
from sim.pipeline import failure_text, run_scenario
from sim.pipeline.stages import StageFailure
from sim.problems import ValidationError
from sim.reference import NoExactSolution

MARKOV = SCENARIO_DIR / "constant_hazard_risk_vs_rate.toml"
PATIENTS = 400


def _boom(*args, **kwargs):
    raise RuntimeError("solver exploded\nwith a second line nobody needs")


@pytest.fixture(scope="module")
def scenario():
    return load_scenario(MARKOV)


@pytest.fixture(scope="module")
def clean(scenario):
    return run_scenario(scenario, patients=PATIENTS, study=True)


def test_a_clean_run_is_complete(clean) -> None:
    assert clean.complete and clean.failed == {} and clean.failure_lines() == []


def _failing(monkeypatch, stage: str, how=_boom) -> None:
    """The run's stages with ``stage`` replaced by one that raises at its start."""
    changed = tuple(replace(s, run=how) if s.name == stage else s for s in stages.STAGES)
    assert changed != stages.STAGES
    monkeypatch.setattr(run_module, "STAGES", changed)


@pytest.mark.parametrize("stage", ["exact", "estimates", "study"])
def test_a_failed_later_stage_keeps_the_simulation_and_outcomes(scenario, clean, monkeypatch, stage: str) -> None:
    _failing(monkeypatch, stage)
    got = run_scenario(scenario, patients=PATIENTS, study=True)
    assert not got.complete
    assert got.failed == {stage: "RuntimeError: solver exploded"}
    assert got.failure_lines() == [f"{stage} failed: RuntimeError: solver exploded"]
    # the simulation and the simulated outcomes are those of the clean run, bit for bit
    pd.testing.assert_frame_equal(got.simulation.events, clean.simulation.events)
    pd.testing.assert_frame_equal(got.simulation.patients, clean.simulation.patients)
    cols = ["strategy", "outcome", "mean", "mcse", "n"]
    pd.testing.assert_frame_equal(got.outcomes[cols], clean.outcomes[cols])
    assert stage in got.seconds  # it ran (and failed); the stages after it ran too
    if stage == "exact":
        assert got.outcomes["exact"].isna().all() and got.outcomes["z"].isna().all()
        assert got.exact_occupancy is None
        assert got.exact_note == "no exact solution: the exact stage failed (RuntimeError: solver exploded)"
        assert got.survival is not None and got.study is not None
        np.testing.assert_array_equal(got.grid, clean.grid)
    if stage == "estimates":
        assert got.survival is None and got.occupancy is None
        pd.testing.assert_frame_equal(got.outcomes, clean.outcomes)
        assert got.study is not None
    if stage == "study":
        assert got.study is None
        pd.testing.assert_frame_equal(got.outcomes, clean.outcomes)
        pd.testing.assert_frame_equal(got.survival, clean.survival)


def test_a_failure_in_the_simulation_itself_is_raised(scenario, monkeypatch) -> None:
    """Nothing is finished yet: the error propagates (the command line reports it)."""
    _failing(monkeypatch, "outcomes")
    with pytest.raises(RuntimeError, match="solver exploded"):
        run_scenario(scenario, patients=PATIENTS, study=False)


def test_a_cancel_request_in_a_later_stage_is_not_a_failure(scenario, monkeypatch) -> None:
    def cancelled(*args, **kwargs):
        raise SimulationCancelled("error study cancelled")

    _failing(monkeypatch, "study", cancelled)
    with pytest.raises(SimulationCancelled):
        run_scenario(scenario, patients=PATIENTS, study=True)


def test_failure_text_is_one_line() -> None:
    assert failure_text(RuntimeError("a\nb")) == "RuntimeError: a"
    assert failure_text(MemoryError()) == "MemoryError"
    err = ValidationError(("run", "cycle_lengths", 0), "must be positive", -1)
    assert failure_text(err) == str(err)  # an input problem is shown as the problem it is


# ----------------------------------------------- input-caused or a bug (the command line's exit code)
def _input_problem(*args, **kwargs):
    raise ValidationError(("run", "cycle_lengths", 0), "must give at most 100,000 cycles", 1e-300)


def _no_exact(*args, **kwargs):
    raise NoExactSolution("the forward equations need more than 50,000 steps (a stiff system)")


def _runaway(*args, **kwargs):
    raise SimulationError("a patient made 500 transitions before the horizon")


@pytest.mark.parametrize("how", [_input_problem, _no_exact, _runaway])
@pytest.mark.parametrize("stage", ["exact", "estimates", "study"])
def test_a_later_stage_failed_by_the_input_says_so(scenario, monkeypatch, stage: str, how) -> None:
    _failing(monkeypatch, stage, how)
    got = run_scenario(scenario, patients=PATIENTS, study=True)
    assert not got.complete and got.failed_by_input
    assert isinstance(got.failed[stage], StageFailure) and got.failed[stage].by_input
    assert got.simulation is not None and len(got.simulation.events) > 0


def test_a_bug_in_a_later_stage_is_not_the_input(scenario, monkeypatch) -> None:
    _failing(monkeypatch, "study")
    got = run_scenario(scenario, patients=PATIENTS, study=True)
    assert not got.complete and not got.failed_by_input
    assert got.failed["study"].by_input is False


def test_an_input_failure_beside_a_bug_is_a_bug(scenario, monkeypatch) -> None:
    changed = tuple(replace(s, run=_input_problem) if s.name == "exact" else
                    replace(s, run=_boom) if s.name == "study" else s for s in stages.STAGES)
    monkeypatch.setattr(run_module, "STAGES", changed)
    got = run_scenario(scenario, patients=PATIENTS, study=True)
    assert set(got.failed) == {"exact", "study"} and not got.failed_by_input


def test_a_clean_run_has_no_input_failure(clean) -> None:
    assert not clean.failed_by_input


def test_stage_failure_is_the_text_and_keeps_its_cause_through_pickle() -> None:
    f = StageFailure("exact failed: x", by_input=True)
    assert f == "exact failed: x" and str(f) == "exact failed: x"
    back = pickle.loads(pickle.dumps(f))
    assert back == f and back.by_input is True
    assert pickle.loads(pickle.dumps(StageFailure("y"))).by_input is False
