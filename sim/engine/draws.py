"""Many parameter sets in one engine call: a block of parameter draws simulated together.

A probabilistic analysis runs the same model structure under many parameter draws. Draw ``d`` of a
block owns patients ``d * n .. (d + 1) * n - 1`` (``n`` per draw). :func:`simulate_draws` simulates
the whole block in one call: every patient carries its draw's parameters, as per-patient arrays
inside the engine, so 1,000 draws x 1,000 patients are one vectorised simulation, not 1,000 calls.

Per competing exit, the draws' hazards are compared once (:class:`DrawExit`):

- the same hazard in every draw: one evaluation for all lanes, as in a plain run;
- hazards of one family whose numbers differ (exponential, Weibull, log-logistic, log-normal,
  gamma, Gompertz and Gompertz-Makeham with any slope, piecewise-constant with shared band starts),
  each optionally times a hazard ratio that may differ too, or a ratio that differs on one shared
  base of any family:
  one call of the family's kernel in which every lane carries its draw's numbers
  (:class:`sim.hazards.LaneHazards`; hazard ratios as ``e / hr`` per lane, Bender, Augustin &
  Blettner 2005, Stat Med 24(11):1713-1723). Lanes whose ``e / hr`` over- or underflowed go
  through their own hazard (its edge handling);
- anything else (piecewise band starts that differ, waning hazard ratios, hazards with a floor,
  mixed families): lanes grouped by their draw's hazard, one evaluation per distinct hazard.

Every lane goes through exactly the arithmetic of its draw's own hazard (each family's own
conditional time is its per-lane kernel with its own numbers: the same IEEE operations on the same
operands, iterations that stop lane by lane; only the grouping of lanes into arrays differs), and
the random numbers are keyed on (seed, patient, stream, occurrence) as always, so draw ``d``'s
histories are bit-identical to :func:`sim.engine.simulate_range` of its own model over its own
patients (tested). Populations
and horizons that differ between draws are drawn per draw from the same attribute words.
"""

from __future__ import annotations

from dataclasses import dataclass
from collections.abc import Sequence

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..hazards import Hazard, LaneHazards
from ..model.multistate import Clock, Model, ResolvedExit
from .histories import _assemble, _code_dtype, _PatientTable, _simulate_chunk, _validate_run
from .rng import key_from_seed

__all__ = ["DrawExit", "DrawSet", "simulate_draws"]


@dataclass(frozen=True)
class DrawExit:
    """One competing exit of a state whose hazard may differ between the draws of a block.

    ``unique`` holds the distinct hazards, ``code`` (draws, sexes) which one each draw and sex code
    uses; ``kind`` is how lanes are evaluated (see the module docstring): ``"one"`` (one hazard),
    ``"lanes"`` (per-lane numbers, ``lanes``) or ``"group"`` (one evaluation per distinct hazard).
    """

    index: int
    slot: int
    name: str
    source: int
    target: int
    clock: Clock
    hazards: tuple[Hazard, ...]  # the first draw's, per sex code
    is_background: bool
    sex_specific: bool
    unique: tuple[Hazard, ...]
    code: NDArray[np.int64]
    kind: str
    lanes: LaneHazards | None = None  # the unique hazards as one per-lane evaluation ("lanes")

    @classmethod
    def of(cls, exits: Sequence[ResolvedExit]) -> "DrawExit":
        """The exit across draws (``exits[d]`` is draw d's)."""
        first = exits[0]
        unique: list[Hazard] = []
        where: dict[object, int] = {}
        code = np.empty((len(exits), len(first.hazards)), dtype=np.int64)
        for d, ex in enumerate(exits):
            for c, h in enumerate(ex.hazards):
                try:  # equal hazards (frozen data classes) are evaluated once
                    key: object = (0, h)
                    hash(key)
                except TypeError:  # a hazard that cannot be hashed: by identity
                    key = (1, id(h))
                if key not in where:
                    where[key] = len(unique)
                    unique.append(h)
                code[d, c] = where[key]
        sex_specific = any(len(set(map(id, ex.hazards))) > 1 for ex in exits)
        fields = dict(index=first.index, slot=first.slot, name=first.name, source=first.source, target=first.target,
                      clock=first.clock, hazards=first.hazards, is_background=first.is_background,
                      sex_specific=sex_specific, unique=tuple(unique), code=code)
        if len(unique) == 1:
            return cls(kind="one", **fields)
        lanes = LaneHazards.of(unique)
        if lanes is not None:
            return cls(kind="lanes", lanes=lanes, **fields)
        return cls(kind="group", **fields)

    def latent(self, x: NDArray[np.float64], e: NDArray[np.float64], sex: NDArray[np.int8] | None,
               draw: NDArray[np.int64]) -> NDArray[np.float64]:
        """Conditional event times of lanes with clocks ``x``, draws ``e``, sex codes ``sex`` (None:
        code 0) and block draw indexes ``draw`` (under the kernels' error state)."""
        if self.kind == "one":
            return self.unique[0]._conditional_time(x, e)
        codes = self.code[draw, 0] if sex is None else self.code[draw, sex]
        if self.lanes is not None:
            t, lost = self.lanes.times(codes, x, e)
            if lost is not None and np.any(lost):  # e / hr over- or underflowed: the hazard's own edge handling
                t = np.array(t, dtype=np.float64)
                t[lost] = self._grouped(x[lost], e[lost], codes[lost])
            return t
        return self._grouped(x, e, codes)

    def _grouped(self, x: NDArray, e: NDArray, codes: NDArray) -> NDArray:
        out = np.empty_like(x)
        if len(self.unique) <= 8:  # a few hazards (e.g. one per sex): a mask each
            for c, h in enumerate(self.unique):
                m = codes == c
                if m.any():
                    out[m] = h._conditional_time(x[m], e[m])
            return out
        order = np.argsort(codes, kind="stable")
        sorted_codes = codes[order]
        cuts = np.flatnonzero(np.diff(sorted_codes)) + 1
        for lanes in np.split(order, cuts):
            if lanes.size:
                out[lanes] = self.unique[int(codes[lanes[0]])]._conditional_time(x[lanes], e[lanes])
        return out


class DrawSet:
    """The draws of a block: their models, ``n`` patients per draw, the block's first draw."""

    def __init__(self, models: Sequence[Model], n_per_draw: int, first_draw: int) -> None:
        self.models, self.n, self.first_draw = list(models), int(n_per_draw), int(first_draw)
        first = self.models[0]
        self.same_population = all(m.population == first.population and m.horizon == first.horizon
                                   for m in self.models)

    @property
    def first_patient(self) -> int:
        return self.first_draw * self.n

    def draw_of(self, start: int, stop: int) -> NDArray[np.int64]:
        """Block draw index of patients ``start .. stop - 1``."""
        return (np.arange(start, stop, dtype=np.int64) - self.first_patient) // self.n

    def segments(self, start: int, stop: int) -> list[tuple[int, int, Model]]:
        """``(a, b, model)``: patients a .. b - 1 share a population and horizon (one segment when
        every draw has the same)."""
        if self.same_population:
            return [(start, stop, self.models[0])]
        out = []
        for d in range(int(self.draw_of(start, start + 1)[0]), int(self.draw_of(stop - 1, stop)[0]) + 1):
            a = max(start, self.first_patient + d * self.n)
            b = min(stop, self.first_patient + (d + 1) * self.n)
            out.append((a, b, self.models[d]))
        return out

    def plan(self, strategy: str) -> list[list[DrawExit]]:
        """Per state, its exits across the draws; the draws must share the model's structure."""
        per_draw = [m.resolve(strategy) for m in self.models]
        first = per_draw[0]
        for d, plan in enumerate(per_draw):
            same = len(plan) == len(first) and all(
                [(e.index, e.slot, e.target, e.clock, len(e.hazards)) for e in a]
                == [(e.index, e.slot, e.target, e.clock, len(e.hazards)) for e in b] for a, b in zip(plan, first))
            if not same or self.models[d].state_names != self.models[0].state_names:
                raise ValueError(f"draw {self.first_draw + d} changes the model's structure (states, exits or "
                                 "clocks); a block of draws must share it")
        return [[DrawExit.of([plan[s][j] for plan in per_draw]) for j in range(len(first[s]))]
                for s in range(len(first))]


def simulate_draws(models: Sequence[Model], seed: int, n_per_draw: int, *, first_draw: int = 0,
                   strategies: tuple[str, ...] | None = None,
                   max_transitions: int = 10_000) -> tuple[pd.DataFrame, pd.DataFrame]:
    """``(events, patients)`` of a block of parameter draws in one call.

    Parameters
    ----------
    models : one model per draw of the block (the same states, transitions, clocks and strategies;
        any parameter may differ).
    seed : the run's seed.
    n_per_draw : patients per draw.
    first_draw : the block's first draw number: draw ``first_draw + i`` simulates patients
        ``(first_draw + i) * n_per_draw ..`` with ``models[i]``.

    Returns
    -------
    The tables of :func:`sim.engine.simulate_range` over the block's patients (rows by strategy,
    then patient); the rows of each draw equal those of ``simulate_range(models[i], seed, ...)`` over
    its own patients, bit for bit.
    """
    if not models:
        raise ValueError("simulate_draws needs at least one model")
    for key, value, low in (("n_per_draw", n_per_draw, 1), ("first_draw", first_draw, 0)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
            raise ValueError(f"{key} must be an integer >= {low}, got {value!r}")
    draws = DrawSet(models, n_per_draw, first_draw)
    model = draws.models[0]
    total = len(draws.models) * draws.n
    names = _validate_run(model, total, total, 1, strategies)
    start = draws.first_patient
    table = _PatientTable(start, total, len(names), _code_dtype(len(model.state_names)))
    plans = [draws.plan(nm) for nm in names]
    out = _simulate_chunk(model, plans, key_from_seed(seed), start, start + total, max_transitions, table, draws)
    return _assemble(model, names, [out], table)
