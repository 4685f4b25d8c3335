"""Life tables: reading, conversion to a piecewise-constant hazard, and Gompertz fits.

A life table gives, for age bands :math:`[x_i, x_{i+1})`, either

* ``kind="q"``: :math:`q_i`, the probability that someone alive at exact age :math:`x_i` dies before
  :math:`x_{i+1}`, or
* ``kind="m"``: :math:`m_i`, the central death rate per year (deaths / person-years lived in the band).

The user states which; it is never guessed. The last row starts the open band :math:`[x_{n-1}, \\infty)`.

Conversion to a hazard (METHODS.md section 2)
---------------------------------------------
Each band gets a constant force of mortality :math:`r_i` on attained age (years), so that the result
is a :class:`~sim.hazards.PiecewiseConstant` on the age clock:

* ``q``: :math:`r_i = -\\ln(1 - q_i)/n_i` with :math:`n_i = x_{i+1} - x_i`. Then
  :math:`\\exp(-r_i n_i) = 1 - q_i`, so survival at the band edges reproduces the table exactly,
  :math:`S(x_k)/S(x_0) = \\prod_{i<k}(1 - q_i)`, whatever the shape of the hazard inside the band
  (:math:`-\\ln(1 - q_i)` is the band's integrated hazard). The alternatives, e.g.
  :math:`m = 2q/(n(2 - q))` under uniformly distributed deaths, are in Preston, Heuveline & Guillot
  (2001) (from memory); they are not used here.
* ``m``: :math:`r_i = m_i`, the central rate taken as the constant force. This is exact when the force
  is constant within the band, and an approximation otherwise (Preston et al. 2001, from memory).

Conventions (documented choices)
--------------------------------
* **Open last band.** ``m`` tables: the last row's :math:`m` is the open band's rate. ``q`` tables: the
  table does not say how wide the last band is, so

  - :math:`q = 1` in the last row (the usual closing row, "everyone dies eventually") gives the open
    band the **last finite rate**, the rate of the band before it;
  - :math:`q < 1` in the last row is read over the width of the band before it (e.g. a one-year
    probability in a single-year table): :math:`r = -\\ln(1 - q)/n_{n-2}`.

  A ``q`` table therefore needs at least two rows, and :math:`q = 1` is allowed only in the last row.
  :meth:`LifeTable.conversion_note` states which case applied.
* **Tables starting above age 0.** :class:`~sim.hazards.PiecewiseConstant` starts at clock 0, so the
  band :math:`[0, x_0)` is given the first band's rate (an assumption the note reports). Survival
  conditional on reaching :math:`x_0` is unaffected.

Gompertz fits
-------------
:func:`fit_gompertz` fits :math:`h(a) = b e^{g a}` (plus :math:`c` for Gompertz-Makeham) to the band
rates by Poisson maximum likelihood or by weighted least squares on log rates (Tai & Noymer 2018).
The model's band rate is the band average of the hazard,
:math:`\\mu_i = \\frac{1}{n_i}\\int_{x_i}^{x_i + n_i} h(s)\\,ds`, which is what the constant-force rate
:math:`-\\ln(1 - q_i)/n_i` measures, so a table generated from the law itself is fitted exactly for any
band widths.

References
----------
.. [1] Preston SH, Heuveline P, Guillot M. Demography: Measuring and Modeling Population Processes.
   Oxford: Blackwell; 2001 (cited from memory).
.. [2] Tai TH, Noymer A. Models for estimating empirical Gompertz mortality: with an application to
   evolution of the Gompertzian slope. Popul Ecol 2018 (cited in METHODS.md).
.. [3] Finch CE, Pike MC, Witten M. Slow mortality rate accelerations during aging in some animals
   approximate that of humans. Science 1990;249:902-905.
"""

from __future__ import annotations

import math
import numbers
import os
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import optimize

from ..hazards import Gompertz, GompertzMakeham, PiecewiseConstant

__all__ = [
    "KINDS",
    "NOMINAL_EXPOSURE",
    "GompertzFit",
    "LifeTable",
    "LifeTableError",
    "fit_gompertz",
    "read_life_table",
]

FloatArray = NDArray[np.float64]

KINDS: Mapping[str, str] = MappingProxyType({
    "q": "probability of dying within the age band",
    "m": "central death rate per year",
})
"""Accepted table kinds and their meaning (read-only)."""

NOMINAL_EXPOSURE: float = 1e5
"""Person-years per year of band width assumed by :func:`fit_gompertz` when no exposure is given."""

_FIT_METHODS = ("poisson", "wls")


class LifeTableError(ValueError):
    """A life table file or argument breaks a rule.

    Messages name the file, the line (CSV, header line = 1) or row (xlsx, spreadsheet row number),
    the column, the value received and the rule, e.g.
    ``tables/x.csv line 7, column 'q_female': 1.2 is outside [0, 1]``.
    """


# --------------------------------------------------------------------------------------------
# Validation shared by the reader and the LifeTable constructor
# --------------------------------------------------------------------------------------------

Locator = Callable[[int, str], str]
"""(row index, column label) -> message prefix, e.g. 'x.csv line 7, column 'age''."""


def _fmt(v: float) -> str:
    """A float as the shortest text that reads back to it (``1.2``, ``-0.5``, ``nan``)."""
    return repr(float(v))


def _validate(ages: FloatArray, values: Mapping[str, FloatArray], kind: str, locate: Locator,
              age_label: str, value_labels: Mapping[str, str], where: str) -> None:
    """Check ages and values against the table rules; raise :class:`LifeTableError` on the first break.

    ``locate(i, column)`` builds the message prefix for row ``i``; ``where`` names the table as a
    whole (for rules about the table rather than a cell).
    """
    if ages.size == 0:
        raise LifeTableError(f"{where}: the table has no data rows (at least one is needed)")
    for i, a in enumerate(ages):
        if not math.isfinite(a):
            raise LifeTableError(f"{locate(i, age_label)}: {_fmt(a)} is not a finite number "
                                 f"(ages must be finite and >= 0)")
        if a < 0.0:
            raise LifeTableError(f"{locate(i, age_label)}: {_fmt(a)} is negative (ages must be >= 0)")
        if i > 0 and not a > ages[i - 1]:
            raise LifeTableError(f"{locate(i, age_label)}: {_fmt(a)} does not exceed the previous age "
                                 f"{_fmt(ages[i - 1])} (ages must be strictly increasing)")
    n = ages.size
    if kind == "q" and n < 2:
        raise LifeTableError(f"{where}: a kind 'q' table needs at least 2 rows, got 1 (the last row is "
                             f"the open band, whose q is read over the width of the band before it)")
    for sex, vals in values.items():
        col = value_labels[sex]
        if vals.shape != ages.shape:
            raise LifeTableError(f"{where}: column {col!r} has {vals.size} values for {n} ages")
        for i, v in enumerate(vals):
            if not math.isfinite(v):
                raise LifeTableError(f"{locate(i, col)}: {_fmt(v)} is not a finite number "
                                     f"(every {kind} must be finite)")
            if kind == "q":
                if not 0.0 <= v <= 1.0:
                    raise LifeTableError(f"{locate(i, col)}: {_fmt(v)} is outside [0, 1] "
                                         f"(q is a probability)")
                if v == 1.0 and i < n - 1:
                    raise LifeTableError(f"{locate(i, col)}: q = 1 (certain death) is allowed only in the "
                                         f"last row (the open band); here it would make the band's "
                                         f"hazard infinite")
            elif v < 0.0:
                raise LifeTableError(f"{locate(i, col)}: {_fmt(v)} is negative (m is a rate, >= 0)")
        if kind == "q" and vals[-1] == 1.0 and vals[-2] == 0.0:
            raise LifeTableError(f"{locate(n - 1, col)}: q = 1 in the last row gives the open band the "
                                 f"last finite rate, but the band before it has q = 0 (rate 0), which "
                                 f"contradicts certain death")


def _check_kind(func: str, kind: Any) -> str:
    if not isinstance(kind, str) or kind not in KINDS:
        allowed = " or ".join(f"{k!r} ({v})" for k, v in KINDS.items())
        raise LifeTableError(f"{func}: kind must be {allowed}, got {kind!r}")
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
    are described in the module docstring and reported by :meth:`conversion_note`.
    """

    ages: tuple[float, ...]
    values: Mapping[str, tuple[float, ...]]
    kind: str
    source: str | None = None
    columns: Mapping[str, str] | None = field(default=None)

    def __post_init__(self) -> None:
        kind = _check_kind("LifeTable", self.kind)
        ages = _float_tuple("LifeTable", "ages", self.ages)
        if not isinstance(self.values, Mapping) or not self.values:
            raise LifeTableError(f"LifeTable: values must be a non-empty mapping of sex label to values, "
                                 f"got {self.values!r}")
        vals: dict[str, tuple[float, ...]] = {}
        for sex, v in self.values.items():
            if not isinstance(sex, str) or not sex:
                raise LifeTableError(f"LifeTable: sex labels must be non-empty strings, got {sex!r}")
            vals[sex] = _float_tuple("LifeTable", f"values[{sex!r}]", v)
        cols = dict(self.columns) if self.columns is not None else {s: s for s in vals}
        if set(cols) != set(vals):
            raise LifeTableError(f"LifeTable: columns must name a source column for each sex "
                                 f"{sorted(vals)}, got {sorted(cols)}")
        where = f"life table {self.source}" if self.source else "LifeTable"

        def locate(i: int, col: str) -> str:
            return f"{where} data row {i + 1}, column {col!r}"

        _validate(np.array(ages), {s: np.array(v) for s, v in vals.items()}, kind, locate, "age",
                  cols, where)
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
            raise LifeTableError(f"{func}: sex {sex!r} is not in this table; sexes available: "
                                 f"{', '.join(map(repr, self.values))}")
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
            described in the module notes. ``kind="m"``: :math:`m_i`.
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
        See the module docstring for the open band and the references.
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


def _float_tuple(func: str, name: str, value: Any) -> tuple[float, ...]:
    if isinstance(value, (str, bytes)) or np.ndim(value) != 1:
        raise LifeTableError(f"{func}: {name} must be a 1-D sequence of numbers, got {value!r}")
    out = []
    for i, v in enumerate(np.asarray(value, dtype=object).tolist()):
        if isinstance(v, (bool, np.bool_)) or not isinstance(v, numbers.Real):
            raise LifeTableError(f"{func}: {name}[{i}] must be a real number, got {v!r}")
        out.append(float(v))
    return tuple(out)


# --------------------------------------------------------------------------------------------
# Reading files
# --------------------------------------------------------------------------------------------

def read_life_table(path: str | os.PathLike[str], *, kind: str, age_column: str = "age",
                    value_columns: str | Mapping[str, str], sheet: str | None = None) -> LifeTable:
    """Read a life table from a CSV or .xlsx file.

    Parameters
    ----------
    path : str or path-like
        A ``.csv`` file (read with pandas, UTF-8, an optional byte-order mark allowed) or an ``.xlsx``
        workbook (read with pandas through openpyxl).
    kind : {"q", "m"}
        What the value columns hold: ``"q"`` the probability of dying within the age band, ``"m"`` the
        central death rate per year. Required: the reader never guesses.
    age_column : str
        Header of the column of band start ages (years).
    value_columns : str or mapping of str to str
        Sex label to column header, e.g. ``{"female": "q_female", "male": "q_male"}``; a single header
        means one column with sex label ``"all"``.
    sheet : str, optional
        Worksheet name for ``.xlsx`` files (default: the first sheet). Not allowed for CSV.

    Returns
    -------
    LifeTable

    Raises
    ------
    LifeTableError
        Unknown ``kind``, bad ``value_columns``, unsupported file type, missing sheet or column, and any
        cell breaking a rule: ages must be finite, ``>= 0`` and strictly increasing; ``q`` in
        ``[0, 1]`` with ``1`` only in the last row (and then the band before it must have ``q > 0``);
        ``m >= 0``; no missing, NaN, infinite or non-numeric cells in the columns used; a ``q`` table
        needs at least two rows. The message names the file, the line (CSV; header line = 1) or
        spreadsheet row (xlsx), the column, the value and the rule.
    FileNotFoundError
        ``path`` does not exist.

    Notes
    -----
    The header is the first non-empty row; data rows follow it. Rows that are empty in every cell are
    skipped (line numbers in messages still count them). Columns not named are ignored (e.g. a
    ``note`` column). Header names are compared after stripping surrounding spaces. Line numbers
    assume one record per line (no quoted line breaks).
    """
    kind = _check_kind("read_life_table", kind)
    columns = _value_columns(value_columns)
    if not isinstance(age_column, str) or not age_column.strip():
        raise LifeTableError(f"read_life_table: age_column must be a non-empty string, got {age_column!r}")
    age_column = age_column.strip()
    if age_column in columns.values():
        raise LifeTableError(f"read_life_table: age_column {age_column!r} is also given as a value column")
    p = Path(path)
    name = str(path)
    suffix = p.suffix.lower()
    if suffix == ".csv":
        if sheet is not None:
            raise LifeTableError(f"read_life_table: sheet applies to .xlsx files only, got sheet={sheet!r} "
                                 f"for {name}")
        raw = _read_csv_cells(p, name)
        unit, where = "line", name
    elif suffix == ".xlsx":
        raw, sheet_name = _read_xlsx_cells(p, name, sheet)
        unit, where = "row", f"{name} sheet {sheet_name!r}"
    else:
        raise LifeTableError(f"read_life_table: {name}: unsupported file type {p.suffix!r}; "
                             f"expected .csv or .xlsx")

    # Header: first row with any non-empty cell. Row index i is line/row i + 1 of the file.
    cells = [[_cell_text(v) for v in row] for row in raw]
    nonempty = [i for i, row in enumerate(cells) if any(c for c in row)]
    if not nonempty:
        raise LifeTableError(f"{where}: the file is empty (expected a header line with {age_column!r} "
                             f"and the value columns)")
    h = nonempty[0]
    header = [c.strip() for c in cells[h]]
    wanted = {"age": age_column, **{f"sex {s!r}": c for s, c in columns.items()}}
    index: dict[str, int] = {}
    for role, col in wanted.items():
        hits = [j for j, c in enumerate(header) if c == col]
        if not hits:
            found = ", ".join(repr(c) for c in header if c) or "none"
            raise LifeTableError(f"{where} {unit} {h + 1} (header): column {col!r} ({role}) not found; "
                                 f"columns found: {found}")
        if len(hits) > 1:
            raise LifeTableError(f"{where} {unit} {h + 1} (header): column {col!r} appears {len(hits)} "
                                 f"times; column names must be unique")
        index[col] = hits[0]

    rows = [i for i in nonempty if i > h]
    line_of = [i + 1 for i in rows]

    def locate(k: int, col: str) -> str:
        return f"{where} {unit} {line_of[k]}, column {col!r}"

    def column(col: str) -> FloatArray:
        j = index[col]
        out = np.empty(len(rows))
        for k, i in enumerate(rows):
            text = cells[i][j] if j < len(cells[i]) else ""
            out[k] = _parse_number(raw[i][j] if j < len(raw[i]) else None, text, locate(k, col))
        return out

    ages = column(age_column)
    values = {sex: column(col) for sex, col in columns.items()}
    _validate(ages, values, kind, locate, age_column, columns, where)
    return LifeTable(ages=tuple(ages.tolist()), values={s: tuple(v.tolist()) for s, v in values.items()},
                     kind=kind, source=name, columns=columns)


def _value_columns(value_columns: Any) -> dict[str, str]:
    if isinstance(value_columns, str):
        if not value_columns.strip():
            raise LifeTableError("read_life_table: value_columns must be a non-empty column name or a "
                                 "mapping of sex label to column name, got ''")
        return {"all": value_columns.strip()}
    if not isinstance(value_columns, Mapping) or not value_columns:
        raise LifeTableError(f"read_life_table: value_columns must be a column name or a non-empty mapping "
                             f"of sex label to column name, got {value_columns!r}")
    out: dict[str, str] = {}
    for sex, col in value_columns.items():
        if not isinstance(sex, str) or not sex:
            raise LifeTableError(f"read_life_table: value_columns keys (sex labels) must be non-empty "
                                 f"strings, got {sex!r}")
        if not isinstance(col, str) or not col.strip():
            raise LifeTableError(f"read_life_table: value_columns[{sex!r}] must be a non-empty column name, "
                                 f"got {col!r}")
        out[sex] = col.strip()
    return out


def _read_csv_cells(p: Path, name: str) -> list[list[Any]]:
    try:
        df = pd.read_csv(p, header=None, dtype=str, keep_default_na=False, na_filter=False,
                         skip_blank_lines=False, encoding="utf-8-sig")
    except pd.errors.EmptyDataError:
        return []
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise LifeTableError(f"{name}: cannot be read as CSV ({exc})") from exc
    return df.to_numpy(dtype=object).tolist()


def _read_xlsx_cells(p: Path, name: str, sheet: str | None) -> tuple[list[list[Any]], str]:
    if not p.exists():
        raise FileNotFoundError(f"{name}: no such file")
    try:
        with pd.ExcelFile(p, engine="openpyxl") as xf:
            names = list(xf.sheet_names)
            if sheet is None:
                sheet = names[0]
            elif sheet not in names:
                raise LifeTableError(f"read_life_table: {name} has no sheet {sheet!r}; sheets: "
                                     f"{', '.join(map(repr, names))}")
            df = xf.parse(sheet, header=None, dtype=object)
    except (LifeTableError, ImportError):  # ours, or openpyxl missing: pass through unchanged
        raise
    except Exception as exc:  # openpyxl raises several types for damaged or non-xlsx files
        raise LifeTableError(f"{name}: cannot be read as an .xlsx workbook ({exc})") from exc
    return df.to_numpy(dtype=object).tolist(), sheet


def _cell_text(v: Any) -> str:
    """Cell as text for the header and emptiness checks ('' for an empty cell)."""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    return str(v).strip()


def _parse_number(v: Any, text: str, loc: str) -> float:
    """A cell as float; numbers pass through, text is parsed; empty and non-numeric cells raise."""
    if isinstance(v, (bool, np.bool_)):
        raise LifeTableError(f"{loc}: {v!r} is not a number")
    if isinstance(v, numbers.Real) and not (isinstance(v, float) and math.isnan(v)):
        return float(v)
    if not text:
        raise LifeTableError(f"{loc}: the cell is empty (a number is required)")
    try:
        return float(text)
    except ValueError:
        raise LifeTableError(f"{loc}: {text!r} is not a number") from None


# --------------------------------------------------------------------------------------------
# Gompertz fits
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class GompertzFit:
    """Result of :func:`fit_gompertz`.

    Attributes
    ----------
    b, g, c : float
        :math:`h(a) = c + b e^{g a}` per year on attained age ``a`` in years; ``c = 0`` unless
        ``makeham``.
    makeham : bool
        Whether the Makeham constant was fitted.
    method : {"poisson", "wls"}
        Estimation method.
    sex : str
        The table column fitted.
    age_range : tuple of float
        The requested ``(low, high)``; bands wholly inside it were used.
    band_starts, band_widths : tuple of float
        The bands used (years).
    observed_rates : tuple of float
        The table's constant-force band rates (:meth:`LifeTable.band_rates`).
    fitted_rates : tuple of float
        The fitted band-average hazard :math:`\\mu_i = c + b e^{g x_i}\\,\\mathrm{exprel}(g n_i)`.
    exposure : tuple of float
        Person-years per band used in the likelihood and weights.
    nominal_exposure : bool
        True when ``exposure`` is the nominal :data:`NOMINAL_EXPOSURE` x width (rates only).
    deviance : float
        Poisson deviance :math:`2\\sum [D \\ln(D/(E\\mu)) - (D - E\\mu)]` with :math:`D = E r`
        (reported for both methods; with nominal exposure its scale is arbitrary).
    wrss : float
        Weighted residual sum of squares on log rates, :math:`\\sum D_i (\\ln r_i - \\ln \\mu_i)^2`
        over bands with :math:`r_i > 0`.
    max_rel_error : float
        :math:`\\max_i |\\mu_i / r_i - 1|` over bands with :math:`r_i > 0`.
    converged : bool
        The optimizer reported success.
    message : str
        The optimizer's message.
    """

    b: float
    g: float
    c: float
    makeham: bool
    method: str
    sex: str
    age_range: tuple[float, float]
    band_starts: tuple[float, ...]
    band_widths: tuple[float, ...]
    observed_rates: tuple[float, ...]
    fitted_rates: tuple[float, ...]
    exposure: tuple[float, ...]
    nominal_exposure: bool
    deviance: float
    wrss: float
    max_rel_error: float
    converged: bool
    message: str

    @property
    def n_bands(self) -> int:
        """Number of bands fitted."""
        return len(self.band_starts)

    @property
    def doubling_time(self) -> float:
        """:math:`\\ln 2 / g` in years: the time for the Gompertz term to double (``inf`` if ``g = 0``,
        negative, i.e. a halving time, if ``g < 0``). About 8 years for human adults (Finch, Pike &
        Witten 1990)."""
        return math.inf if self.g == 0.0 else math.log(2.0) / self.g

    def to_hazard(self) -> Gompertz | GompertzMakeham:
        """``Gompertz(rate=b, shape=g)``, or ``GompertzMakeham(rate=b, shape=g, constant=c)`` when
        ``makeham``, on attained age in years."""
        if self.makeham:
            return GompertzMakeham(rate=self.b, shape=self.g, constant=self.c)
        return Gompertz(rate=self.b, shape=self.g)

    def summary(self) -> str:
        """One paragraph for reports: law, estimates, method, bands, exposure and fit quality."""
        law = "c + b exp(g a)" if self.makeham else "b exp(g a)"
        est = f"b = {self.b:.6g}, g = {self.g:.6g} per year"
        if self.makeham:
            est += f", c = {self.c:.6g} per year"
        meth = ("Poisson maximum likelihood" if self.method == "poisson"
                else "weighted least squares on log rates (weights = deaths = exposure x rate)")
        expo = (f"nominal exposure {NOMINAL_EXPOSURE:g} person-years x band width (rates only; the "
                f"estimates do not depend on its scale)" if self.nominal_exposure else "given exposure")
        ok = "" if self.converged else f" WARNING: the optimizer did not report success ({self.message})."
        return (f"Fitted h(a) = {law} to {self.n_bands} bands of sex {self.sex!r} within ages "
                f"{_num(self.age_range[0])}-{_num(self.age_range[1])} by {meth}, {expo}: {est}; doubling "
                f"time ln 2 / g = {self.doubling_time:.4g} years. Max relative error of band rates "
                f"{self.max_rel_error:.3g}, Poisson deviance {self.deviance:.4g}, weighted RSS on log "
                f"rates {self.wrss:.4g}.{ok}")


# Gauss-Legendre rule on [0, 1] for band averages of exp(g s) and its g-derivatives. With 32 nodes the
# rule is exact to rounding for |g n| up to ~20 (band width n), far beyond human mortality.
_GL_X, _GL_W = np.polynomial.legendre.leggauss(32)
_GL_T = 0.5 * (_GL_X + 1.0)
_GL_WT = 0.5 * _GL_W


class _Bands:
    """Band-average Gompertz(-Makeham) model on fixed bands, parameters theta = (beta, g[, gamma]).

    ``b = exp(beta - g a_ref)`` (``beta`` is the log hazard at the reference age ``a_ref``, which
    decorrelates it from ``g``) and ``c = exp(gamma)``.
    mu_i = c + exp(beta) v_i(g), v_i(g) = int_0^1 exp(g (x_i + n_i t - a_ref)) dt.
    """

    def __init__(self, starts: FloatArray, widths: FloatArray, a_ref: float, makeham: bool) -> None:
        self.s = starts[:, None] + widths[:, None] * _GL_T[None, :] - a_ref  # (k, 32)
        self.makeham = makeham
        self.p = 3 if makeham else 2

    def mu(self, th: FloatArray, derivs: int = 0) -> tuple[FloatArray, ...]:
        """mu (k,), and with derivs >= 1 the Jacobian (k, p), with derivs >= 2 the Hessians (k, p, p)."""
        beta, g = th[0], th[1]
        with np.errstate(over="ignore", invalid="ignore"):
            e = np.exp(g * self.s)
            v = e @ _GL_WT
            eb = math.exp(beta) if beta < 700.0 else math.inf
            c = math.exp(th[2]) if self.makeham and th[2] < 700.0 else (math.inf if self.makeham else 0.0)
            mu = c + eb * v
            if derivs == 0:
                return (mu,)
            v1 = (self.s * e) @ _GL_WT
            jac = np.empty((mu.size, self.p))
            jac[:, 0] = eb * v
            jac[:, 1] = eb * v1
            if self.makeham:
                jac[:, 2] = c
            if derivs == 1:
                return mu, jac
            v2 = (self.s * self.s * e) @ _GL_WT
            hes = np.zeros((mu.size, self.p, self.p))
            hes[:, 0, 0] = eb * v
            hes[:, 0, 1] = hes[:, 1, 0] = eb * v1
            hes[:, 1, 1] = eb * v2
            if self.makeham:
                hes[:, 2, 2] = c
            return mu, jac, hes

    def params(self, th: FloatArray, a_ref: float) -> tuple[float, float, float]:
        g = float(th[1])
        b = math.exp(float(th[0]) - g * a_ref)
        c = math.exp(float(th[2])) if self.makeham else 0.0
        return b, g, c


def _fit_poisson(model: _Bands, d: FloatArray, e: FloatArray, th0: FloatArray) -> tuple[FloatArray, bool, str]:
    """Minimise the Poisson deviance / (2 sum D) by a trust-region Newton method with exact Hessian."""
    scale = float(d.sum())
    pos = d > 0.0

    def nll(th: FloatArray) -> float:
        (mu,) = model.mu(th)
        if not np.all(np.isfinite(mu)) or not np.all(mu > 0.0):
            return math.inf
        return _half_deviance(d, e * mu, pos) / scale

    def grad(th: FloatArray) -> FloatArray:
        mu, jac = model.mu(th, 1)
        return ((e - d / mu) @ jac) / scale

    def hess(th: FloatArray) -> FloatArray:
        mu, jac, hes = model.mu(th, 2)
        w1 = e - d / mu
        w2 = d / (mu * mu)
        return (np.einsum("k,kij->ij", w1, hes) + (jac * w2[:, None]).T @ jac) / scale

    res = optimize.minimize(nll, th0, method="trust-exact", jac=grad, hess=hess,
                            options={"gtol": 1e-11, "maxiter": 500})
    th = np.asarray(res.x, dtype=np.float64)
    ok, msg = bool(res.success), str(res.message)
    if not ok:
        # trust-exact stops when the objective can no longer resolve an improvement (rounding level).
        # Accept the point when it is a strict minimum whose Newton step is negligible.
        step = _newton_step(grad(th), hess(th))
        if step is not None and np.all(np.abs(step) <= 1e-9 * (1.0 + np.abs(th))):
            ok = True
            msg += " Accepted: the Hessian is positive definite and the Newton step is below 1e-9."
    return th, ok, msg


def _half_deviance(d: FloatArray, em: FloatArray, pos: NDArray[np.bool_]) -> float:
    """Half the Poisson deviance, sum D (rho - 1 - ln rho) + sum_{D=0} E mu, rho = E mu / D.

    Written with ``delta - log1p(delta)``, ``delta = rho - 1``, so it keeps relative accuracy near the
    minimum (the naive ``E mu - D - D ln(E mu / D)`` cancels to rounding noise there).
    """
    delta = em[pos] / d[pos] - 1.0
    return float(np.sum(d[pos] * (delta - np.log1p(delta))) + np.sum(em[~pos]))


def _newton_step(grad: FloatArray, hess: FloatArray) -> FloatArray | None:
    """H^-1 grad if H is positive definite, else None."""
    try:
        chol = np.linalg.cholesky(hess)
    except np.linalg.LinAlgError:
        return None
    return np.linalg.solve(chol.T, np.linalg.solve(chol, grad))


def _fit_wls(model: _Bands, r: FloatArray, w: FloatArray, th0: FloatArray) -> tuple[FloatArray, bool, str]:
    """Minimise sum w (ln r - ln mu)^2 (w normalised to sum 1) by Levenberg-Marquardt."""
    keep = r > 0.0
    sw = np.sqrt(w[keep] / w[keep].sum())
    logr = np.log(r[keep])

    def resid(th: FloatArray) -> FloatArray:
        (mu,) = model.mu(th)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = sw * (logr - np.log(mu[keep]))
        return np.where(np.isfinite(out), out, 1e150)

    def jac(th: FloatArray) -> FloatArray:
        mu, j = model.mu(th, 1)
        out = -(sw / mu[keep])[:, None] * j[keep]
        return np.where(np.isfinite(out), out, 0.0)

    res = optimize.least_squares(resid, th0, jac=jac, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15,
                                 max_nfev=2000)
    return np.asarray(res.x, dtype=np.float64), bool(res.success), str(res.message)


def fit_gompertz(table: LifeTable, sex: str = "all", age_range: tuple[float, float] = (40, 90),
                 method: str = "poisson", makeham: bool = False, *,
                 exposure: ArrayLike | None = None) -> GompertzFit:
    """Fit a Gompertz (or Gompertz-Makeham) law to a life table's band rates.

    Parameters
    ----------
    table : LifeTable
        The table; its band rates are :meth:`LifeTable.band_rates` (constant force per band).
    sex : str
        Which column to fit.
    age_range : (float, float)
        ``(low, high)`` in years, ``0 <= low < high``; bands ``[x, x + n)`` with ``x >= low`` and
        ``x + n <= high`` are fitted. The open last band is never used.
    method : {"poisson", "wls"}
        ``"poisson"``: maximum likelihood with deaths :math:`D_i = E_i r_i` Poisson with mean
        :math:`E_i \\mu_i`. ``"wls"``: least squares on log rates with weights :math:`E_i r_i` (the
        inverse of the approximate variance :math:`1/D_i` of a log rate; Tai & Noymer 2018); bands
        with :math:`r_i = 0` have weight 0.
    makeham : bool
        Also fit the age-independent constant ``c``.
    exposure : array_like, optional
        Person-years at risk per table row (length ``len(table.ages)``; rows outside the fitted
        bands are ignored, used ones must be ``> 0`` and finite). Default: the nominal
        :data:`NOMINAL_EXPOSURE` person-years per year of band width, since a table of rates carries
        no counts. With nominal exposure only the relative weights matter: the estimates do not depend
        on the ``1e5`` scale, the deviance does.

    Returns
    -------
    GompertzFit

    Raises
    ------
    LifeTableError
        Bad ``table``, ``sex``, ``age_range``, ``method`` or ``exposure``; no band inside
        ``age_range``; fewer bands than parameters + 1 (3 for Gompertz, 4 for Gompertz-Makeham),
        counting only bands with a positive rate.

    Notes
    -----
    Model: :math:`h(a) = c + b e^{g a}` per year, ``a`` attained age in years. The fitted band rate is
    the band average of the hazard,

    .. math:: \\mu_i = \\frac{1}{n_i}\\int_{x_i}^{x_i+n_i} h(s)\\,ds
              = c + b e^{g x_i}\\,\\frac{e^{g n_i} - 1}{g n_i},

    which is what :math:`-\\ln(1 - q_i)/n_i` measures exactly; so a table generated by the law is
    recovered exactly for any band widths, with no mid-band approximation. Poisson: minimise
    :math:`\\sum_i E_i\\mu_i - D_i \\ln \\mu_i` (scipy ``trust-exact`` with the exact Hessian).
    WLS: minimise :math:`\\sum_i D_i (\\ln r_i - \\ln \\mu_i)^2` (scipy ``least_squares``,
    Levenberg-Marquardt). Internally ``b`` is replaced by the log hazard at the death-weighted mean age
    of the bands and ``c`` by ``ln c``; starting values come from a weighted straight-line fit of
    :math:`\\ln r` on mid-band age. If the data support no Makeham term, ``c`` tends to 0 (``ln c``
    to ``-inf``) and the fit may report non-convergence: fit without ``makeham`` then.
    Doubling time :math:`\\ln 2 / g`, about 8 years for human adults (Finch, Pike & Witten 1990).

    References
    ----------
    .. [1] Tai TH, Noymer A. Popul Ecol 2018 (Poisson and weighted least squares Gompertz fits).
    .. [2] Finch CE, Pike MC, Witten M. Science 1990;249:902-905.
    """
    if not isinstance(table, LifeTable):
        raise LifeTableError(f"fit_gompertz: table must be a LifeTable, got {type(table).__name__}")
    sex = table._sex("fit_gompertz", sex)
    if method not in _FIT_METHODS:
        raise LifeTableError(f"fit_gompertz: method must be 'poisson' or 'wls', got {method!r}")
    if not isinstance(makeham, (bool, np.bool_)):
        raise LifeTableError(f"fit_gompertz: makeham must be True or False, got {makeham!r}")
    makeham = bool(makeham)
    lo, hi = _age_range(age_range)

    ages = np.array(table.ages)
    widths = table.widths
    rates_all = table.band_rates(sex)
    ends = ages + widths
    sel = (ages >= lo) & (ends <= hi)  # the open band has end inf and is never selected
    if not np.any(sel):
        closed = (f"the table's closed bands span ages {_num(ages[0])} to {_num(ages[-1])}"
                  if ages.size > 1 else "the table has no closed band")
        raise LifeTableError(f"fit_gompertz: age_range {(lo, hi)!r} contains no whole band; {closed} "
                             f"(a band [x, x + n) is used when low <= x and x + n <= high)")
    if exposure is None:
        expo_all = NOMINAL_EXPOSURE * np.where(np.isfinite(widths), widths, 0.0)
        nominal = True
    else:
        expo_all = np.asarray(exposure, dtype=np.float64)
        if expo_all.shape != ages.shape:
            raise LifeTableError(f"fit_gompertz: exposure must have one value per table row "
                                 f"({ages.size}), got shape {expo_all.shape}")
        bad = sel & ~((expo_all > 0.0) & np.isfinite(expo_all))
        if np.any(bad):
            i = int(np.flatnonzero(bad)[0])
            raise LifeTableError(f"fit_gompertz: exposure[{i}] (age {_num(ages[i])}) must be > 0 and "
                                 f"finite, got {_fmt(expo_all[i])}")
        nominal = False

    x, n, r, e = ages[sel], widths[sel], rates_all[sel], expo_all[sel]
    d = e * r
    n_par = 3 if makeham else 2
    n_pos = int(np.count_nonzero(r > 0.0))
    if n_pos < n_par + 1:
        raise LifeTableError(f"fit_gompertz: age_range {(lo, hi)!r} holds {x.size} bands, {n_pos} with a "
                             f"positive rate; a {'Gompertz-Makeham' if makeham else 'Gompertz'} fit needs "
                             f"at least {n_par + 1} (parameters + 1)")

    pos = r > 0.0
    a_ref = float(np.sum(d * (x + 0.5 * n)) / d.sum())
    model = _Bands(x, n, a_ref, makeham)
    th0 = _start(x[pos] + 0.5 * n[pos] - a_ref, r[pos], d[pos], makeham)
    if method == "poisson":
        th, ok, msg = _fit_poisson(model, d, e, th0)
    else:
        th, ok, msg = _fit_wls(model, r, d, th0)
    b, g, c = model.params(th, a_ref)
    (mu,) = model.mu(th)
    if not (np.all(np.isfinite(mu)) and math.isfinite(b) and b > 0.0 and math.isfinite(g)):
        raise LifeTableError(f"fit_gompertz: the {method} fit failed ({msg}); check the rates in "
                             f"age_range {(lo, hi)!r}")
    deviance = 2.0 * _half_deviance(d, e * mu, pos)
    wrss = float(np.sum(d[pos] * (np.log(r[pos]) - np.log(mu[pos])) ** 2))
    max_rel = float(np.max(np.abs(mu[pos] / r[pos] - 1.0)))
    return GompertzFit(
        b=b, g=g, c=c, makeham=makeham, method=method, sex=sex, age_range=(lo, hi),
        band_starts=tuple(x.tolist()), band_widths=tuple(n.tolist()), observed_rates=tuple(r.tolist()),
        fitted_rates=tuple(mu.tolist()), exposure=tuple(e.tolist()), nominal_exposure=nominal,
        deviance=deviance, wrss=wrss, max_rel_error=max_rel, converged=ok, message=msg)


def _age_range(age_range: Any) -> tuple[float, float]:
    ok = (isinstance(age_range, Sequence) and not isinstance(age_range, str) and len(age_range) == 2
          and all(isinstance(v, numbers.Real) and not isinstance(v, (bool, np.bool_)) for v in age_range))
    if ok:
        lo, hi = float(age_range[0]), float(age_range[1])
        if 0.0 <= lo < hi and math.isfinite(lo) and not math.isnan(hi):
            return lo, hi
    raise LifeTableError(f"fit_gompertz: age_range must be (low, high) with 0 <= low < high, low finite, "
                         f"got {age_range!r}")


def _start(t: FloatArray, r: FloatArray, w: FloatArray, makeham: bool) -> FloatArray:
    """Starting values: weighted straight line through ln(r - c0) against centred mid-band age."""
    c0 = 0.5 * float(r.min()) if makeham else 0.0
    y = np.log(r - c0)
    ww = w / w.sum()
    tm = float(ww @ t)
    ym = float(ww @ y)
    var = float(ww @ (t - tm) ** 2)
    g0 = float(ww @ ((t - tm) * (y - ym)) / var) if var > 0.0 else 0.0
    beta0 = ym - g0 * tm
    th = [beta0, g0]
    if makeham:
        th.append(math.log(c0))
    return np.array(th)
