"""Reading a life table from a CSV or .xlsx file, with messages that name the file, line and column.

The file is opened once, without blocking, checked to be a regular file and read whole into memory up
to :data:`MAX_LIFE_TABLE_BYTES` (a named pipe, a device such as ``/dev/zero``, a directory or a larger
file is refused before any byte is parsed); an .xlsx workbook (a zip archive) is also refused when its
parts would unpack to more than :data:`MAX_XLSX_UNPACKED_BYTES`. Messages quote at most a short, sanitised excerpt of a
cell (:func:`_excerpt`), never whole lines of the file: a path given by mistake (or on purpose) to a
file that is not a life table does not have its contents echoed.
"""

from __future__ import annotations

import io
import math
import numbers
import os
import stat
import zipfile
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .errors import LifeTableError
from .table import FloatArray, LifeTable, Located, _check_kind, _validate

__all__ = ["MAX_LIFE_TABLE_BYTES", "MAX_XLSX_UNPACKED_BYTES", "read_life_table"]

MAX_LIFE_TABLE_BYTES = 1024 * 1024
"""Largest life-table file read, in bytes (1 MiB). A life table has one row per age band, a few
kilobytes; the limit also bounds the parsing time (about 2 s for a worst-case file of 1 MiB of empty
lines). Larger files are refused before they are read."""

MAX_XLSX_UNPACKED_BYTES = 4 * 1024 * 1024
"""Largest total unpacked size of an .xlsx workbook's parts, in bytes (4 MiB, about 25,000 rows of
three cells; parsing that takes about 2 s). Bounds a small workbook that would unpack to far more."""

_EXCERPT_CHARS = 20  # longest excerpt of a cell quoted in a message
_HEADER_NAMES = 8  # most header cells listed when a column is not found


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
        Also a path that is not a regular file (a directory, a named pipe, a device) or a file larger
        than :data:`MAX_LIFE_TABLE_BYTES`; such files are refused without being read.
    FileNotFoundError
        ``path`` does not exist.
    PermissionError
        ``path`` cannot be opened for reading.

    Notes
    -----
    The header is the first non-empty row; data rows follow it. Rows that are empty in every cell are
    skipped (line numbers in messages still count them). Columns not named are ignored (e.g. a
    ``note`` column). Header names are compared after stripping surrounding spaces. Line numbers
    assume one record per line (no quoted line breaks). Messages quote cells only as short excerpts
    (at most 20 characters, non-printable characters replaced by ``?``).
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
        raw = _read_csv_cells(_read_bytes(p, name), name)
        unit, where = "line", name
        sheet_at: dict[str, Any] = {}
    elif suffix == ".xlsx":
        raw, sheet_name = _read_xlsx_cells(_read_bytes(p, name), name, sheet)
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
            found = _listing([c for c in header if c])
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


def _read_bytes(p: Path, name: str) -> bytes:
    """The whole file at ``p`` if it is a regular file of at most :data:`MAX_LIFE_TABLE_BYTES`.

    Opened without blocking (``O_NONBLOCK``: opening a named pipe returns at once) and checked with
    ``fstat`` on the open descriptor, so what is checked is what is read. A directory, pipe, socket or
    device, or a file larger than the limit (by its size, or by what a read returns), raises
    :class:`LifeTableError` before any byte is parsed.
    """
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0)
    fd = os.open(p, flags)  # FileNotFoundError / PermissionError pass through (callers expect OSError)
    try:
        info = os.fstat(fd)
        if not stat.S_ISREG(info.st_mode):
            what = _file_kind(info.st_mode)
            rule = f"must be a regular file (a .csv or .xlsx life table), not {what}"
            raise LifeTableError(f"{name}: {rule}", key=("path",), file=name, rule=rule)
        if info.st_size > MAX_LIFE_TABLE_BYTES:
            _too_large(name, info.st_size)
        if hasattr(os, "set_blocking"):
            os.set_blocking(fd, True)  # a regular file: ordinary reads from here on
        with os.fdopen(fd, "rb", closefd=True) as fh:
            fd = -1
            data = fh.read(MAX_LIFE_TABLE_BYTES + 1)  # a file growing while read is still bounded
    finally:
        if fd >= 0:
            os.close(fd)
    if len(data) > MAX_LIFE_TABLE_BYTES:
        _too_large(name, len(data))
    return data


def _file_kind(mode: int) -> str:
    """What a non-regular file is, in words."""
    for test, what in ((stat.S_ISDIR, "a directory"), (stat.S_ISFIFO, "a named pipe"),
                       (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
                       (stat.S_ISSOCK, "a socket")):
        if test(mode):
            return what
    return "a special file"


def _too_large(name: str, size: int) -> None:
    rule = (f"must be at most {MAX_LIFE_TABLE_BYTES} bytes ({MAX_LIFE_TABLE_BYTES // (1024 * 1024)} MiB; "
            "a life table is far smaller)")
    raise LifeTableError(f"{name}: the file has {size} bytes or more; it {rule}", key=("path",), file=name,
                         value=size, rule=rule)


def _excerpt(text: Any) -> str:
    """A short, sanitised excerpt of a cell for a message: at most 20 characters, each character
    that is not printable (control characters, line breaks, undecodable bytes) replaced by ``?``,
    and ``...`` where it was cut."""
    s = str(text)
    cut = len(s) > _EXCERPT_CHARS
    s = "".join(ch if ch.isprintable() else "?" for ch in s[:_EXCERPT_CHARS])
    return s + "..." if cut else s


def _listing(names: list[str]) -> str:
    """Header cells found, as short excerpts (at most 8 of them), for a 'column not found' message."""
    if not names:
        return "none"
    shown = ", ".join(repr(_excerpt(c)) for c in names[:_HEADER_NAMES])
    more = len(names) - _HEADER_NAMES
    return shown + (f" and {more} more" if more > 0 else "")


def _reason(exc: BaseException) -> str:
    """A parser's complaint, first line only and bounded (it may quote the file otherwise)."""
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    text = "".join(ch if ch.isprintable() else "?" for ch in text)
    return text if len(text) <= 120 else text[:120] + "..."


def _read_csv_cells(data: bytes, name: str) -> list[list[Any]]:
    try:
        df = pd.read_csv(io.BytesIO(data), header=None, dtype=str, keep_default_na=False, na_filter=False,
                         skip_blank_lines=False, encoding="utf-8-sig")
    except pd.errors.EmptyDataError:
        return []
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        rule = f"cannot be read as CSV ({_reason(exc)})"
        raise LifeTableError(f"{name}: {rule}", file=name, rule=rule) from exc
    return df.to_numpy(dtype=object).tolist()


def _read_xlsx_cells(data: bytes, name: str, sheet: str | None) -> tuple[list[list[Any]], str]:
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as archive:
            unpacked = sum(item.file_size for item in archive.infolist())
    except (zipfile.BadZipFile, ValueError):  # not a zip archive: openpyxl's complaint below names it
        unpacked = 0
    if unpacked > MAX_XLSX_UNPACKED_BYTES:
        rule = (f"must unpack to at most {MAX_XLSX_UNPACKED_BYTES} bytes "
                f"({MAX_XLSX_UNPACKED_BYTES // (1024 * 1024)} MiB; a life table is far smaller)")
        raise LifeTableError(f"{name}: the workbook unpacks to {unpacked} bytes; it {rule}", key=("path",),
                             file=name, value=unpacked, rule=rule)
    try:
        with pd.ExcelFile(io.BytesIO(data), engine="openpyxl") as xf:
            names = list(xf.sheet_names)
            if sheet is None:
                sheet = names[0]
            elif sheet not in names:
                sheets = _listing([str(n) for n in names])
                raise LifeTableError(f"read_life_table: {name} has no sheet {sheet!r}; sheets: {sheets}",
                                     key=("sheet",), value=sheet, file=name,
                                     rule=f"must be a sheet of the workbook: {sheets}")
            df = xf.parse(sheet, header=None, dtype=object)
    except (LifeTableError, ImportError):  # ours, or openpyxl missing: pass through unchanged
        raise
    except Exception as exc:  # openpyxl raises several types for damaged or non-xlsx files
        rule = f"cannot be read as an .xlsx workbook ({_reason(exc)})"
        raise LifeTableError(f"{name}: {rule}", file=name, rule=rule) from exc
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
        shown = _excerpt(text)
        raise LifeTableError(f"{loc}: {shown!r} is not a number", value=shown, rule="must be a number",
                             **at) from None
