"""What a run will do: the scenario's run settings with the caller's overrides, resolved once and
shared by the stages, the sinks and the command line's metadata."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..engine import chunk_size_for
from ..io import Scenario
from ..model import Model
from ..problems import ValidationError

__all__ = ["RunPlan"]


@dataclass(frozen=True)
class RunPlan:
    """The resolved settings of one run.

    patients : per strategy (the same patients in every strategy: common random numbers).
    seed : the seed that fixes every draw.
    workers : chunks computed at the same time.
    chunk_size : patients per chunk (:func:`sim.engine.chunk_size_for` of the scenario's
        ``run.chunk_size``: about 20 chunks for progress, never more than the scenario's size).
    cycle_lengths, tolerance, tunnel_entry : for the discretization-error study.
    """

    model: Model
    patients: int
    seed: int
    workers: int
    chunk_size: int
    cycle_lengths: tuple[float, ...]
    tolerance: float
    tunnel_entry: str = "half-cycle"

    def __post_init__(self) -> None:
        for key, low in (("patients", 1), ("workers", 1), ("chunk_size", 1), ("seed", 0)):
            value = getattr(self, key)
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
                raise ValidationError((key,), "must be a positive integer" if low else "must be an integer >= 0",
                                      value)
            object.__setattr__(self, key, int(value))  # numpy integers recorded as plain int

    @classmethod
    def from_scenario(cls, scenario: Scenario, *, patients: int | None = None, seed: int | None = None,
                      workers: int | None = None) -> "RunPlan":
        """The scenario's run settings, each overridden by an argument that is given."""
        run = scenario.run
        n = int(patients or run.patients)
        return cls(model=scenario.model, patients=n, seed=int(run.seed if seed is None else seed),
                   workers=int(workers or run.workers), chunk_size=chunk_size_for(n, int(run.chunk_size)),
                   cycle_lengths=tuple(run.cycle_lengths), tolerance=float(run.tolerance),
                   tunnel_entry=str(run.tunnel_entry))

    @property
    def strategies(self) -> tuple[str, ...]:
        return self.model.strategy_names

    def settings(self) -> dict:
        """The settings as recorded in :attr:`sim.pipeline.RunResults.settings`."""
        return {"patients": self.patients, "seed": self.seed, "workers": self.workers, "chunk_size": self.chunk_size,
                "cycle_lengths": self.cycle_lengths, "tolerance": self.tolerance, "tunnel_entry": self.tunnel_entry}
