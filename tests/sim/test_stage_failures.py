"""A finished simulation is never lost (issue 13, item 3): when a stage after the simulation fails
(exact solution, estimates, error study), the run still returns the event log and the outcomes
already computed, identical to those of a run where nothing failed, and records the failed stage."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

import sim.pipeline.run as run_module
import sim.pipeline.stages as stages
from sim.engine import SimulationCancelled
from sim.io import load_scenario
from sim.io.demo import SCENARIO_DIR
from sim.pipeline import failure_text, run_scenario
from sim.problems import ValidationError

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
