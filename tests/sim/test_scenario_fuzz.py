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
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import tomlkit
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

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


def _schema_key(path: tuple) -> tuple:
    """The key path with list positions blanked: ``("states", 3, "name")`` -> ``("states", None, "name")``."""
    return tuple(None if isinstance(part, int) else part for part in path)


# Every key of every demo file, grouped by schema key: the items of a list (states, transitions,
# uncertainty entries, ...) run through the same checks. The sweep below gives every (file, schema
# key) group one case, and every schema key both a deletion and a bad value: where a schema key
# occurs in several files the two kinds alternate over them, where it occurs in one file that file
# gets both. A deletion takes a group's first list item, a bad value its last. (One parse of a demo
# file per case is the cost; the hypothesis test below samples every item of every file.)
GROUPS: dict[tuple[Path, tuple], list[tuple]] = {}
for _file, _path in KEYS:
    GROUPS.setdefault((_file, _schema_key(_path)), []).append(_path)
_FILES_OF: dict[tuple, list[Path]] = {}
for _file, _key in GROUPS:
    _FILES_OF.setdefault(_key, []).append(_file)
SWEEP: dict[int, list[tuple[Path, tuple, Any]]] = {0: [], 1: []}
for _i, ((_file, _key), _paths) in enumerate(GROUPS.items()):
    _files = _FILES_OF[_key]
    for _kind in ((0, 1) if len(_files) == 1 else (_files.index(_file) % 2,)):
        SWEEP[_kind].append((_file, _paths[0], DELETE) if _kind == 0
                            else (_file, _paths[-1], BAD_VALUES[_i % (len(BAD_VALUES) - 1)]))


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


def test_the_sweep_covers_every_key_of_every_file_and_both_kinds_of_every_schema_key() -> None:
    assert sum(len(paths) for paths in GROUPS.values()) == len(KEYS)
    covered = {(file, _schema_key(path)) for kind in SWEEP for file, path, _ in SWEEP[kind]}
    assert covered == set(GROUPS)
    for kind in SWEEP:
        assert {_schema_key(path) for _, path, _ in SWEEP[kind]} == set(_FILES_OF)


@pytest.mark.parametrize("kind", range(2))
def test_every_declared_key_deleted_or_given_a_wrong_value(kind: int) -> None:
    """Every schema key deleted (kind 0) and given a bad value (kind 1; the kinds of bad value rotate
    over the keys), in every demo file that has it (see SWEEP)."""
    for file, path, value in SWEEP[kind]:
        _check(file, path, value)


@settings(max_examples=100, deadline=2000, derandomize=True, database=None,
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
