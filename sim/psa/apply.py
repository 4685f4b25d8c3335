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

from ..io.scenario import Scenario
from ..io.scenario.substitute import model_with_values
from ..io.scenario.substitute import point_values as _point_values
from ..model import Model
from ..uncertainty import UncertainInput

__all__ = ["uncertain_parameters", "model_for_draw", "point_values"]


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
