"""How to run a scenario: patients per strategy, seed, worker threads, chunk size, the cycle lengths of
the discretization study and its tolerance. A frozen data class that checks itself on construction
(problems under ``("run", key)``, the scenario file's ``[run]`` table)."""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any

from .checks import Problems, number, string
from .errors import ModelError

__all__ = ["RunSettings", "MAX_WORKERS", "TUNNEL_ENTRIES"]

MAX_WORKERS = 64
TUNNEL_ENTRIES = ("half-cycle", "boundary")
"""The tunnel-entry rules of the cycle-based traces (``sim.reference.cohort.TunnelEntry``), default first."""


def _cycle_lengths(found: Problems, values: Any) -> tuple[float, ...] | None:
    path = ("run", "cycle_lengths")
    if isinstance(values, (str, bytes, Mapping)) or not isinstance(values, Iterable):
        found.add(path, "must be a non-empty list of durations", values)
        return None
    items = list(values)
    if not items:
        found.add(path, "must be a non-empty list of durations", values)
        return None
    out = [found.check(number, (*path, i), v, minimum=0.0, strict_min=True, error=ModelError)
           for i, v in enumerate(items)]
    return None if None in out else tuple(out)


@dataclass(frozen=True)
class RunSettings:
    """How to run a scenario.

    Parameters
    ----------
    patients : simulated patients per strategy, a whole number >= 1.
    seed : entropy of the run's ``numpy.random.SeedSequence``, a whole number >= 0.
    workers : worker threads, 1 to 64.
    chunk_size : patients simulated together, a whole number >= 1.
    cycle_lengths : cycle lengths in years compared by the discretization study; non-empty, each
        finite and > 0 (kept as a tuple of floats).
    tolerance : acceptable discretization error of the study, > 0.
    tunnel_entry : how the study's traces time entries into tunnel states (semi-Markov models), one
        of :data:`TUNNEL_ENTRIES`: ``"half-cycle"`` (default) or ``"boundary"``.

    Raises
    ------
    ModelError
        Listing every problem, at ``("run", key)`` (``("run", "cycle_lengths", i)`` for one length).
    """

    patients: int = 100_000
    seed: int = 1
    workers: int = 2
    chunk_size: int = 100_000
    cycle_lengths: tuple[float, ...] = (1 / 52, 1 / 12, 1 / 4, 1 / 2, 1.0, 2.0)
    tolerance: float = 0.01
    tunnel_entry: str = TUNNEL_ENTRIES[0]

    def __post_init__(self) -> None:
        found = Problems()

        def whole(key: str, **bounds: Any) -> int | None:
            return found.check(number, ("run", key), getattr(self, key), integer=True, error=ModelError, **bounds)

        checked = {
            "patients": whole("patients", minimum=1),
            "seed": whole("seed", minimum=0),
            "workers": whole("workers", minimum=1, maximum=MAX_WORKERS),
            "chunk_size": whole("chunk_size", minimum=1),
            "cycle_lengths": _cycle_lengths(found, self.cycle_lengths),
            "tolerance": found.check(number, ("run", "tolerance"), self.tolerance, minimum=0.0, strict_min=True,
                                     error=ModelError),
            "tunnel_entry": found.check(string, ("run", "tunnel_entry"), self.tunnel_entry, choices=TUNNEL_ENTRIES,
                                        error=ModelError),
        }
        found.raise_if_any(ModelError)
        for key, value in checked.items():
            object.__setattr__(self, key, value)
