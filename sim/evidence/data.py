"""Patient-level survival data: exit time, event indicator, optional delayed entry and arm, in a stated
time unit, read from CSV, Parquet or .xlsx and checked row by row
(docs/methods.md, 'Survival fits from trial evidence').

Every problem names the file, the row as the file numbers it (the header is line 1 of a CSV or
worksheet, so the first patient is line 2; Parquet rows are counted from 1), the column, the value
and the rule, as :class:`sim.problems.Problem` data. All problems are reported at once (the first
:data:`MAX_PROBLEMS`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from zipfile import BadZipFile
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..hazards import UNIT_IN_YEARS
from ..problems import Problem, ValidationError

__all__ = ["SurvivalData", "SurvivalDataError", "read_survival_data", "file_columns", "file_sheets",
           "MAX_PROBLEMS"]

MAX_PROBLEMS = 20
"""At most this many row problems are listed (the first ones in file order)."""
_UNREADABLE = (ValueError, OSError, ImportError, KeyError, BadZipFile)
"""What pandas, pyarrow and openpyxl raise for a file that is not the table its name says (an .xlsx
file that is not a zip archive raises BadZipFile)."""


class SurvivalDataError(ValidationError):
    """Survival data that cannot be used: a missing column, a bad value in a row, no events."""


def _unit(unit: str) -> str:
    if unit not in UNIT_IN_YEARS:
        raise SurvivalDataError(("unit",), f"must be one of {', '.join(UNIT_IN_YEARS)}", unit)
    return unit


@dataclass(frozen=True, eq=False)  # holds arrays: compared by identity
class SurvivalData:
    """Right-censored, possibly left-truncated survival times of one or more arms.

    Attributes
    ----------
    time : ndarray of float
        Exit time (event or censoring) on the study clock, in :attr:`unit`.
    event : ndarray of bool
        True where the exit is the event.
    entry : ndarray of float
        Time at which the patient entered the risk set (0 without delayed entry); ``entry < time``.
    group : ndarray of str or None
        Arm of each patient, or None for one arm.
    unit : str
        Time unit of ``time`` and ``entry`` (``days``, ``weeks``, ``months``, ``years``).
    source : str or None
        File the data came from (for messages).

    Use :meth:`from_arrays` to build a checked instance from arrays.
    """

    time: NDArray[np.float64]
    event: NDArray[np.bool_]
    entry: NDArray[np.float64]
    group: NDArray[np.object_] | None = None
    unit: str = "years"
    source: str | None = field(default=None, compare=False)

    @classmethod
    def from_arrays(cls, time: Any, event: Any, entry: Any = None, group: Any = None, *, unit: str = "years",
                    source: str | None = None) -> "SurvivalData":
        """Check and wrap arrays (rows numbered from 1 in the problems)."""
        frame = pd.DataFrame({"time": np.asarray(time), "event": np.asarray(event)})
        if entry is not None:
            frame["entry"] = np.asarray(entry)
        if group is not None:
            frame["group"] = np.asarray(group)
        return _from_frame(frame, "time", "event", "entry" if entry is not None else None,
                           "group" if group is not None else None, unit, source, first_line=1)

    @property
    def n(self) -> int:
        return int(self.time.size)

    @property
    def n_events(self) -> int:
        return int(self.event.sum())

    @property
    def delayed(self) -> bool:
        """Whether any patient enters after time 0 (left truncation)."""
        return bool(np.any(self.entry > 0.0))

    @property
    def groups(self) -> tuple[str, ...]:
        """Arm labels in sorted order (the first is the reference arm of the effect estimates)."""
        if self.group is None:
            return ()
        return tuple(sorted(set(self.group.tolist())))

    def arm(self, label: str) -> "SurvivalData":
        """The patients of one arm."""
        if self.group is None or label not in self.groups:
            raise SurvivalDataError(("group",), f"must be one of the arms {list(self.groups)}", label)
        keep = self.group == label
        return SurvivalData(self.time[keep], self.event[keep], self.entry[keep], None, self.unit, self.source)


def _line(first_line: int, index: int) -> int:
    return first_line + index


def _from_frame(frame: pd.DataFrame, time: str, event: str, entry: str | None, group: str | None, unit: str,
                source: str | None, first_line: int) -> SurvivalData:
    """Check the columns of ``frame`` (rows in file order) and build :class:`SurvivalData`."""
    unit = _unit(unit)
    wanted = [c for c in (time, event, entry, group) if c is not None]
    missing = [c for c in wanted if c not in frame.columns]
    if missing:
        have = ", ".join(map(str, frame.columns))
        raise SurvivalDataError.of(Problem((c,), f"is not a column of the data (columns: {have})", file=source)
                                   for c in missing)
    if len(frame) == 0:
        raise SurvivalDataError.of([Problem((time,), "the data must have at least one row", file=source)])
    problems: list[Problem] = []

    def bad(column: str, mask: NDArray[np.bool_], values: Any, rule: str) -> None:
        for i in np.flatnonzero(mask)[:MAX_PROBLEMS]:
            v = values[i]
            problems.append(Problem((column,), rule, v.item() if hasattr(v, "item") else v, source,
                                    _line(first_line, int(i))))

    def numeric(column: str) -> NDArray[np.float64]:
        raw = frame[column].to_numpy()
        num = pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
        missing_ = pd.isna(frame[column]).to_numpy()
        bad(column, missing_, raw, "is missing (every row needs a value)")
        bad(column, ~missing_ & np.isnan(num), raw, "must be a number")
        bad(column, np.isinf(num), raw, "must be finite")
        return num

    t = numeric(time)
    e = numeric(event)
    bad(time, t < 0.0, t, "must be >= 0 (a time since the start of follow-up)")
    ok_e = np.isnan(e) | (e == 0.0) | (e == 1.0)
    bad(event, ~ok_e, e, "must be 0 (censored) or 1 (event)")
    bad(time, (t == 0.0) & (e == 1.0), t, "must be > 0 where the event happens (no hazard model has an event "
        "at time 0 with positive probability)")
    if entry is not None:
        s = numeric(entry)
        bad(entry, s < 0.0, s, "must be >= 0")
        after = (s >= t) & ~((s == 0.0) & (t == 0.0))
        bad(entry, after & (s >= 0.0), s, f"must be before the exit time in column {time!r} (entry < exit)")
    else:
        s = np.zeros_like(t)
    g = None
    if group is not None:
        gv = frame[group]
        bad(group, pd.isna(gv).to_numpy(), gv.to_numpy(), "is missing (every row needs an arm)")
        g = gv.astype(str).to_numpy(dtype=object)
    if problems:
        raise SurvivalDataError.of(problems[:MAX_PROBLEMS])
    ev = e.astype(bool)
    if not ev.any():
        raise SurvivalDataError.of([Problem((event,), "must hold at least one event (1): a survival curve cannot "
                                            "be fitted to censored times only", 0, source)])
    if g is not None:
        for label in sorted(set(g.tolist())):
            if not ev[g == label].any():
                raise SurvivalDataError.of([Problem((group,), f"arm {label!r} has no events (1 in column "
                                                    f"{event!r}): no hazard can be fitted to it", label, source)])
    for arr in (t, ev, s) + ((g,) if g is not None else ()):
        arr.setflags(write=False)
    return SurvivalData(t, ev, s, g, unit, source)


def read_survival_data(path: str | Path, *, time: str = "time", event: str = "event", entry: str | None = None,
                       group: str | None = None, unit: str = "years", sheet: str | int = 0) -> SurvivalData:
    """Read patient-level survival data from CSV, Parquet or .xlsx.

    Parameters
    ----------
    path : path-like
        ``.csv``, ``.parquet`` (or ``.pq``) or ``.xlsx`` file, one row per patient.
    time, event : str
        Columns of the exit time and the event indicator (1 event, 0 censored).
    entry : str, optional
        Column of the delayed-entry time (left truncation): the patient is at risk from ``entry``
        to ``time``; ``entry < time``.
    group : str, optional
        Column of the arm.
    unit : str
        Time unit of the time columns: ``days``, ``weeks``, ``months`` or ``years``.
    sheet : str or int
        Worksheet of an .xlsx file.

    Returns
    -------
    SurvivalData

    Raises
    ------
    SurvivalDataError
        An unknown file type or unit, a missing column, and per row (file, line, column, value,
        rule): a missing or non-numeric value, a negative time, an event code other than 0/1, an
        entry at or after the exit; and data (or an arm) without events.
    """
    unit = _unit(unit)
    frame, first = _read_table(path, sheet)
    return _from_frame(frame, time, event, entry, group, unit, str(Path(path)), first_line=first)


def _read_table(path: str | Path, sheet: str | int = 0, header_only: bool = False) -> tuple[pd.DataFrame, int]:
    """The table of a .csv, .parquet (.pq) or .xlsx file (only its header with ``header_only``) and the
    file's line number of its first row."""
    p = Path(path)
    source = str(p)
    suffix = p.suffix.lower()
    if not p.is_file():
        raise SurvivalDataError.of([Problem((), "must be an existing file", file=source)])
    if suffix not in (".csv", ".parquet", ".pq", ".xlsx"):
        raise SurvivalDataError.of([Problem((), "must be a .csv, .parquet or .xlsx file", suffix, source)])
    rows = 0 if header_only else None
    try:
        if suffix == ".csv":
            return pd.read_csv(p, nrows=rows), 2
        if suffix == ".xlsx":
            return pd.read_excel(p, sheet_name=sheet, nrows=rows, engine="openpyxl"), 2
        if header_only:
            import pyarrow.parquet as pq

            return pd.DataFrame(columns=pq.read_schema(p).names), 1
        return pd.read_parquet(p), 1
    except _UNREADABLE as err:  # malformed file: name it and the reason
        raise SurvivalDataError.of([Problem((), f"cannot be read as a {suffix} table: {err}", file=source)]) from None


def file_columns(path: str | Path, sheet: str | int | None = None) -> list[str]:
    """The column names in a data file's header (to choose the time, event, entry and arm columns).

    Parameters
    ----------
    path : path-like
        A ``.csv``, ``.parquet`` (``.pq``) or ``.xlsx`` file.
    sheet : str or int, optional
        Worksheet of an .xlsx file, by name or position (default the first, :func:`file_sheets`).

    Raises
    ------
    SurvivalDataError
        An unknown file type, a missing or unreadable file, an unknown worksheet.
    """
    frame, _ = _read_table(path, 0 if sheet is None else sheet, header_only=True)
    return [str(c) for c in frame.columns]


def file_sheets(path: str | Path) -> list[str]:
    """The worksheet names of an .xlsx file in workbook order; ``[]`` for a .csv or Parquet file (one
    table each).

    Raises
    ------
    SurvivalDataError
        A missing or unreadable .xlsx file.
    """
    p = Path(path)
    if p.suffix.lower() != ".xlsx":
        return []
    if not p.is_file():
        raise SurvivalDataError.of([Problem((), "must be an existing file", file=str(p))])
    try:
        with pd.ExcelFile(p, engine="openpyxl") as book:
            return [str(name) for name in book.sheet_names]
    except _UNREADABLE as err:
        raise SurvivalDataError.of([Problem((), f"cannot be read as a .xlsx workbook: {err}", file=str(p))]) from None
