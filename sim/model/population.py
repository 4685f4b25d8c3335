"""Who enters the model: entry-age distributions and the sex mix.

Every distribution maps a uniform u in (0, 1] to an age by its quantile function (so the engine can
draw ages from counter-based uniforms) and offers quadrature nodes for averaging exact solutions over
the entry-age distribution: E[f(A)] = integral_0^1 f(F^-1(u)) du, by Gauss-Legendre in u.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Protocol, Union

import numpy as np
from numpy.typing import NDArray
from scipy import stats

from .checks import Problems, number, number_map, string
from .errors import PopulationError
from .frozen import FrozenMap

__all__ = [
    "EntryAge", "FixedAge", "UniformAge", "NormalAge", "EmpiricalAge", "Population",
    "PopulationError", "InitialState", "SHARE_TOLERANCE",
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


InitialState = Union[str, Mapping[str, float], Mapping[str, Mapping[str, float]]]
"""A state name, a table ``state = share`` or a table ``sex = {state = share}``."""

SHARE_TOLERANCE = 1e-9
"""Shares (sex mix, initial states) must sum to 1 within this absolute tolerance."""


INITIAL = ("population", "initial_state")
_INITIAL_FORMS = "must be a state name, a table of state = share, or a table of sex = {state = share}"


def _shares(found: Problems, path: tuple, table: object) -> FrozenMap | None:
    """A table ``state = share`` (shares in [0, 1] summing to 1 within 1e-9) as a FrozenMap, or None
    (problems recorded)."""
    if isinstance(table, Mapping) and not table:
        found.add(path, "must name at least one state", {})
        return None
    got = found.check(number_map, path, table, minimum=0.0, maximum=1.0, error=PopulationError)
    if got is None or len(got) != len(table):
        return None
    total = math.fsum(got.values())
    if not math.isclose(total, 1.0, rel_tol=0.0, abs_tol=SHARE_TOLERANCE):
        found.add(path, f"shares must sum to 1 (sum {total:.12g})", dict(got))
        return None
    return FrozenMap(got)


def _initial_state(found: Problems, value: object, sexes: tuple[str, ...] | None) -> InitialState | None:
    """The checked, deep-frozen initial state (``sexes``: the sex mix's labels, None if it is bad)."""
    if isinstance(value, str):
        return found.check(string, INITIAL, value, error=PopulationError)
    if not isinstance(value, Mapping):
        found.add(INITIAL, _INITIAL_FORMS, value)
        return None
    tables = [isinstance(v, Mapping) for v in value.values()]
    if not (value and all(tables)):
        if any(tables):
            found.add(INITIAL, _INITIAL_FORMS, _plain(value))
            return None
        return _shares(found, INITIAL, value)
    per_sex, bad = {}, False
    for sex, table in value.items():
        if sexes is not None and sex not in sexes:
            found.add((*INITIAL, sex), f"must name a sex of population.sex_mix {list(sexes)}", sex)
            bad = True
            continue
        got = _shares(found, (*INITIAL, sex), table)
        bad = bad or got is None
        per_sex[sex] = got
    missing = [s for s in (sexes or ()) if s not in value]
    if missing:
        found.add(INITIAL, f"must give the shares of every sex of population.sex_mix (missing {missing})",
                  _plain(value))
        bad = True
    return None if bad else FrozenMap(per_sex)


def _plain(value: object) -> object:
    return {k: _plain(v) for k, v in value.items()} if isinstance(value, Mapping) else value


@dataclass(frozen=True)
class Population:
    """The entering cohort: entry-age distribution, sex mix and starting state(s).

    ``sex_mix`` maps a sex label (e.g. ``"female"``) to its share; shares must sum to 1. A single
    label ``{"all": 1.0}`` means background mortality is not sex-specific. It is kept as a read-only
    :class:`~sim.model.FrozenMap` of floats.

    ``initial_state`` is one state name (everyone starts there), a table ``state = share`` (a
    prevalent cohort: each patient starts in a state drawn with these probabilities) or a table
    ``sex = {state = share}`` with one such table per sex of the mix. Shares are in [0, 1] and sum to
    1 within 1e-9; tables are kept as read-only FrozenMaps. That the names are non-absorbing states
    of the model is checked by the model (:mod:`sim.model.consistency`).
    """

    entry_age: EntryAge
    initial_state: InitialState
    sex_mix: Mapping[str, float] = field(default_factory=lambda: FrozenMap({"all": 1.0}))

    def __post_init__(self) -> None:
        found = Problems()
        path = ("population",)
        if not all(hasattr(self.entry_age, a) for a in ("ppf", "nodes", "mean", "low", "high")):
            found.add((*path, "entry_age"), "must be an entry-age distribution (fixed, uniform, normal or "
                                            "empirical)", self.entry_age)
        in_mix = Problems()  # reported after the initial state's, in the order of the fields
        mix = in_mix.check(number_map, (*path, "sex_mix"), self.sex_mix, minimum=0.0, maximum=1.0,
                           error=PopulationError)
        if isinstance(self.sex_mix, Mapping) and not self.sex_mix:
            in_mix.add((*path, "sex_mix"), "must name at least one sex", {})
        elif mix and len(mix) == len(self.sex_mix) and not math.isclose(math.fsum(mix.values()), 1.0,
                                                                        rel_tol=0.0, abs_tol=SHARE_TOLERANCE):
            in_mix.add((*path, "sex_mix"), f"shares must sum to 1 (sum {math.fsum(mix.values()):g})", dict(mix))
        sexes = tuple(mix) if mix and len(mix) == len(self.sex_mix) else None
        initial = _initial_state(found, self.initial_state, sexes)
        found.extend(in_mix.items)
        found.raise_if_any(PopulationError)
        _set(self, sex_mix=FrozenMap(mix), initial_state=initial)

    @property
    def sexes(self) -> tuple[str, ...]:
        return tuple(self.sex_mix)

    def sex_codes(self, u: NDArray[np.float64]) -> NDArray[np.int8]:
        """Sex code (index into :attr:`sexes`) for uniforms ``u`` by inverse CDF of the mix."""
        cum = np.cumsum(np.array(list(self.sex_mix.values()), dtype=float))
        cum[-1] = 1.0
        return np.minimum(np.searchsorted(cum, u, side="left"), len(cum) - 1).astype(np.int8)

    # ------------------------------------------------------------------ initial states
    @property
    def single_initial_state(self) -> str | None:
        """The one state everyone starts in, or None for a mix (even one with all weight on a state)."""
        return self.initial_state if isinstance(self.initial_state, str) else None

    @property
    def initial_by_sex(self) -> bool:
        """Whether the initial shares are given per sex."""
        return isinstance(self.initial_state, Mapping) and all(
            isinstance(v, Mapping) for v in self.initial_state.values())

    def initial_shares(self, sex: str) -> Mapping[str, float]:
        """The initial shares ``state = share`` of ``sex`` (``{name: 1.0}`` for a single state)."""
        if isinstance(self.initial_state, str):
            return FrozenMap({self.initial_state: 1.0})
        if self.initial_by_sex:
            return self.initial_state[sex]
        return self.initial_state

    @property
    def named_initial_states(self) -> tuple[str, ...]:
        """Every state the initial state names (zero shares included), in order of appearance."""
        if isinstance(self.initial_state, str):
            return (self.initial_state,)
        tables = self.initial_state.values() if self.initial_by_sex else (self.initial_state,)
        return tuple(dict.fromkeys(k for t in tables for k in t))

    @property
    def initial_states(self) -> tuple[str, ...]:
        """The states some patients start in (a share > 0 for some sex), in order of appearance."""
        return tuple(s for s in self.named_initial_states
                     if any(self.initial_shares(x).get(s, 0.0) > 0.0 for x in self.sexes))

    def initial_matrix(self, states: tuple[str, ...]) -> NDArray[np.float64]:
        """Read-only array (len(sexes), len(states)): row ``i`` is the initial distribution p(0) of
        sex ``sexes[i]`` over ``states`` (the model's state order). A single initial state gives rows
        with exactly 1.0 in its column and 0.0 elsewhere.

        Raises
        ------
        KeyError : a named state is not in ``states``.
        """
        index = {s: j for j, s in enumerate(states)}
        out = np.zeros((len(self.sexes), len(states)))
        for i, sex in enumerate(self.sexes):
            for s, share in self.initial_shares(sex).items():
                out[i, index[s]] = share
        out.flags.writeable = False
        return out

    def initial_codes(self, u: NDArray[np.float64], sex: NDArray[np.integer],
                      states: tuple[str, ...]) -> NDArray[np.int64]:
        """Initial state codes (indices into ``states``) for uniforms ``u`` in (0, 1] and sex codes
        ``sex``, by the inverse CDF of each sex's shares over the states with a positive share (a
        state with share 0 is never drawn, whatever the rounding of the cumulative sums)."""
        u = np.asarray(u, dtype=float)
        sex = np.asarray(sex)
        out = np.empty(u.shape, dtype=np.int64)
        p = self.initial_matrix(states)
        for code in range(len(self.sexes)):
            rows = sex == code
            if not rows.any():
                continue
            cols = np.flatnonzero(p[code] > 0.0)
            cum = np.cumsum(p[code, cols])
            cum[-1] = 1.0
            out[rows] = cols[np.minimum(np.searchsorted(cum, u[rows], side="left"), cols.size - 1)]
        return out
