"""Who enters the model: entry-age distributions and the sex mix.

Every distribution maps a uniform u in (0, 1] to an age by its quantile function (so the engine can
draw ages from counter-based uniforms) and offers quadrature nodes for averaging exact solutions over
the entry-age distribution: E[f(A)] = integral_0^1 f(F^-1(u)) du, by Gauss-Legendre in u.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Protocol

import numpy as np
from numpy.typing import NDArray
from scipy import stats

__all__ = [
    "EntryAge", "FixedAge", "UniformAge", "NormalAge", "EmpiricalAge", "Population",
    "PopulationError",
]


class PopulationError(ValueError):
    """Invalid population definition; the message names the field, the value and the rule."""


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


def _finite(name: str, value: float, minimum: float = 0.0, maximum: float = 130.0) -> float:
    value = float(value)
    if not (np.isfinite(value) and minimum <= value <= maximum):
        raise PopulationError(f"{name} must be a finite age in [{minimum:g}, {maximum:g}] years, got {value!r}")
    return value


def _quantile_nodes(ppf, n: int) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Gauss-Legendre nodes on u in (0, 1) mapped through the quantile function; weights sum to 1."""
    x, w = np.polynomial.legendre.leggauss(n)
    return ppf(0.5 * (x + 1.0)), 0.5 * w


@dataclass(frozen=True)
class FixedAge:
    """Everyone enters at ``age``."""

    age: float

    def __post_init__(self) -> None:
        _finite("entry_age.age", self.age)

    def ppf(self, u: NDArray[np.float64]) -> NDArray[np.float64]:
        return np.full(np.shape(u), float(self.age))

    def nodes(self, n: int = 24) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        return np.array([float(self.age)]), np.array([1.0])

    mean = property(lambda self: float(self.age))
    low = property(lambda self: float(self.age))
    high = property(lambda self: float(self.age))


@dataclass(frozen=True)
class UniformAge:
    """Entry age uniform on [low, high]."""

    low: float
    high: float

    def __post_init__(self) -> None:
        _finite("entry_age.low", self.low)
        _finite("entry_age.high", self.high)
        if not self.high > self.low:
            raise PopulationError(
                f"entry_age.high must be > entry_age.low, got low={self.low!r}, high={self.high!r}")

    def ppf(self, u: NDArray[np.float64]) -> NDArray[np.float64]:
        return self.low + (self.high - self.low) * np.asarray(u, dtype=float)

    def nodes(self, n: int = 24) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        return _quantile_nodes(self.ppf, n)

    @property
    def mean(self) -> float:
        return 0.5 * (self.low + self.high)


@dataclass(frozen=True)
class NormalAge:
    """Normal entry age with ``mean`` and ``sd``, truncated to [low, high]."""

    mu: float
    sd: float
    low: float
    high: float

    def __post_init__(self) -> None:
        _finite("entry_age.low", self.low)
        _finite("entry_age.high", self.high)
        _finite("entry_age.mean", self.mu)
        if not (np.isfinite(self.sd) and self.sd > 0):
            raise PopulationError(f"entry_age.sd must be > 0 and finite, got {self.sd!r}")
        if not self.high > self.low:
            raise PopulationError(
                f"entry_age.high must be > entry_age.low, got low={self.low!r}, high={self.high!r}")

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


@dataclass(frozen=True)
class EmpiricalAge:
    """Discrete entry ages ``ages`` with relative ``weights`` (e.g. a cohort's observed ages)."""

    ages: tuple[float, ...]
    weights: tuple[float, ...]

    def __post_init__(self) -> None:
        ages = np.asarray(self.ages, dtype=float)
        weights = np.asarray(self.weights, dtype=float)
        if ages.ndim != 1 or ages.size == 0 or ages.shape != weights.shape:
            raise PopulationError(
                f"entry_age.ages and entry_age.weights must be non-empty lists of equal length, "
                f"got {ages.size} ages and {weights.size} weights")
        for i, a in enumerate(ages):
            _finite(f"entry_age.ages[{i}]", a)
        if np.any(~np.isfinite(weights)) or np.any(weights < 0) or weights.sum() <= 0:
            raise PopulationError(
                f"entry_age.weights must be finite, >= 0 and not all 0, got {list(self.weights)!r}")
        object.__setattr__(self, "ages", tuple(float(a) for a in ages))
        object.__setattr__(self, "weights", tuple(float(w) for w in weights))

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
    label ``{"all": 1.0}`` means background mortality is not sex-specific.
    """

    entry_age: EntryAge
    initial_state: str
    sex_mix: dict[str, float] = field(default_factory=lambda: {"all": 1.0})

    def __post_init__(self) -> None:
        if not self.sex_mix:
            raise PopulationError("population.sex_mix must name at least one sex, got {}")
        shares = np.array(list(self.sex_mix.values()), dtype=float)
        if np.any(~np.isfinite(shares)) or np.any(shares < 0):
            raise PopulationError(f"population.sex_mix shares must be finite and >= 0, got {self.sex_mix!r}")
        if not np.isclose(shares.sum(), 1.0, rtol=0, atol=1e-9):
            raise PopulationError(f"population.sex_mix shares must sum to 1, got {self.sex_mix!r} "
                                  f"(sum {shares.sum():g})")

    @property
    def sexes(self) -> tuple[str, ...]:
        return tuple(self.sex_mix)

    def sex_codes(self, u: NDArray[np.float64]) -> NDArray[np.int8]:
        """Sex code (index into :attr:`sexes`) for uniforms ``u`` by inverse CDF of the mix."""
        cum = np.cumsum(np.array(list(self.sex_mix.values()), dtype=float))
        cum[-1] = 1.0
        return np.minimum(np.searchsorted(cum, u, side="left"), len(cum) - 1).astype(np.int8)


