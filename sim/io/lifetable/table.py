"""The validated life table and its conversion to a piecewise-constant hazard on attained age.

The conversion rules (``q``: constant force :math:`-\\ln(1 - q)/n`; ``m``: :math:`r = m`; the open last
band; tables starting above age 0) are described in the :mod:`sim.io.lifetable` package docstring.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ...hazards import PiecewiseConstant
from .errors import LifeTableError

__all__ = ["KINDS", "LifeTable"]

FloatArray = NDArray[np.float64]

KINDS: Mapping[str, str] = MappingProxyType({
    "q": "probability of dying within the age band",
    "m": "central death rate per year",
})
"""Accepted table kinds and their meaning (read-only)."""


Located = tuple[str, Mapping[str, Any]]
"""A message prefix (``"x.csv line 7, column 'age'"``) and where that is as data: keyword arguments
of :class:`LifeTableError` (``key``, and ``file`` and ``line`` for a file)."""

Locator = Callable[[int, str, "str | None"], Located]
"""(row index, column label, sex or None for the age column) -> :data:`Located`."""


def _fmt(v: float) -> str:
    """A float as the shortest text that reads back to it (``1.2``, ``-0.5``, ``nan``)."""
    return repr(float(v))


def _cell_error(located: Located, text: str, value: float, rule: str) -> LifeTableError:
    """``"<prefix>: <text>"`` with the cell's location, ``value`` and ``rule`` as data."""
    prefix, at = located
    return LifeTableError(f"{prefix}: {text}", value=value, rule=rule, **at)


def _validate(ages: FloatArray, values: Mapping[str, FloatArray], kind: str, locate: Locator,
              age_label: str, value_labels: Mapping[str, str], where: str,
              table_at: Mapping[str, Any]) -> None:
    """Check ages and values against the table rules; raise :class:`LifeTableError` on the first break.

    ``locate(i, column, sex)`` locates row ``i`` of a column (``sex`` None for the ages); ``where``
    names the table as a whole in messages about the table rather than a cell, ``table_at`` says the
    same as data (``file``, or nothing for a table built in code).
    """
    if ages.size == 0:
        rule = "the table has no data rows (at least one is needed)"
        raise LifeTableError(f"{where}: {rule}", rule=rule, **table_at)
    for i, a in enumerate(ages):
        at = locate(i, age_label, None)
        if not math.isfinite(a):
            raise _cell_error(at, f"{_fmt(a)} is not a finite number (ages must be finite and >= 0)", a,
                              "ages must be finite and >= 0")
        if a < 0.0:
            raise _cell_error(at, f"{_fmt(a)} is negative (ages must be >= 0)", a, "ages must be >= 0")
        if i > 0 and not a > ages[i - 1]:
            raise _cell_error(at, f"{_fmt(a)} does not exceed the previous age {_fmt(ages[i - 1])} (ages must be "
                                  f"strictly increasing)", a,
                              f"ages must be strictly increasing (the previous age is {_fmt(ages[i - 1])})")
    n = ages.size
    if kind == "q" and n < 2:
        rule = ("a kind 'q' table needs at least 2 rows, got 1 (the last row is the open band, whose q is read "
                "over the width of the band before it)")
        raise LifeTableError(f"{where}: {rule}", rule=rule, **table_at)
    for sex, vals in values.items():
        col = value_labels[sex]
        if vals.shape != ages.shape:
            raise LifeTableError(f"{where}: column {col!r} has {vals.size} values for {n} ages",
                                 **{**table_at, "key": ("values", sex)}, value=vals.size,
                                 rule=f"must have one value per age ({n})")
        for i, v in enumerate(vals):
            at = locate(i, col, sex)
            if not math.isfinite(v):
                raise _cell_error(at, f"{_fmt(v)} is not a finite number (every {kind} must be finite)", v,
                                  f"every {kind} must be finite")
            if kind == "q":
                if not 0.0 <= v <= 1.0:
                    raise _cell_error(at, f"{_fmt(v)} is outside [0, 1] (q is a probability)", v,
                                      "q is a probability, in [0, 1]")
                if v == 1.0 and i < n - 1:
                    rule = ("q = 1 (certain death) is allowed only in the last row (the open band); here it "
                            "would make the band's hazard infinite")
                    raise _cell_error(at, rule, v, rule)
            elif v < 0.0:
                raise _cell_error(at, f"{_fmt(v)} is negative (m is a rate, >= 0)", v, "m is a rate, >= 0")
        if kind == "q" and vals[-1] == 1.0 and vals[-2] == 0.0:
            rule = ("q = 1 in the last row gives the open band the last finite rate, but the band before it "
                    "has q = 0 (rate 0), which contradicts certain death")
            raise _cell_error(locate(n - 1, col, sex), rule, float(vals[-1]), rule)


def _check_kind(func: str, kind: Any) -> str:
    if not isinstance(kind, str) or kind not in KINDS:
        allowed = " or ".join(f"{k!r} ({v})" for k, v in KINDS.items())
        raise LifeTableError(f"{func}: kind must be {allowed}, got {kind!r}", key=("kind",), value=kind,
                             rule=f"must be {allowed}")
    return kind


# --------------------------------------------------------------------------------------------
# LifeTable
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class LifeTable:
    """A validated life table: ages, one value column per sex, and its kind.

    Parameters
    ----------
    ages : sequence of float
        Band starts in years, finite, ``>= 0`` and strictly increasing. Band ``i`` is
        ``[ages[i], ages[i + 1])``; the last band ``[ages[-1], inf)`` is open.
    values : mapping of str to sequence of float
        Sex label (e.g. ``"female"``, ``"male"``, or ``"all"``) to one value per age.
    kind : {"q", "m"}
        ``"q"``: probability of dying within the band, in ``[0, 1]``, ``1`` only in the last row;
        ``"m"``: central death rate per year, ``>= 0`` and finite.
    source : str, optional
        Where the table came from (file path), for notes and messages.
    columns : mapping of str to str, optional
        Sex label to the source column name; defaults to the sex labels.

    Raises
    ------
    LifeTableError
        Any rule above broken (the message names the row and sex).

    Notes
    -----
    Use :func:`read_life_table` to read a file (its messages give file lines). Conversions to a hazard
    are described in the :mod:`sim.io.lifetable` package docstring and reported by
    :meth:`conversion_note`.
    """

    ages: tuple[float, ...]
    values: Mapping[str, tuple[float, ...]]
    kind: str
    source: str | None = None
    columns: Mapping[str, str] | None = field(default=None)

    def __post_init__(self) -> None:
        kind = _check_kind("LifeTable", self.kind)
        ages = _float_tuple("LifeTable", "ages", self.ages, ("ages",))
        if not isinstance(self.values, Mapping) or not self.values:
            rule = "must be a non-empty mapping of sex label to values"
            raise LifeTableError(f"LifeTable: values {rule}, got {self.values!r}", key=("values",),
                                 value=self.values, rule=rule)
        vals: dict[str, tuple[float, ...]] = {}
        for sex, v in self.values.items():
            if not isinstance(sex, str) or not sex:
                raise LifeTableError(f"LifeTable: sex labels must be non-empty strings, got {sex!r}",
                                     key=("values",), value=sex, rule="sex labels must be non-empty strings")
            vals[sex] = _float_tuple("LifeTable", f"values[{sex!r}]", v, ("values", sex))
        cols = dict(self.columns) if self.columns is not None else {s: s for s in vals}
        if set(cols) != set(vals):
            rule = f"must name a source column for each sex {sorted(vals)}"
            raise LifeTableError(f"LifeTable: columns {rule}, got {sorted(cols)}", key=("columns",),
                                 value=sorted(cols), rule=rule)
        where = f"life table {self.source}" if self.source else "LifeTable"

        def locate(i: int, col: str, sex: str | None) -> Located:
            return (f"{where} data row {i + 1}, column {col!r}",
                    {"key": ("ages", i) if sex is None else ("values", sex, i)})

        _validate(np.array(ages), {s: np.array(v) for s, v in vals.items()}, kind, locate, "age",
                  cols, where, {})
        object.__setattr__(self, "ages", ages)
        object.__setattr__(self, "values", MappingProxyType(vals))
        object.__setattr__(self, "columns", MappingProxyType(cols))
        object.__setattr__(self, "source", None if self.source is None else str(self.source))

    def __hash__(self) -> int:
        return hash((self.ages, tuple(sorted(self.values.items())), self.kind, self.source))

    # ---- simple views ------------------------------------------------------------------------
    @property
    def sexes(self) -> tuple[str, ...]:
        """The sex labels, in column order."""
        return tuple(self.values)

    @property
    def widths(self) -> FloatArray:
        """Band widths ``ages[i + 1] - ages[i]`` in years; ``inf`` for the open last band."""
        a = np.array(self.ages)
        return np.append(np.diff(a), np.inf)

    def _sex(self, func: str, sex: Any) -> str:
        if sex not in self.values:
            available = ", ".join(map(repr, self.values))
            raise LifeTableError(f"{func}: sex {sex!r} is not in this table; sexes available: {available}",
                                 key=("sex",), value=sex, rule=f"must be a sex of this table: {available}")
        return sex

    def band_rates(self, sex: str = "all") -> FloatArray:
        """Constant hazard per year in each band ``[ages[i], ages[i + 1])`` (last: the open band).

        Parameters
        ----------
        sex : str
            A sex label of the table.

        Returns
        -------
        ndarray
            ``kind="q"``: :math:`-\\ln(1 - q_i)/n_i` (computed as ``-log1p(-q) / n``); the open band as
            described in the package notes. ``kind="m"``: :math:`m_i`.
        """
        sex = self._sex("band_rates", sex)
        v = np.array(self.values[sex])
        if self.kind == "m":
            return v
        w = self.widths
        rates = np.empty_like(v)
        rates[:-1] = -np.log1p(-v[:-1]) / w[:-1]
        rates[-1] = rates[-2] if v[-1] == 1.0 else -math.log1p(-v[-1]) / w[-2]
        return rates

    def to_hazard(self, sex: str = "all") -> PiecewiseConstant:
        """The table as a piecewise-constant hazard on attained age (years).

        Parameters
        ----------
        sex : str
            A sex label of the table (``"all"`` for a single-column table).

        Returns
        -------
        PiecewiseConstant
            Breaks at the table ages (plus ``0`` when the table starts above age 0, with the band
            ``[0, ages[0])`` given the first rate) and the rates of :meth:`band_rates`.

        Raises
        ------
        LifeTableError
            ``sex`` not in the table.

        Notes
        -----
        ``q`` tables: :math:`r = -\\ln(1 - q)/n` (constant force within the band, so
        :math:`S(x_k)/S(x_0) = \\prod_{i<k}(1 - q_i)` at band edges); ``m`` tables: :math:`r = m`.
        See the :mod:`sim.io.lifetable` package docstring for the open band and the references.
        """
        rates = self.band_rates(self._sex("to_hazard", sex))
        breaks = list(self.ages)
        rate_list = rates.tolist()
        if breaks[0] > 0.0:
            breaks.insert(0, 0.0)
            rate_list.insert(0, rate_list[0])
        return PiecewiseConstant(breaks=breaks, rates=rate_list)

    def conversion_note(self, sex: str = "all") -> str:
        """Plain-language account of how :meth:`to_hazard` converts this table, for reports.

        Parameters
        ----------
        sex : str
            A sex label of the table.

        Returns
        -------
        str
            The formula applied, the number of bands, the age range, how the open band and any band
            below the first age were filled, and the range of the resulting rates.
        """
        sex = self._sex("conversion_note", sex)
        rates = self.band_rates(sex)
        ages = self.ages
        n = len(ages)
        w = self.widths
        src = f"life table {self.source}" if self.source else "life table"
        parts = [f"{src}, column {self.columns[sex]!r} (sex {sex!r}), kind {self.kind!r} "
                 f"({KINDS[self.kind]}), {_count(n, 'row')}, ages {_num(ages[0])} to {_num(ages[-1])}+."]
        n_bands = n + (1 if ages[0] > 0.0 else 0)
        parts.append(f"Converted to a piecewise-constant hazard on attained age with {_count(n_bands, 'band')} "
                     f"covering [0, inf).")
        closed = n - 1
        if closed:
            widths = w[:-1]
            wtext = (f"width {_years(widths[0])}" if np.all(widths == widths[0])
                     else f"widths {_num(widths.min())} to {_years(widths.max())}")
            if self.kind == "q":
                parts.append(f"{_count(closed, 'closed band')} from age {_num(ages[0])} to "
                             f"{_num(ages[-1])} ({wtext}): constant force r = -ln(1 - q) / n, "
                             f"n the band width, so survival at band edges equals the product of "
                             f"(1 - q) (Preston, Heuveline & Guillot 2001, from memory).")
            else:
                parts.append(f"{_count(closed, 'closed band')} from age {_num(ages[0])} to "
                             f"{_num(ages[-1])} ({wtext}): the central death rate taken as the "
                             f"constant force, r = m (exact if the force is constant within the band, otherwise "
                             f"an approximation; Preston, Heuveline & Guillot 2001, from memory).")
        last_v = self.values[sex][-1]
        if self.kind == "m":
            parts.append(f"The open band [{_num(ages[-1])}, inf) uses the last row's rate, "
                         f"r = m = {rates[-1]:.6g} per year.")
        elif last_v == 1.0:
            parts.append(f"The last row has q = 1 (certain death); the open band [{_num(ages[-1])}, inf) "
                         f"takes the last finite rate, r = {rates[-1]:.6g} per year, from band "
                         f"[{_num(ages[-2])}, {_num(ages[-1])}).")
        else:
            parts.append(f"The open band [{_num(ages[-1])}, inf) reads the last row's q = {last_v:.6g} "
                         f"over the width of the band before it (n = {_years(w[-2])}, an "
                         f"assumption: the table does not state it): r = {rates[-1]:.6g} per year.")
        if rates[-1] == 0.0:
            parts.append("The open band's rate is 0: survivors to that age never die (improper "
                         "distribution).")
        if ages[0] > 0.0:
            parts.append(f"The table starts at age {_num(ages[0])}: the band [0, {_num(ages[0])}) is "
                         f"given the first band's rate, r = {rates[0]:.6g} per year (an assumption; it "
                         f"matters only for ages below {_num(ages[0])}).")
        parts.append(f"Rates range from {rates.min():.6g} to {rates.max():.6g} per year.")
        return " ".join(parts)


def _num(x: float) -> str:
    """Ages and widths in notes: ``40`` rather than ``40.0``."""
    x = float(x)
    return str(int(x)) if x.is_integer() and abs(x) < 1e15 else repr(x)


def _count(k: int, noun: str) -> str:
    return f"{k} {noun}" + ("" if k == 1 else "s")


def _years(x: float) -> str:
    return f"{_num(x)} year" + ("" if float(x) == 1.0 else "s")


def _float_tuple(func: str, name: str, value: Any, key: tuple[str, ...]) -> tuple[float, ...]:
    if isinstance(value, (str, bytes)) or np.ndim(value) != 1:
        raise LifeTableError(f"{func}: {name} must be a 1-D sequence of numbers, got {value!r}", key=key,
                             value=value, rule="must be a 1-D sequence of numbers")
    out = []
    for i, v in enumerate(np.asarray(value, dtype=object).tolist()):
        if isinstance(v, (bool, np.bool_)) or not isinstance(v, numbers.Real):
            raise LifeTableError(f"{func}: {name}[{i}] must be a real number, got {v!r}", key=(*key, i),
                                 value=v, rule="must be a real number")
        out.append(float(v))
    return tuple(out)
