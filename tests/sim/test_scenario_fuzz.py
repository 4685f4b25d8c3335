"""Property test of the scenario reader, generated from the schema: every key the schema declares for
the demo scenarios (present, or optional and absent) is replaced by bad values of many kinds, or
deleted. Each case must end in a clean :class:`ScenarioError` whose problems name the file and a key
path, or in an accepted scenario that a small simulation runs to the end. Never another exception.

``check`` decides what ``run`` can do (issue 13): a sample of the accepted cases goes through the
real pipeline (:func:`sim.pipeline.run_plan`: 50 patients, the exact solution, the estimates and the
error study at the largest cycle length) and must finish with every stage complete, each case within
a generous hypothesis deadline.
"""

from __future__ import annotations

import copy
import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import tomlkit
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from dataclasses import replace

from hypothesis import assume

from sim.engine import SimulationError, simulate
from sim.io.demo import SCENARIO_DIR
from sim.io.scenario import Scenario, ScenarioError, declared_keys, parse_scenario
from sim.pipeline import RunPlan, run_plan

FILES = sorted(SCENARIO_DIR.glob("*.toml"))
DOCS = {f: tomlkit.parse(f.read_text(encoding="utf-8")).unwrap() for f in FILES}
KEYS = [(f, path) for f in FILES for path in declared_keys(DOCS[f])]
DELETE = object()

# bad values of many kinds: wrong types, non-finite, signs and extremes, empty and long text
BAD_VALUES: list[Any] = [True, False, "text", "", "x" * 5000, [], [1.0, 2.0], ["a"], {}, {"x": 1}, math.nan,
                         math.inf, -math.inf, -1.0, 0, 1e300, -1e300, 1e-300, 7, 2.5, DELETE]
# document-wide problems have no key of their own: a missing top-level key, text that is not TOML
_WHOLE_FILE = ("missing required key", "not valid TOML")


def _mutate(doc: dict, path: tuple, value: Any) -> dict:
    out = copy.deepcopy(doc)
    node = out
    for part in path[:-1]:
        node = node[part]
    last = path[-1]
    if value is DELETE:
        if isinstance(node, list):
            if last < len(node):
                del node[last]
        else:
            node.pop(last, None)
    else:
        node[last] = value
    return out


def _read(file: Path, path: tuple, value: Any) -> Scenario | None:
    """The mutated scenario if it is accepted; ``None`` after checking a refusal is clean."""
    try:
        text = tomlkit.dumps(_mutate(DOCS[file], path, value))
    except (TypeError, ValueError):  # not representable in TOML (e.g. a list mixing tables and numbers)
        return None
    try:
        return parse_scenario(text, file)  # the file's folder: relative life tables resolve
    except ScenarioError as err:
        for p in err.problems:
            assert p.file == str(file), str(err)
            assert p.path or p.rule.startswith(_WHOLE_FILE), f"{path}={value!r}: no key in {p}"
        return None


def _check(file: Path, path: tuple, value: Any) -> None:
    s = _read(file, path, value)
    if s is None:
        return
    try:
        run = simulate(s.model, 20, seed=1, max_transitions=500)
    except SimulationError as err:  # the engine's own clear stop for a runaway chain of moves
        assert "transitions before the horizon" in str(err), f"{path}={value!r}: {err}"
        return
    assert len(run.patients) == 20 * len(s.model.strategies)
    assert np.isfinite(run.patients["exit_time"]).all()


def test_the_schema_declares_many_keys() -> None:
    assert len(KEYS) > 250  # every demo key, and the optional ones a user could add


@pytest.mark.parametrize("kind", range(2))
def test_every_declared_key_deleted_or_given_a_wrong_value(kind: int) -> None:
    """Every key at least twice: deleted, and given a bad value (the kinds rotate over the keys)."""
    for i, (file, path) in enumerate(KEYS):
        value = DELETE if kind == 0 else BAD_VALUES[i % (len(BAD_VALUES) - 1)]
        _check(file, path, value)


@settings(max_examples=200, deadline=2000, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(key=st.sampled_from(KEYS), value=st.sampled_from(BAD_VALUES) | st.floats() | st.integers(-10**20, 10**20)
       | st.text(max_size=20) | st.lists(st.floats(), max_size=3))
def test_any_declared_key_with_any_bad_value(key: tuple, value: Any) -> None:
    _check(*key, value)


_VALUES = st.sampled_from(BAD_VALUES) | st.floats() | st.integers(-10**20, 10**20) | st.text(max_size=20)


@settings(max_examples=6, deadline=20_000, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(key=st.sampled_from(KEYS), value=_VALUES)
def test_what_check_accepts_runs_through_the_pipeline(key: tuple, value: Any) -> None:
    s = _read(*key, value)
    assume(s is not None)
    plan = RunPlan.from_scenario(s, patients=50, workers=1)
    plan = replace(plan, cycle_lengths=(max(plan.cycle_lengths),))  # one trace per strategy: a few seconds
    try:
        results = run_plan(s, plan, study=True)
    except SimulationError as err:  # the engine's own clear stop for a runaway chain of moves
        assert "transitions before the horizon" in str(err), f"{key}={value!r}: {err}"
        return
    assert results.complete, f"{key}={value!r}: {results.failure_lines()}"
    assert results.study is not None and results.survival is not None
    assert np.isfinite(results.simulation.patients["exit_time"]).all()
    assert np.isfinite(results.outcomes["mean"]).all()
