"""Who enters the model: entry-age distributions and the sex mix.

Every distribution maps a uniform u in (0, 1] to an age by its quantile function (so the engine can
draw ages from counter-based uniforms) and offers quadrature nodes for averaging exact solutions over
the entry-age distribution: E[f(A)] = integral_0^1 f(F^-1(u)) du, by Gauss-Legendre in u.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np
from numpy.typing import NDArray
from scipy import stats

from .checks import Problems, number, number_map, string
from .errors import PopulationError
from .frozen import FrozenMap

__all__ = [
    "EntryAge", "FixedAge", "UniformAge", "NormalAge", "EmpiricalAge", "Population",
    "PopulationError",
]


class EntryAge(Protocol):
    """Entry-age distribution on attained age in years."""

    def ppf(self, u: NDArray[np.float64]) -> NDArray[np.float64]: ...
    def nodes(self, n: int = 24) -> tuple[NDArray[np.float64], NDArray[np.float64]]: ...
    @property
    def mean(self) -> float: ...
    @property
    def low(self) -> float: ...
    @property
    def high(self) -> float: ...


ENTRY_AGE = ("population", "entry_age")
MAX_AGE = 130.0


def _age(found: Problems, key: str | tuple, value: object) -> float | None:
    """An attained age in [0, 130] years at ``population.entry_age.<key>``, or None (recorded)."""
    path = (*ENTRY_AGE, *((key,) if isinstance(key, str) else key))
    return found.check(number, path, value, minimum=0.0, maximum=MAX_AGE, error=PopulationError)


def _set(obj: object, **values: object) -> None:
    for name, value in values.items():
        object.__setattr__(obj, name, value)


def _low_below_high(found: Problems, low: float | None, high: float | None) -> None:
    if low is not None and high is not None and not high > low:
        found.add((*ENTRY_AGE, "high"), f"must be > entry_age.low ({low!r})", high)


def _quantile_nodes(ppf, n: int) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Gauss-Legendre nodes on u in (0, 1) mapped through the quantile function; weights sum to 1."""
    x, w = np.polynomial.legendre.leggauss(n)
    return ppf(0.5 * (x + 1.0)), 0.5 * w


@dataclass(frozen=True)
class FixedAge:
    """Everyone enters at ``age``."""

    age: float

    def __post_init__(self) -> None:
        found = Problems()
        _set(self, age=_age(found, "age", self.age))
        found.raise_if_any(PopulationError)

    def ppf(self, u: NDArray[np.float64]) -> NDArray[np.float64]:
        return np.full(np.shape(u), self.age)

    def nodes(self, n: int = 24) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        return np.array([self.age]), np.array([1.0])

    mean = property(lambda self: self.age)
    low = property(lambda self: self.age)
    high = property(lambda self: self.age)


@dataclass(frozen=True)
class UniformAge:
    """Entry age uniform on [low, high]."""

    low: float
    high: float

    def __post_init__(self) -> None:
        found = Problems()
        low, high = _age(found, "low", self.low), _age(found, "high", self.high)
        _low_below_high(found, low, high)
        found.raise_if_any(PopulationError)
        _set(self, low=low, high=high)

    def ppf(self, u: NDArray[np.float64]) -> NDArray[np.float64]:
        return self.low + (self.high - self.low) * np.asarray(u, dtype=float)

    def nodes(self, n: int = 24) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        return _quantile_nodes(self.ppf, n)

    @property
    def mean(self) -> float:
        return 0.5 * (self.low + self.high)


@dataclass(frozen=True)
class NormalAge:
    """Normal entry age with mean ``mu`` (the scenario key ``mean``) and ``sd``, truncated to
    [low, high]."""

    mu: float
    sd: float
    low: float
    high: float

    def __post_init__(self) -> None:
        found = Problems()
        low, high = _age(found, "low", self.low), _age(found, "high", self.high)
        mu = _age(found, "mean", self.mu)
        sd = found.check(number, (*ENTRY_AGE, "sd"), self.sd, minimum=0.0, strict_min=True, error=PopulationError)
        _low_below_high(found, low, high)
        found.raise_if_any(PopulationError)
        _set(self, mu=mu, sd=sd, low=low, high=high)

    @property
    def _dist(self):
        a, b = (self.low - self.mu) / self.sd, (self.high - self.mu) / self.sd
        return stats.truncnorm(a, b, loc=self.mu, scale=self.sd)

    def ppf(self, u: NDArray[np.float64]) -> NDArray[np.float64]:
        return np.clip(self._dist.ppf(np.asarray(u, dtype=float)), self.low, self.high)

    def nodes(self, n: int = 24) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        return _quantile_nodes(self.ppf, n)

    @property
    def mean(self) -> float:
        return float(self._dist.mean())


def _number_list(found: Problems, key: str, values: object) -> list[object] | None:
    if isinstance(values, (str, bytes, Mapping)) or not isinstance(values, Iterable):
        found.add((*ENTRY_AGE, key), "must be a non-empty list of numbers", values)
        return None
    items = list(values)
    if not items:
        found.add((*ENTRY_AGE, key), "must be a non-empty list of numbers", values)
        return None
    return items


@dataclass(frozen=True)
class EmpiricalAge:
    """Discrete entry ages ``ages`` with relative ``weights`` (e.g. a cohort's observed ages); both
    are kept as tuples of floats."""

    ages: tuple[float, ...]
    weights: tuple[float, ...]

    def __post_init__(self) -> None:
        found = Problems()
        ages, weights = _number_list(found, "ages", self.ages), _number_list(found, "weights", self.weights)
        if ages is not None and weights is not None and len(ages) != len(weights):
            found.add((*ENTRY_AGE, "weights"), f"must have one weight per age ({len(ages)})", weights)
        ages = [_age(found, ("ages", i), a) for i, a in enumerate(ages or ())]
        weights = [found.check(number, (*ENTRY_AGE, "weights", i), w, minimum=0.0, error=PopulationError)
                   for i, w in enumerate(weights or ())]
        if not found and sum(weights) <= 0:
            found.add((*ENTRY_AGE, "weights"), "must not be all 0", list(self.weights))
        found.raise_if_any(PopulationError)
        _set(self, ages=tuple(ages), weights=tuple(weights))

    @property
    def _cum(self) -> NDArray[np.float64]:
        w = np.asarray(self.weights)
        return np.cumsum(w) / w.sum()

    def ppf(self, u: NDArray[np.float64]) -> NDArray[np.float64]:
        idx = np.searchsorted(self._cum, np.asarray(u, dtype=float), side="left")
        return np.asarray(self.ages)[np.minimum(idx, len(self.ages) - 1)]

    def nodes(self, n: int = 24) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        w = np.asarray(self.weights)
        keep = w > 0
        return np.asarray(self.ages)[keep], (w / w.sum())[keep]

    @property
    def mean(self) -> float:
        return float(np.average(self.ages, weights=self.weights))

    low = property(lambda self: float(min(self.ages)))
    high = property(lambda self: float(max(self.ages)))


@dataclass(frozen=True)
class Population:
    """The entering cohort: entry-age distribution, sex mix and starting state.

    ``sex_mix`` maps a sex label (e.g. ``"female"``) to its share; shares must sum to 1. A single
    label ``{"all": 1.0}`` means background mortality is not sex-specific. It is kept as a read-only
    :class:`~sim.model.FrozenMap` of floats.
    """

    entry_age: EntryAge
    initial_state: str
    sex_mix: Mapping[str, float] = field(default_factory=lambda: FrozenMap({"all": 1.0}))

    def __post_init__(self) -> None:
        found = Problems()
        path = ("population",)
        if not all(hasattr(self.entry_age, a) for a in ("ppf", "nodes", "mean", "low", "high")):
            found.add((*path, "entry_age"), "must be an entry-age distribution (fixed, uniform, normal or "
                                            "empirical)", self.entry_age)
        found.check(string, (*path, "initial_state"), self.initial_state, error=PopulationError)
        mix = found.check(number_map, (*path, "sex_mix"), self.sex_mix, minimum=0.0, maximum=1.0,
                          error=PopulationError)
        if isinstance(self.sex_mix, Mapping) and not self.sex_mix:
            found.add((*path, "sex_mix"), "must name at least one sex", {})
        elif mix and len(mix) == len(self.sex_mix) and not math.isclose(math.fsum(mix.values()), 1.0,
                                                                        rel_tol=0.0, abs_tol=1e-9):
            found.add((*path, "sex_mix"), f"shares must sum to 1 (sum {math.fsum(mix.values()):g})", dict(mix))
        found.raise_if_any(PopulationError)
        _set(self, sex_mix=FrozenMap(mix))

    @property
    def sexes(self) -> tuple[str, ...]:
        return tuple(self.sex_mix)

    def sex_codes(self, u: NDArray[np.float64]) -> NDArray[np.int8]:
        """Sex code (index into :attr:`sexes`) for uniforms ``u`` by inverse CDF of the mix."""
        cum = np.cumsum(np.array(list(self.sex_mix.values()), dtype=float))
        cum[-1] = 1.0
        return np.minimum(np.searchsorted(cum, u, side="left"), len(cum) - 1).astype(np.int8)
