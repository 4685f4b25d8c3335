"""Parameter draws applied to the model: which parameters a scenario declares uncertain
(:func:`uncertain_parameters`), their values in the deterministic run (:func:`point_values`) and the
validated model for one draw (:func:`model_for_draw`).

Keys are the parameter names of :func:`sim.io.scenario.parameters` (``"transitions[0].scale"``,
``"valuation.utilities.well"``, ``"strategies[1].hazard_ratios.onset"``), the columns of
:func:`sim.uncertainty.draw_table`. Values are as the scenario file writes them (a hazard parameter in
its table's ``unit``; ``events`` of an exponential written as events per ``per``), so pass the
:class:`~sim.io.scenario.Scenario` whenever its file uses units other than years or constant hazards
given as counts or risks; a bare :class:`~sim.model.Model` understands the keys of
:func:`sim.io.scenario.document_from_model` (everything in years, constant hazards as ``rate``).
"""

from __future__ import annotations

from typing import Mapping

import pandas as pd
import tomlkit

from ..io.scenario import Scenario, parameters
from ..io.scenario.substitute import model_with_values
from ..io.scenario.substitute import point_values as _point_values
from ..model import Model
from ..uncertainty import UncertainInput

__all__ = ["uncertain_parameters", "model_for_draw", "point_values", "describe_uncertainty", "inputs_table"]


def uncertain_parameters(source: Scenario | Model) -> tuple[UncertainInput, ...]:
    """The distributions the scenario's ``[[uncertainty]]`` section declares, in file order (each
    with its parameter keys); a bare model declares none."""
    if isinstance(source, Scenario):
        return tuple(source.uncertainty)
    if isinstance(source, Model):
        return ()
    raise TypeError(f"expected a Scenario or a Model, got {type(source).__name__}")


def point_values(source: Scenario | Model) -> dict[str, float]:
    """Every numeric parameter's value in the deterministic run, by key (a parameter the file gives
    only by a distribution: the distribution's mean)."""
    return _point_values(source)


def model_for_draw(source: Scenario | Model, values: Mapping[str, float]) -> Model:
    """A new validated model: ``source``'s with the parameters ``values`` (key -> value, e.g. one row of
    :func:`sim.uncertainty.draw_table`) set; the others keep their point values. About a millisecond
    for a handful of parameters: only the parts holding a changed parameter are read again.

    Raises
    ------
    sim.io.scenario.ScenarioError
        A key that names no parameter, or a value that breaks the parameter's rule (key, value, rule).
    """
    return model_with_values(source, {k: float(v) for k, v in values.items()})


def _num(x: float) -> str:
    return f"{x:,.0f}" if 1e3 <= abs(x) < 1e9 else f"{x:.4g}"


def describe_uncertainty(scenario: Scenario) -> list[str]:
    """The uncertain inputs in words, for ``hazardtrace check``: each distribution with its
    parameters (and, for a method-of-moments fit, what it was fitted from), the mean and 95% interval
    of each parameter, and its point value in the deterministic run. No lines without uncertain
    inputs."""
    specs = uncertain_parameters(scenario)
    if not specs:
        return []
    points = point_values(scenario)
    raw_points = _file_values(scenario)
    lines = [f"Uncertain inputs ({sum(len(u.keys) for u in specs)} parameters; draws reproducible from seed "
             f"{scenario.run.seed}):"]
    for u in specs:
        d = u.distribution
        head = u.keys[0] if u.univariate else f"[{', '.join(u.keys)}]"
        fitted = ""
        if u.fitted_from:
            given = ", ".join(f"{k} {_num(v) if isinstance(v, float) else v}" for k, v in u.fitted_from.items())
            moments = set(u.fitted_from) in ({"mean", "se"}, {"mean", "sample_size"})
            fitted = f" ({'method of moments from' if moments else 'from'} {given})"
        lines.append(f"  {head}: {d.describe()}{fitted}")
        for key, mean, (lo, hi) in zip(u.keys, u.means().values(), u.intervals().values()):
            where = "" if u.univariate else f"    {key}: "
            if key in raw_points:
                point = f"point value {_num(points[key])}"
                if not lo <= points[key] <= hi:
                    point += " (outside the 95% interval)"
            else:
                point = "no point value in the file: the deterministic run uses the mean"
            lines.append(f"{where or '    '}mean {_num(mean)}, 95% interval {_num(lo)} to {_num(hi)}; {point}")
        if u.description:
            lines.append(f"    ({u.description})")
    return lines


def _file_values(scenario: Scenario) -> set[str]:
    """The keys of the parameters the file itself gives a value."""
    doc = tomlkit.parse(scenario.text).unwrap() if scenario.text else {}
    return {p.key for p in parameters(doc)}


INPUT_COLUMNS = ("parameter", "group", "distribution", "parameters", "fitted_from", "mean", "low_95", "high_95",
                 "point_value", "point_from_file", "description")


def inputs_table(scenario: Scenario) -> pd.DataFrame:
    """One row per uncertain parameter, for export beside a probabilistic analysis: its key, the index
    of its ``[[uncertainty]]`` entry (``group``), the distribution and its native parameters (as
    text), what a fit started from, the mean and 95% interval, the point value of the deterministic
    run and whether the file gives it (else the mean stands in). Empty (with the columns) without
    uncertain inputs."""
    specs = uncertain_parameters(scenario)
    points = point_values(scenario) if specs else {}
    in_file = _file_values(scenario) if specs else set()
    rows = []
    for g, u in enumerate(specs):
        params = u.distribution.describe()
        fitted = ", ".join(f"{k} {v}" for k, v in u.fitted_from.items())
        for key, mean, (lo, hi) in zip(u.keys, u.means().values(), u.intervals().values()):
            rows.append((key, g, u.distribution.family, params, fitted, mean, lo, hi, points[key], key in in_file,
                         u.description))
    return pd.DataFrame(rows, columns=list(INPUT_COLUMNS))
