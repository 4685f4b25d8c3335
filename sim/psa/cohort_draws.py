"""Cycle-based results per parameter draw: the cohort traces modellers build, for the same draws as
the simulated and exact rows, so that the acceptability curve and EVPI can be compared between the
continuous-time result and each approximation (issue 14 item 4).

An approximation is a conversion (per-transition, competing-exit, matrix-exponential), a cycle length
in years and a within-cycle correction (start, end, half-cycle, simpson): :class:`CycleMethod`. Per
draw and strategy one trace per (conversion, cycle length) serves every correction
(:func:`sim.reference.cohort_trace`, :func:`sim.reference.trace_outcomes`; docs/methods.md,
'Cycle-based cohort traces'). Semi-Markov models need tunnel states, whose number depends on the
cycle length: they are left to the discretization study, and refused here.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..analysis import OUTCOMES
from ..model import Model
from ..problems import ValidationError
from ..reference import Conversion, Correction, cohort_trace, trace_outcomes
from .tables import cycle_label, draw_frame, sort_draw_table

__all__ = ["CycleMethod", "cycle_methods", "cycle_per_draw"]


@dataclass(frozen=True)
class CycleMethod:
    """One cycle-based approximation: conversion, cycle length (years) and correction."""

    conversion: str
    cycle_length: float
    correction: str

    def __post_init__(self) -> None:
        conversions = [c.value for c in Conversion]
        corrections = [c.value for c in Correction]
        if self.conversion not in conversions:
            raise ValidationError(("cycle_methods", "conversion"), f"must be one of {conversions}", self.conversion)
        if self.correction not in corrections:
            raise ValidationError(("cycle_methods", "correction"), f"must be one of {corrections}", self.correction)
        h = self.cycle_length
        if isinstance(h, bool) or not isinstance(h, (int, float, np.floating, np.integer)) or not 0 < h < np.inf:
            raise ValidationError(("cycle_methods", "cycle_length"), "must be a positive number of years", h)
        object.__setattr__(self, "cycle_length", float(h))

    @property
    def label(self) -> str:
        return cycle_label(self.conversion, self.cycle_length, self.correction)


def cycle_methods(conversions: Sequence[str], cycle_lengths: Sequence[float],
                  corrections: Sequence[str] = ("half-cycle",)) -> tuple[CycleMethod, ...]:
    """Every combination, in the order given."""
    return tuple(CycleMethod(c, float(h), k) for c in conversions for h in cycle_lengths for k in corrections)


def cycle_per_draw(models: Sequence[Model], draws: Sequence[int], methods: Sequence[CycleMethod],
                   strategies: tuple[str, ...] | None = None, tunnel_entry: str = "half-cycle") -> pd.DataFrame:
    """Cycle-based outcomes per draw, strategy and method (method column: the method's label)."""
    names = tuple(strategies or models[0].strategy_names)
    if methods and not models[0].is_markov:
        raise ValidationError(("cycle_methods",), "cycle-based results per draw need a Markov model (a semi-Markov "
                              "model needs tunnel states: use the discretization study)",
                              models[0].semi_markov_transitions())
    traces = sorted({(m.conversion, m.cycle_length) for m in methods})
    parts = []
    for s in names:
        values = {m.label: {o: np.empty(len(models)) for o in OUTCOMES} for m in methods}
        for d, model in enumerate(models):
            for conversion, h in traces:
                trace = cohort_trace(model, s, h, conversion, tunnel_entry=tunnel_entry)
                for m in methods:
                    if (m.conversion, m.cycle_length) == (conversion, h):
                        out = trace_outcomes(trace, m.correction)
                        for o in OUTCOMES:
                            values[m.label][o][d] = out[o]
        parts += [draw_frame(np.asarray(draws), s, m.label, values[m.label], 0) for m in methods]
    return sort_draw_table(parts, names)
