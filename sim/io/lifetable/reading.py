"""Reading a life table from a CSV or .xlsx file, with messages that name the file, line and column."""

from __future__ import annotations

import math
import numbers
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .errors import LifeTableError
from .table import FloatArray, LifeTable, Located, _check_kind, _validate

__all__ = ["read_life_table"]


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
        raise LifeTableError(f"read_life_table: age_column must be a non-empty string, got {age_column!r}",
                             key=("age_column",), value=age_column, rule="must be a non-empty string")
    age_column = age_column.strip()
    if age_column in columns.values():
        raise LifeTableError(f"read_life_table: age_column {age_column!r} is also given as a value column",
                             key=("age_column",), value=age_column, rule="must not also be a value column")
    p = Path(path)
    name = str(path)
    suffix = p.suffix.lower()
    if suffix == ".csv":
        if sheet is not None:
            raise LifeTableError(f"read_life_table: sheet applies to .xlsx files only, got sheet={sheet!r} "
                                 f"for {name}", key=("sheet",), value=sheet, file=name,
                                 rule="applies to .xlsx files only")
        raw = _read_csv_cells(p, name)
        unit, where = "line", name
        sheet_at: dict[str, Any] = {}
    elif suffix == ".xlsx":
        raw, sheet_name = _read_xlsx_cells(p, name, sheet)
        unit, where = "row", f"{name} sheet {sheet_name!r}"
        sheet_at = {"key": (sheet_name,)}
    else:
        raise LifeTableError(f"read_life_table: {name}: unsupported file type {p.suffix!r}; "
                             f"expected .csv or .xlsx", key=("path",), value=p.suffix, file=name,
                             rule="must be a .csv or .xlsx file")

    # Header: first row with any non-empty cell. Row index i is line/row i + 1 of the file.
    cells = [[_cell_text(v) for v in row] for row in raw]
    nonempty = [i for i, row in enumerate(cells) if any(c for c in row)]
    if not nonempty:
        rule = f"the file is empty (expected a header line with {age_column!r} and the value columns)"
        raise LifeTableError(f"{where}: {rule}", file=name, rule=rule, **sheet_at)
    h = nonempty[0]
    header = [c.strip() for c in cells[h]]
    wanted = {"age": age_column, **{f"sex {s!r}": c for s, c in columns.items()}}
    index: dict[str, int] = {}
    for role, col in wanted.items():
        hits = [j for j, c in enumerate(header) if c == col]
        if not hits:
            found = ", ".join(repr(c) for c in header if c) or "none"
            rule = f"column {col!r} ({role}) not found; columns found: {found}"
            raise LifeTableError(f"{where} {unit} {h + 1} (header): {rule}", file=name, line=h + 1,
                                 key=(*sheet_at.get("key", ()), col), rule=rule)
        if len(hits) > 1:
            rule = f"column {col!r} appears {len(hits)} times; column names must be unique"
            raise LifeTableError(f"{where} {unit} {h + 1} (header): {rule}", file=name, line=h + 1,
                                 key=(*sheet_at.get("key", ()), col), rule=rule)
        index[col] = hits[0]

    rows = [i for i in nonempty if i > h]
    line_of = [i + 1 for i in rows]

    def locate(k: int, col: str, sex: str | None = None) -> Located:
        return (f"{where} {unit} {line_of[k]}, column {col!r}",
                {"file": name, "line": line_of[k], "key": (*sheet_at.get("key", ()), col)})

    def column(col: str) -> FloatArray:
        j = index[col]
        out = np.empty(len(rows))
        for k, i in enumerate(rows):
            text = cells[i][j] if j < len(cells[i]) else ""
            out[k] = _parse_number(raw[i][j] if j < len(raw[i]) else None, text, locate(k, col))
        return out

    ages = column(age_column)
    values = {sex: column(col) for sex, col in columns.items()}
    _validate(ages, values, kind, locate, age_column, columns, where, {"file": name, **sheet_at})
    return LifeTable(ages=tuple(ages.tolist()), values={s: tuple(v.tolist()) for s, v in values.items()},
                     kind=kind, source=name, columns=columns)


def _value_columns(value_columns: Any) -> dict[str, str]:
    if isinstance(value_columns, str):
        if not value_columns.strip():
            rule = "must be a non-empty column name or a mapping of sex label to column name"
            raise LifeTableError(f"read_life_table: value_columns {rule}, got ''", key=("value_columns",),
                                 value=value_columns, rule=rule)
        return {"all": value_columns.strip()}
    if not isinstance(value_columns, Mapping) or not value_columns:
        rule = "must be a column name or a non-empty mapping of sex label to column name"
        raise LifeTableError(f"read_life_table: value_columns {rule}, got {value_columns!r}",
                             key=("value_columns",), value=value_columns, rule=rule)
    out: dict[str, str] = {}
    for sex, col in value_columns.items():
        if not isinstance(sex, str) or not sex:
            raise LifeTableError(f"read_life_table: value_columns keys (sex labels) must be non-empty "
                                 f"strings, got {sex!r}", key=("value_columns",), value=sex,
                                 rule="keys (sex labels) must be non-empty strings")
        if not isinstance(col, str) or not col.strip():
            raise LifeTableError(f"read_life_table: value_columns[{sex!r}] must be a non-empty column name, "
                                 f"got {col!r}", key=("value_columns", sex), value=col,
                                 rule="must be a non-empty column name")
        out[sex] = col.strip()
    return out


def _read_csv_cells(p: Path, name: str) -> list[list[Any]]:
    try:
        df = pd.read_csv(p, header=None, dtype=str, keep_default_na=False, na_filter=False,
                         skip_blank_lines=False, encoding="utf-8-sig")
    except pd.errors.EmptyDataError:
        return []
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise LifeTableError(f"{name}: cannot be read as CSV ({exc})", file=name,
                             rule=f"cannot be read as CSV ({exc})") from exc
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
                sheets = ", ".join(map(repr, names))
                raise LifeTableError(f"read_life_table: {name} has no sheet {sheet!r}; sheets: {sheets}",
                                     key=("sheet",), value=sheet, file=name,
                                     rule=f"must be a sheet of the workbook: {sheets}")
            df = xf.parse(sheet, header=None, dtype=object)
    except (LifeTableError, ImportError):  # ours, or openpyxl missing: pass through unchanged
        raise
    except Exception as exc:  # openpyxl raises several types for damaged or non-xlsx files
        raise LifeTableError(f"{name}: cannot be read as an .xlsx workbook ({exc})", file=name,
                             rule=f"cannot be read as an .xlsx workbook ({exc})") from exc
    return df.to_numpy(dtype=object).tolist(), sheet


def _cell_text(v: Any) -> str:
    """Cell as text for the header and emptiness checks ('' for an empty cell)."""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    return str(v).strip()


def _parse_number(v: Any, text: str, located: Located) -> float:
    """A cell as float; numbers pass through, text is parsed; empty and non-numeric cells raise."""
    loc, at = located
    if isinstance(v, (bool, np.bool_)):
        raise LifeTableError(f"{loc}: {v!r} is not a number", value=v, rule="must be a number", **at)
    if isinstance(v, numbers.Real) and not (isinstance(v, float) and math.isnan(v)):
        return float(v)
    if not text:
        raise LifeTableError(f"{loc}: the cell is empty (a number is required)", rule="a number is required",
                             **at)
    try:
        return float(text)
    except ValueError:
        raise LifeTableError(f"{loc}: {text!r} is not a number", value=text, rule="must be a number",
                             **at) from None
