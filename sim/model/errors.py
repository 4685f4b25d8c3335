"""Errors of the model layer: validation errors (:class:`sim.problems.ValidationError`, hence
``ValueError``) whose problems use the scenario file's key names, with items of a list of tables
named by their ``name`` (``("transitions", "progression", "from")``,
``("strategies", "new therapy", "hazard_ratios", "progression")``)."""

from __future__ import annotations

from ..problems import ValidationError

__all__ = ["ModelError", "PopulationError", "ValuationError"]


class ModelError(ValidationError):
    """Invalid model (states, transitions, background mortality, horizon, strategies, or a relation
    between parts); :attr:`problems` lists every problem found."""


class PopulationError(ModelError):
    """Invalid entering population (entry ages, sex mix, initial state)."""


class ValuationError(ModelError):
    """Invalid valuation (utilities, costs, discount rates, willingness to pay)."""
