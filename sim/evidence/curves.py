"""Published Kaplan-Meier curves in: digitised (time, survival) points and numbers at risk read from
CSV, cleaned and checked, then turned into patient-level data by the algorithm of Guyot et al. 2012
(docs/methods.md, 'Survival fits from trial evidence').

Cleaning (every change is reported, with the file's line): points sorted by time; survival given in
percent (any value above 1.5) divided by 100; small excursions outside [0, 1] and below time 0
clipped; small rises made monotone by the running minimum; several points at one time merged into
the lowest (the value after the drop); a first point (0, 1) added or set; a point added at each time
with a published number at risk that has none (the curve's value there, a step function). A rise or
an excursion larger than ``tolerance`` is not a reading error but a wrong file: it is refused, as are
numbers at risk that increase.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..problems import KeyPath, Problem
from .data import SurvivalData, SurvivalDataError
from .guyot import guyot_reconstruct

__all__ = ["CleanCurve", "clean_curve", "read_curves", "read_at_risk", "Reconstruction", "reconstruct",
           "parse_total_events", "SINGLE_ARM"]

SINGLE_ARM = "all"
"""The arm label of one-arm curves (and of data without a group column)."""


@dataclass(frozen=True, eq=False)  # holds arrays: compared by identity
class CleanCurve:
    """Digitised points after cleaning, and what was changed (one line each)."""

    time: NDArray[np.float64]
    survival: NDArray[np.float64]
    changes: tuple[str, ...]


def _problem(source: str | None, column: str, line: int | None, value: object, rule: str) -> SurvivalDataError:
    return SurvivalDataError.of([Problem((column,), rule, value, source, line)])


def clean_curve(time: NDArray[np.float64], survival: NDArray[np.float64], *, lines: NDArray[np.int64] | None = None,
                source: str | None = None, tolerance: float = 0.05) -> CleanCurve:
    """Clean one arm's digitised points (module docstring); ``lines`` are the file lines of the points.

    Raises
    ------
    SurvivalDataError
        A value outside [0, 1] by more than ``tolerance``, a rise of survival by more than
        ``tolerance`` (naming the file line of the point), a time below ``-tolerance`` times the last
        time, or fewer than two points.
    """
    t = np.asarray(time, dtype=np.float64)
    s = np.asarray(survival, dtype=np.float64)
    ln = np.arange(1, t.size + 1) if lines is None else np.asarray(lines)
    changes: list[str] = []
    if t.size < 2:
        raise _problem(source, "time", None, int(t.size), "a curve needs at least two digitised points")
    order = np.argsort(t, kind="stable")
    if np.any(order != np.arange(t.size)):
        changes.append("points sorted by time")
        t, s, ln = t[order], s[order], ln[order]
    if np.nanmax(s) > 1.5:
        changes.append("survival read as percentages (values above 1.5) and divided by 100")
        s = s / 100.0
    span = float(t[-1]) if t[-1] > 0 else 1.0
    low_t = np.flatnonzero(t < -tolerance * span)
    if low_t.size:
        i = low_t[0]
        raise _problem(source, "time", int(ln[i]), float(t[i]), f"must be >= 0 (a digitised time below 0 by more "
                       f"than {tolerance:g} of the curve's length is not a reading error)")
    out = np.flatnonzero((s < -tolerance) | (s > 1.0 + tolerance))
    if out.size:
        i = out[0]
        raise _problem(source, "survival", int(ln[i]), float(s[i]), f"must be within [0, 1] (tolerance {tolerance:g})")
    for name, mask, fix in (("time", t < 0.0, lambda: np.maximum(t, 0.0)),):
        if mask.any():
            changes.append(f"{int(mask.sum())} time(s) below 0 set to 0 (lines {_lines(ln[mask])})")
            t = fix()
    clip = (s < 0.0) | (s > 1.0)
    if clip.any():
        changes.append(f"{int(clip.sum())} survival value(s) outside [0, 1] clipped (lines {_lines(ln[clip])})")
        s = np.clip(s, 0.0, 1.0)
    running = np.minimum.accumulate(s)
    rise = s - running
    if np.any(rise > tolerance):
        i = int(np.argmax(rise))
        raise _problem(source, "survival", int(ln[i]), float(s[i] * 1.0),
                       f"must not rise along the curve (it rises by {rise[i]:.3g} over the points before it, more "
                       f"than the tolerance {tolerance:g} for reading errors)")
    if np.any(rise > 0.0):
        moved = rise > 0.0
        changes.append(f"{int(moved.sum())} point(s) lowered to make survival non-increasing (largest change "
                       f"{rise.max():.3g}; lines {_lines(ln[moved])})")
        s = running
    uniq, first = np.unique(t, return_index=True)
    if uniq.size < t.size:
        changes.append(f"{t.size - uniq.size} point(s) at repeated times merged into the lowest survival there")
        last = np.append(first[1:] - 1, t.size - 1)
        t, s = uniq, s[last]  # survival is non-increasing: the last point at a time is the lowest
    if t[0] > 0.0:
        changes.append(f"point (0, 1) added before the first point at {t[0]:g}")
        t, s = np.insert(t, 0, 0.0), np.insert(s, 0, 1.0)
    elif s[0] != 1.0:
        changes.append(f"survival at time 0 set to 1 (was {s[0]:g})")
        s = s.copy()
        s[0] = 1.0
    return CleanCurve(t, s, tuple(changes))


def _lines(lines: NDArray[np.int64]) -> str:
    shown = ", ".join(str(int(v)) for v in lines[:8])
    return shown + (", ..." if lines.size > 8 else "")


def _read_csv(path: str | Path, columns: tuple[str, ...], arm: str | None) -> tuple[pd.DataFrame, str]:
    p = Path(path)
    source = str(p)
    if not p.is_file():
        raise SurvivalDataError.of([Problem((), "must be an existing file", file=source)])
    try:
        frame = pd.read_csv(p)
    except (ValueError, OSError) as err:
        raise SurvivalDataError.of([Problem((), f"cannot be read as CSV: {err}", file=source)]) from None
    wanted = columns + ((arm,) if arm is not None and arm in frame.columns else ())
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        have = ", ".join(map(str, frame.columns))
        raise SurvivalDataError.of(Problem((c,), f"is not a column of the file (columns: {have})", file=source)
                                   for c in missing)
    frame = frame[list(wanted)].copy()
    frame["_line"] = np.arange(2, len(frame) + 2)
    for c in columns:
        num = pd.to_numeric(frame[c], errors="coerce")
        bad = num.isna() | ~np.isfinite(num.to_numpy(dtype=np.float64, na_value=np.nan))
        if bad.any():
            i = int(np.flatnonzero(bad.to_numpy())[0])
            raise _problem(source, c, int(frame["_line"].iloc[i]), frame[c].iloc[i], "must be a finite number")
        frame[c] = num.astype(np.float64)
    if arm is None or arm not in frame.columns:
        frame["_arm"] = SINGLE_ARM
    else:
        if frame[arm].isna().any():
            i = int(np.flatnonzero(frame[arm].isna().to_numpy())[0])
            raise _problem(source, arm, int(frame["_line"].iloc[i]), None, "is missing (every row needs an arm)")
        frame["_arm"] = frame[arm].astype(str)
    return frame, source


def read_curves(path: str | Path, *, time: str = "time", survival: str = "survival", arm: str = "arm",
                tolerance: float = 0.05) -> dict[str, CleanCurve]:
    """Digitised Kaplan-Meier points per arm from a CSV (columns ``time``, ``survival`` and, for
    several arms, ``arm``), each arm cleaned by :func:`clean_curve`."""
    frame, source = _read_csv(path, (time, survival), arm)
    return {label: clean_curve(g[time].to_numpy(), g[survival].to_numpy(), lines=g["_line"].to_numpy(),
                               source=source, tolerance=tolerance)
            for label, g in frame.groupby("_arm", sort=True)}


def read_at_risk(path: str | Path, *, time: str = "time", at_risk: str = "at_risk", arm: str = "arm"
                 ) -> dict[str, tuple[NDArray[np.float64], NDArray[np.int64]]]:
    """Numbers at risk per arm from a CSV (columns ``time``, ``at_risk`` and, for several arms,
    ``arm``): times strictly increasing from 0, whole numbers >= 0 that never increase.

    Raises
    ------
    SurvivalDataError
        Naming the file line: a first time other than 0, times not increasing, a number at risk that
        is negative, fractional or larger than the one before.
    """
    frame, source = _read_csv(path, (time, at_risk), arm)
    out = {}
    for label, g in frame.groupby("_arm", sort=True):
        t, n, ln = g[time].to_numpy(), g[at_risk].to_numpy(), g["_line"].to_numpy()
        if t[0] != 0.0:
            raise _problem(source, time, int(ln[0]), float(t[0]), f"the first time of arm {label!r} must be 0 (the "
                           "number at risk at 0 is the arm's size)")
        for i in range(n.size):
            if n[i] < 0 or n[i] != np.floor(n[i]):
                raise _problem(source, at_risk, int(ln[i]), float(n[i]), "must be a whole number >= 0")
            if i and not t[i] > t[i - 1]:
                raise _problem(source, time, int(ln[i]), float(t[i]), f"must be greater than the time before "
                               f"({t[i - 1]:g}) in arm {label!r}")
            if i and n[i] > n[i - 1]:
                raise _problem(source, at_risk, int(ln[i]), int(n[i]), f"must not increase (it was {int(n[i - 1])} "
                               f"at {t[i - 1]:g}) in arm {label!r}")
        if n[0] < 1:
            raise _problem(source, at_risk, int(ln[0]), float(n[0]), "the number at risk at 0 must be >= 1")
        out[label] = (t.astype(np.float64), n.astype(np.int64))
    return out


@dataclass(frozen=True, eq=False)  # holds arrays: compared by identity
class Reconstruction:
    """Reconstructed patient-level data with the cleaned curves and every change and note per arm."""

    data: SurvivalData
    curves: dict[str, CleanCurve]
    notes: dict[str, tuple[str, ...]]


def _prepare_arm(curve: CleanCurve, t_risk: NDArray[np.float64], n_risk: NDArray[np.int64]
                 ) -> tuple[NDArray, NDArray, NDArray, NDArray, list[str]]:
    """Drop at-risk times after the last point; add a point at each at-risk time without one."""
    notes = []
    t, s = curve.time, curve.survival
    keep = t_risk <= t[-1]
    if not keep.all():
        notes.append(f"numbers at risk after the last digitised time {t[-1]:g} not used "
                     f"(times {', '.join(f'{v:g}' for v in t_risk[~keep])})")
        t_risk, n_risk = t_risk[keep], n_risk[keep]
    new = t_risk[~np.isin(t_risk, t)]
    if new.size:
        value = s[np.searchsorted(t, new, side="right") - 1]
        notes.append(f"point(s) added at the at-risk time(s) {', '.join(f'{v:g}' for v in new)} (the curve's value)")
        order = np.argsort(np.concatenate([t, new]), kind="stable")
        t, s = np.concatenate([t, new])[order], np.concatenate([s, value])[order]
    return t, s, t_risk, n_risk, notes


def reconstruct(curves: Mapping[str, CleanCurve], at_risk: Mapping[str, tuple[NDArray, NDArray]], *,
                total_events: Mapping[str, int] | None = None, unit: str = "years", source: str | None = None
                ) -> Reconstruction:
    """Patient-level data for every arm (Guyot et al. 2012, BMC Med Res Methodol 12:9).

    Parameters
    ----------
    curves : mapping arm -> CleanCurve
        From :func:`read_curves` (or :func:`clean_curve`).
    at_risk : mapping arm -> (times, numbers)
        From :func:`read_at_risk`; the same arms as ``curves``.
    total_events : mapping arm -> int, optional
        Reported total events per arm, where known.
    unit : str
        Time unit of the curves.

    Returns
    -------
    Reconstruction
        ``data`` has a ``group`` column when there are several arms.
    """
    if set(curves) != set(at_risk):
        raise SurvivalDataError(("arm",), f"the curves' arms {sorted(curves)} and the at-risk table's arms "
                              f"{sorted(at_risk)} must be the same", sorted(set(curves) ^ set(at_risk)))
    totals = dict(total_events or {})
    unknown = sorted(set(totals) - set(curves))
    if unknown:
        raise SurvivalDataError(("total_events", unknown[0]), f"must name an arm of the curves {sorted(curves)}", unknown[0])
    times, events, groups, notes = [], [], [], {}
    for label in sorted(curves):
        t, s, tr, nr, arm_notes = _prepare_arm(curves[label], *at_risk[label])
        res = guyot_reconstruct(t, s, tr, nr, totals.get(label))
        times.append(res.time)
        events.append(res.event)
        groups.append(np.full(res.time.size, label, dtype=object))
        notes[label] = tuple(curves[label].changes) + tuple(arm_notes) + res.notes
    several = len(curves) > 1
    data = SurvivalData.from_arrays(np.concatenate(times), np.concatenate(events).astype(int),
                                    group=np.concatenate(groups) if several else None, unit=unit, source=source)
    return Reconstruction(data, dict(curves), notes)


def parse_total_events(items: str | Iterable[str], key: KeyPath = ("total_events",)) -> dict[str, int]:
    """Reported total events per arm, from ``ARM=N`` items (``N`` alone for one arm, labelled
    :data:`SINGLE_ARM`), as :func:`reconstruct` takes them.

    Parameters
    ----------
    items : str or iterable of str
        The items (``["control=120", "treated=95"]``), or one string of comma-separated items
        (``"control=120, treated=95"``); blanks around arms and numbers are ignored.
    key : tuple
        The key path that names the input in a problem (``("--total-events",)`` on the command line).

    Raises
    ------
    SurvivalDataError
        An item that is not ``ARM=N`` with ``N`` a whole number >= 0, or an arm given twice.
    """
    parts = items.split(",") if isinstance(items, str) else list(items)
    out: dict[str, int] = {}
    for raw in parts:
        item = raw.strip()
        if not item and isinstance(items, str):
            continue
        arm, _, value = item.rpartition("=")
        if not re.fullmatch(r"[0-9]+", value.strip()):
            raise SurvivalDataError(key, "must be ARM=N (or N for one arm) with N a whole number >= 0", item)
        label = arm.strip() or SINGLE_ARM
        if label in out:
            raise SurvivalDataError(key, f"gives arm {label!r} twice", item)
        out[label] = int(value)
    return out
