"""Writing results to disk: the multi-state long format, atomic table writes and streamed runs.

Everything here is safe against half-written output. A single table is written to a temporary file
in the destination folder and moved into place with :func:`os.replace` (or a no-clobber hard link);
a whole run is written into a temporary sibling folder that is renamed to the output folder only once
every file is complete. An existing destination is never touched unless ``force=True``.

Multi-state long format
-----------------------
:func:`long_format` turns an event log into the data layout of Putter, Fiocco & Geskus (2007) and of
the ``mstate`` package (de Wreede, Fiocco & Putter 2011): every sojourn of a patient in a
non-absorbing state ``s``, from entry into ``s`` (time 0 or a move) to the next move or the end of
follow-up, gives one row per exit ``k`` of ``s`` (the model's transitions out of ``s``, plus
background death when the model has background mortality), with ``start``, ``stop`` and
``status = 1`` if exit ``k`` happened at ``stop``, else 0. At most one row per sojourn has status 1,
so the status-1 rows are exactly the logged transitions, and the rows of any one exit of ``s`` cover
the time spent in ``s`` exactly once. This is the counting-process input of cause-specific hazard
models (e.g. a Cox model stratified by transition, Andersen-Gill style ``(start, stop]`` intervals)
on the time-since-entry ("clock forward") scale.

References
----------
Putter H, Fiocco M, Geskus RB (2007). Tutorial in biostatistics: competing risks and multi-state
models. Stat Med 26(11):2389-2430.
de Wreede LC, Fiocco M, Putter H (2011). mstate: an R package for the analysis of competing risks and
multi-state models. J Stat Softw 38(7):1-30.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import platform
import shutil
import uuid
from collections.abc import Callable, Iterable, Mapping
from datetime import date, datetime, timezone
from pathlib import Path
from types import TracebackType
from typing import IO, Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from numpy.typing import NDArray

from .. import __version__
from ..analysis.columns import label_codes, patient_ids, time_column
from ..model.multistate import Model

__all__ = [
    "ExportError",
    "FORMATS",
    "LONG_FORMAT_COLUMNS",
    "long_format",
    "write_table",
    "write_tidy_csv",
    "RunWriter",
    "write_run",
    "metadata_for",
]

FORMATS: dict[str, str] = {"parquet": ".parquet", "csv": ".csv"}
"""Supported table formats and the file suffix each is written with."""

_SUFFIXES: dict[str, str] = {".parquet": "parquet", ".pq": "parquet", ".csv": "csv"}

LONG_FORMAT_COLUMNS: tuple[str, ...] = (
    "strategy", "patient", "from_state", "to_state", "transition", "start", "stop", "status")

_RESERVED_METADATA = ("files", "chunks")

RunProgress = Callable[[int, "int | None"], None]


class ExportError(ValueError):
    """Output cannot be written as asked; the message names the path (or field) and the rule."""


# =========================================================================== long format
def _codes(values: pd.Series, labels: list[str], where: str, what: str, plural: str) -> NDArray[np.intp]:
    """``label_codes`` of a column; a value outside ``labels`` is an ExportError naming it."""
    codes = label_codes(values, labels)
    bad = codes < 0
    if bad.any():
        raise ExportError(f"{where}: {what} {values.iloc[int(np.argmax(bad))]!r} is not one of the model's "
                          f"{plural} {labels}")
    return codes


def _strategy_codes(values: pd.Series, categories: list[str], where: str) -> NDArray[np.intp]:
    return _codes(values, categories, where, "strategy", "strategies")


def _state_codes(values: pd.Series, states: list[str], where: str) -> NDArray[np.intp]:
    return _codes(values, states, where, "state", "states")


def _require(df: pd.DataFrame, name: str, columns: tuple[str, ...]) -> None:
    if not isinstance(df, pd.DataFrame):
        raise TypeError(f"{name}: expected a pandas DataFrame, got {type(df).__name__}")
    missing = [c for c in columns if c not in df.columns]
    if missing:
        raise ExportError(f"{name}: missing column(s) {missing}; long_format needs {list(columns)}")


def _exit_tables(model: Model) -> tuple[NDArray[np.intp], NDArray[np.intp], NDArray[np.intp], NDArray[np.intp]]:
    """Per state: number of exits, and per (state, slot) the exit's name code (index into
    ``model.exit_names``) and target state; per (state, name code) the slot, or -1.

    The exit structure (names, slots, targets) is the same under every strategy; strategies change
    hazards only, so the first strategy's resolution is used.
    """
    resolved = model.resolve(model.strategy_names[0])
    n_states = len(model.states)
    n_exits = np.array([len(ex) for ex in resolved], dtype=np.intp)
    width = max(int(n_exits.max()), 1)
    exit_name = np.full((n_states, width), -1, dtype=np.intp)
    exit_target = np.full((n_states, width), -1, dtype=np.intp)
    slot_of = np.full((n_states, len(model.exit_names)), -1, dtype=np.intp)
    for s, exits in enumerate(resolved):  # loop over states and their exits only
        for e in exits:
            exit_name[s, e.slot] = e.index
            exit_target[s, e.slot] = e.target
            slot_of[s, e.index] = e.slot
    return n_exits, exit_name, exit_target, slot_of


def long_format(events: pd.DataFrame, patients: pd.DataFrame, model: Model,
                strategy: str | None = None) -> pd.DataFrame:
    """Multi-state long format: one row per patient per sojourn per exit at risk.

    Parameters
    ----------
    events : pandas.DataFrame
        Event log with columns ``strategy``, ``patient`` (int), ``time`` (years since entry),
        ``from_state``, ``to_state``, ``transition`` (as produced by :mod:`sim.engine`). Row order does
        not matter.
    patients : pandas.DataFrame
        Patient table with columns ``strategy``, ``patient``, ``initial_state``, ``exit_time``; the
        columns ``exit_reason`` and ``final_state`` are checked against the log when present.
    model : Model
        The model that produced the log; it fixes the exits of each state and their targets.
    strategy : str or None
        Keep only this strategy; ``None`` keeps every strategy in the tables.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`LONG_FORMAT_COLUMNS`: ``strategy`` (Categorical: the input's categories when
        ``patients['strategy']`` is Categorical, else the model's strategy names), ``patient``
        (int64), ``from_state`` and ``to_state`` (Categorical over the model's states),
        ``transition`` (Categorical over ``model.exit_names``), ``start`` and ``stop`` (float64,
        years since entry) and ``status`` (int8: 1 if this exit happened at ``stop``, else 0). Rows
        are ordered by strategy (category order), patient, start, then the exit's position among the
        state's exits (``model.resolve``: transitions in model order, then background death).

    Raises
    ------
    ExportError
        Missing columns; a state, strategy or transition unknown to the model; an event of a patient
        absent from ``patients``; duplicate patients; an event that does not leave the state the
        patient is in or is not an exit of that state to its ``to_state``; event times not strictly
        increasing from entry (time 0), or after ``exit_time``; ``exit_reason``/``final_state`` that
        contradict the log.

    Notes
    -----
    A patient's sojourns are (0, t_1], (t_1, t_2], ..., (t_m, exit_time] with t_1 < ... < t_m the
    logged move times, spent in the initial state and then each move's ``to_state``. A sojourn in a
    non-absorbing state ``s`` gives ``len(model.exits_of(s))`` rows (Putter, Fiocco & Geskus 2007,
    section 4; the ``msprep`` layout of de Wreede, Fiocco & Putter 2011). Hence

    - number of rows with ``status == 1`` = number of logged events;
    - for any exit ``k`` of ``s``, sum over its rows of (stop - start) = total time spent in ``s``.

    A sojourn of zero length that ends without a move (a patient whose follow-up ends at entry, or a
    move exactly at the end of follow-up) gives no rows: nobody is at risk over an empty interval.
    Background death is one exit name shared by every state, so a transition is identified by
    (``from_state``, ``transition``); stratify hazard models on both.

    Vectorised: sorting, ``np.searchsorted``, ``np.repeat`` and table look-ups; the only Python
    loops run over states and exits.

    References
    ----------
    Putter, Fiocco & Geskus 2007, Stat Med 26(11):2389-2430; de Wreede, Fiocco & Putter 2011,
    J Stat Softw 38(7).
    """
    if not isinstance(model, Model):
        raise TypeError(f"model: expected a sim.model.Model, got {type(model).__name__}")
    _require(patients, "patients", ("strategy", "patient", "initial_state", "exit_time"))
    _require(events, "events", ("strategy", "patient", "time", "from_state", "to_state", "transition"))
    states = list(model.state_names)
    absorbing = np.array([s.absorbing for s in model.states], dtype=bool)
    sdtype = patients["strategy"].dtype
    strategies = (list(sdtype.categories) if isinstance(sdtype, pd.CategoricalDtype)
                  else list(model.strategy_names))
    unknown = sorted(set(map(str, strategies)) - set(model.strategy_names))
    if unknown:
        raise ExportError(f"patients['strategy']: {unknown} are not strategies of the model "
                          f"{list(model.strategy_names)}")
    if strategy is not None:
        model.strategy(strategy)  # raises ModelError naming the valid strategies
        pmask = (patients["strategy"] == strategy).to_numpy(dtype=bool)
        if not pmask.any():
            raise ExportError(f"strategy: {strategy!r} has no rows in patients; strategies present: "
                              f"{sorted(map(str, patients['strategy'].dropna().unique()))}")
        patients = patients.loc[pmask]
        events = events.loc[(events["strategy"] == strategy).to_numpy(dtype=bool)]

    # ---- patients, sorted by (strategy code, id)
    p_strat = _strategy_codes(patients["strategy"], strategies, "patients['strategy']")
    p_id = patient_ids(patients, "patients", ExportError)
    e_strat = _strategy_codes(events["strategy"], strategies, "events['strategy']")
    e_id = patient_ids(events, "events", ExportError)
    n, n_ev = p_id.size, e_id.size
    lo = int(min(p_id.min(initial=0), e_id.min(initial=0)))
    span = int(max(p_id.max(initial=0), e_id.max(initial=0))) - lo + 1
    if span * max(len(strategies), 1) >= 2**62:
        raise ExportError(f"patients['patient']: ids span {span}, too wide to key with {len(strategies)} "
                          "strategies; renumber the patients")
    p_key = p_strat.astype(np.int64) * span + (p_id - lo)
    p_order = np.argsort(p_key, kind="stable")
    p_key = p_key[p_order]
    dup = p_key[1:] == p_key[:-1]
    if dup.any():
        i = p_order[1:][dup][0]
        raise ExportError(f"patients['patient']: id {int(p_id[i])} appears twice in strategy "
                          f"{strategies[p_strat[i]]!r}; ids must be unique within a strategy")
    p_strat, p_id = p_strat[p_order], p_id[p_order]
    initial = _state_codes(patients["initial_state"], states, "patients['initial_state']")[p_order]
    exit_time = time_column(patients, "patients", "exit_time", ExportError)[p_order]

    # ---- events, mapped to patients and sorted by (patient, time, row)
    e_key = e_strat.astype(np.int64) * span + (e_id - lo)
    pidx = np.searchsorted(p_key, e_key)
    known = (pidx < n) & (p_key[np.minimum(pidx, max(n - 1, 0))] == e_key) if n else np.zeros(n_ev, bool)
    if not known.all():
        i = int(np.flatnonzero(~known)[0])
        raise ExportError(f"events['patient']: id {int(e_id[i])} (strategy {strategies[e_strat[i]]!r}) has no "
                          "row in patients; every event must belong to a listed patient")
    time = time_column(events, "events", "time", ExportError)
    ev_from = _state_codes(events["from_state"], states, "events['from_state']")
    ev_to = _state_codes(events["to_state"], states, "events['to_state']")
    names = list(model.exit_names)
    ev_name = label_codes(events["transition"], names)
    if (ev_name < 0).any():
        bad = events["transition"].iloc[int(np.argmax(ev_name < 0))]
        raise ExportError(f"events['transition']: {bad!r} is not one of the model's exits {names}")
    o = np.lexsort((time, pidx))  # stable: ties keep row order (and are rejected below)
    pidx, time, ev_from, ev_to, ev_name = pidx[o], time[o], ev_from[o], ev_to[o], ev_name[o]

    # ---- sojourns: patient i owns positions entry[i] .. entry[i] + count[i]
    count = np.bincount(pidx, minlength=n)
    entry = np.arange(n) + np.searchsorted(pidx, np.arange(n), side="left")
    ev_pos = np.arange(n_ev) + pidx + 1  # the sojourn each event starts
    n_soj = n + n_ev
    soj_state = np.empty(n_soj, dtype=np.intp)
    soj_start = np.empty(n_soj, dtype=np.float64)
    soj_state[entry], soj_start[entry] = initial, 0.0
    soj_state[ev_pos], soj_start[ev_pos] = ev_to, time
    soj_patient = np.repeat(np.arange(n), count + 1)
    soj_stop = np.empty(n_soj, dtype=np.float64)
    soj_stop[:-1] = soj_start[1:]
    last = entry + count
    soj_stop[last] = exit_time

    def fail(j: int, rule: str) -> ExportError:
        return ExportError(f"events: patient {int(p_id[pidx[j]])} (strategy {strategies[p_strat[pidx[j]]]!r}), "
                           f"move {names[ev_name[j]]!r} at time {float(time[j])!r}: {rule}")

    prev_start = soj_start[ev_pos - 1]
    not_after = time <= prev_start
    if not_after.any():
        j = int(np.flatnonzero(not_after)[0])
        raise fail(j, f"must come strictly after the previous move or entry (time {float(prev_start[j])!r}); "
                      "a sojourn of zero length has nobody at risk")
    late = time > exit_time[pidx]
    if late.any():
        j = int(np.flatnonzero(late)[0])
        raise fail(j, f"is after the patient's exit_time {float(exit_time[pidx[j]])!r}")
    here = soj_state[ev_pos - 1]
    wrong_from = ev_from != here
    if wrong_from.any():
        j = int(np.flatnonzero(wrong_from)[0])
        raise fail(j, f"from_state {states[ev_from[j]]!r} is not the state the patient is in ({states[here[j]]!r})")
    n_exits, exit_name, exit_target, slot_of = _exit_tables(model)
    slot = slot_of[ev_from, ev_name]
    if (slot < 0).any():
        j = int(np.flatnonzero(slot < 0)[0])
        raise fail(j, f"is not an exit of state {states[ev_from[j]]!r}; its exits are "
                      f"{model.exits_of(states[ev_from[j]])}")
    wrong_to = exit_target[ev_from, slot] != ev_to
    if wrong_to.any():
        j = int(np.flatnonzero(wrong_to)[0])
        raise fail(j, f"to_state {states[ev_to[j]]!r} is not the target of this exit "
                      f"({states[exit_target[ev_from[j], slot[j]]]!r})")
    end_state = soj_state[last]
    if "final_state" in patients.columns:
        final = _state_codes(patients["final_state"], states, "patients['final_state']")[p_order]
        bad = final != end_state
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise ExportError(f"patients['final_state']: {states[final[i]]!r} for patient {int(p_id[i])} "
                              f"contradicts the log, whose moves end in {states[end_state[i]]!r}")
    if "exit_reason" in patients.columns:
        code = label_codes(patients["exit_reason"], ("absorbed", "censored"))[p_order]
        absorbed = absorbing[end_state]
        bad = ((code == 0) != absorbed) | ((code == 0) & (soj_start[last] != exit_time))
        bad |= code < 0
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            reason = patients["exit_reason"].to_numpy()[p_order]
            raise ExportError(f"patients['exit_reason']: {reason[i]!r} for patient {int(p_id[i])} contradicts the "
                              f"log (last state {states[end_state[i]]!r} from time {float(soj_start[last[i]])!r}, "
                              f"exit_time {float(exit_time[i])!r}); 'absorbed' means a move into an absorbing "
                              "state at exit_time, 'censored' means follow-up ended in a non-absorbing state")

    # ---- expand: one row per kept sojourn per exit of its state
    end_slot = np.full(n_soj, -1, dtype=np.intp)
    end_slot[ev_pos - 1] = slot
    keep = ~absorbing[soj_state] & ((soj_stop > soj_start) | (end_slot >= 0))
    ks = np.flatnonzero(keep)
    width = n_exits[soj_state[ks]]
    rows = np.repeat(ks, width)
    first = np.cumsum(width) - width
    row_slot = np.arange(rows.size) - np.repeat(first, width)
    row_state = soj_state[rows]
    row_patient = soj_patient[rows]
    return pd.DataFrame({
        "strategy": pd.Categorical.from_codes(p_strat[row_patient], categories=strategies),
        "patient": p_id[row_patient],
        "from_state": pd.Categorical.from_codes(row_state, categories=states),
        "to_state": pd.Categorical.from_codes(exit_target[row_state, row_slot], categories=states),
        "transition": pd.Categorical.from_codes(exit_name[row_state, row_slot], categories=names),
        "start": soj_start[rows],
        "stop": soj_stop[rows],
        "status": (end_slot[rows] == row_slot).astype(np.int8),
    }, copy=False)


# =========================================================================== single tables
def _format_for(path: Path, fmt: str | None) -> str:
    if fmt is not None:
        if fmt not in FORMATS:
            raise ExportError(f"{path}: format {fmt!r} is not supported; use one of {sorted(FORMATS)}")
        return fmt
    suffix = path.suffix.lower()
    if suffix not in _SUFFIXES:
        raise ExportError(f"{path}: cannot tell the format from the suffix {suffix!r}; use one of "
                          f"{sorted(_SUFFIXES)} or pass fmt='parquet' or fmt='csv'")
    return _SUFFIXES[suffix]


def _fsync_dir(folder: Path) -> None:
    """Make a rename inside ``folder`` durable (POSIX); a no-op where folders cannot be opened."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _arrow_table(df: pd.DataFrame, schema: pa.Schema | None = None) -> pa.Table:
    return pa.Table.from_pandas(df, schema=schema, preserve_index=False)


def _write_csv(df: pd.DataFrame, handle: IO[str], header: bool) -> None:
    # floats are written with the shortest repr that round-trips (read back with
    # pandas.read_csv(..., float_precision="round_trip") for bit-identical values)
    df.to_csv(handle, index=False, header=header, lineterminator="\n")


def _check_destination(path: Path, force: bool) -> None:
    if path.is_dir():
        raise ExportError(f"{path} is a folder; write_table writes a file")
    if (path.exists() or path.is_symlink()) and not force:
        raise ExportError(f"{path} exists; pass force=True (--force) to overwrite")
    if not path.parent.is_dir():
        raise ExportError(f"{path}: folder {path.parent} does not exist; create it first")


def _atomic_write(path: Path, force: bool, write: Callable[[IO[bytes]], None]) -> Path:
    """Write through ``write(binary_handle)`` into a temporary file next to ``path``, then move it
    into place: ``os.replace`` with ``force``, else a hard link that fails if ``path`` appeared
    meanwhile (falling back to check-then-replace where hard links are unsupported)."""
    _check_destination(path, force)
    # a uniquely named sibling opened with "x" (not mkstemp, whose 0600 mode would stick to the output)
    tmp = path.parent / f".{path.name}.{uuid.uuid4().hex[:12]}.tmp"
    try:
        with open(tmp, "xb") as handle:
            write(handle)
            handle.flush()
            os.fsync(handle.fileno())
        if force:
            os.replace(tmp, path)
        else:
            try:
                os.link(tmp, path)
            except FileExistsError:
                raise ExportError(f"{path} exists; pass force=True (--force) to overwrite") from None
            except OSError:  # file system without hard links
                if path.exists():
                    raise ExportError(f"{path} exists; pass force=True (--force) to overwrite") from None
                os.replace(tmp, path)
            else:
                tmp.unlink()
        _fsync_dir(path.parent)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


def write_table(df: pd.DataFrame, path: str | os.PathLike[str], fmt: str | None = None,
                force: bool = False) -> Path:
    """Write one table atomically as Parquet or CSV.

    Parameters
    ----------
    df : pandas.DataFrame
        The table; its index is not written (reset it first if it carries data).
    path : path-like
        Destination file. Its folder must exist.
    fmt : {"parquet", "csv"} or None
        Format; ``None`` infers it from the suffix (``.parquet``/``.pq`` or ``.csv``).
    force : bool
        Replace an existing file. Without it an existing ``path`` is an error.

    Returns
    -------
    pathlib.Path
        The written path.

    Raises
    ------
    ExportError
        ``path`` exists and ``force`` is False, is a folder, its folder is missing, or the format is
        unknown.

    Notes
    -----
    Parquet is written with pyarrow; Categorical columns become dictionary columns and
    ``pandas.read_parquet`` restores them with their categories (order included), other dtypes
    round-trip exactly. CSV holds labels and the shortest decimal repr of each float, which
    round-trips exactly with ``pandas.read_csv(path, float_precision="round_trip")``; dtypes
    (categories) are not stored. The data go to a temporary file in the same folder which is then
    renamed, so readers never see a partial file and a failed write leaves the destination as it was.
    """
    if not isinstance(df, pd.DataFrame):
        raise TypeError(f"df: expected a pandas DataFrame, got {type(df).__name__}")
    p = Path(path)
    kind = _format_for(p, fmt)
    if kind == "parquet":
        table = _arrow_table(df)
        return _atomic_write(p, force, lambda handle: pq.write_table(table, handle))

    def write_csv(handle: IO[bytes]) -> None:
        with _TextView(handle) as text:
            _write_csv(df, text, header=True)

    return _atomic_write(p, force, write_csv)


class _TextView:
    """UTF-8 text view of a binary handle that flushes but does not close it."""

    def __init__(self, handle: IO[bytes]) -> None:
        self._io = io.TextIOWrapper(handle, encoding="utf-8", newline="", write_through=True)

    def __enter__(self) -> IO[str]:
        return self._io

    def __exit__(self, *exc: object) -> None:
        self._io.flush()
        self._io.detach()


def write_tidy_csv(df: pd.DataFrame, path: str | os.PathLike[str], force: bool = False) -> Path:
    """Write a tidy result table (occupancy curves, cohort traces, study tables) as CSV, atomically.

    Parameters
    ----------
    df : pandas.DataFrame
        One observation per row, one variable per column. A named or non-default index (e.g. the
        ``patient`` index of per-patient tables) is written as leading column(s); a default
        ``RangeIndex`` is dropped.
    path : path-like
        Destination ``.csv`` file (any suffix is accepted; the format is always CSV).
    force : bool
        Replace an existing file.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    ExportError
        Columns with several levels (not tidy: melt or flatten them first), duplicate column names,
        or the destination rules of :func:`write_table`.
    """
    p = Path(path)
    return write_table(_tidy(df, p), p, fmt="csv", force=force)


def _tidy(df: pd.DataFrame, where: Path) -> pd.DataFrame:
    """``df`` with a meaningful index moved into columns; refuses multi-level or repeated columns."""
    if not isinstance(df, pd.DataFrame):
        raise TypeError(f"df: expected a pandas DataFrame, got {type(df).__name__}")
    if isinstance(df.columns, pd.MultiIndex):
        raise ExportError(f"{where}: the table has {df.columns.nlevels} column levels; a tidy table has one "
                          "(use DataFrame.melt or flatten the column names first)")
    index = df.index
    default = (isinstance(index, pd.RangeIndex) and index.start == 0 and index.step == 1
               and all(name is None for name in index.names))
    out = df if default else df.reset_index()
    cols = [str(c) for c in out.columns]
    if len(set(cols)) != len(cols):
        dups = sorted({c for c in cols if cols.count(c) > 1})
        raise ExportError(f"{where}: column names {dups} are repeated; tidy tables need unique column names")
    return out


# =========================================================================== streamed runs
def _json_default(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (Path, os.PathLike)):
        return os.fspath(value)
    if isinstance(value, (datetime, date)):
        return value.isoformat()
    if isinstance(value, (set, frozenset)):
        return sorted(value)
    raise TypeError(f"{type(value).__name__} is not JSON serialisable")


def _metadata_json(metadata: Mapping[str, Any], where: Path) -> str:
    try:
        return json.dumps(metadata, indent=2, ensure_ascii=False, allow_nan=False, default=_json_default) + "\n"
    except (TypeError, ValueError) as exc:
        raise ExportError(f"{where}: metadata cannot be stored as JSON ({exc}); pass numbers, strings, lists "
                          "and dicts (NaN and infinity are not allowed)") from None


def _utc_now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


class _Sink:
    """One output table, appended chunk by chunk; checks that every chunk has the first one's
    columns and dtypes (Categorical dtypes compare by categories and order)."""

    def __init__(self, path: Path, fmt: str, name: str) -> None:
        self.path, self.fmt, self.name = path, fmt, name
        self.rows = 0
        self.chunks = 0
        self._dtypes: pd.Series | None = None
        self._handle: IO[bytes] | None = None
        self._text: IO[str] | None = None
        self._parquet: pq.ParquetWriter | None = None
        self._schema: pa.Schema | None = None

    def _check(self, df: pd.DataFrame) -> None:
        if self._dtypes is None:
            if len(set(map(str, df.columns))) != df.shape[1]:
                raise ExportError(f"{self.path}: table {self.name!r} has repeated column names {list(df.columns)}")
            self._dtypes = df.dtypes
            return
        first = self._dtypes
        if list(df.columns) != list(first.index):
            raise ExportError(f"{self.path}: chunk {self.chunks} of table {self.name!r} has columns "
                              f"{list(df.columns)}, the first chunk had {list(first.index)}; every chunk "
                              "must have the same columns")
        for col, dt in df.dtypes.items():
            if dt != first[col]:
                what = (f"categories {list(dt.categories)} (first chunk: {list(first[col].categories)})"
                        if isinstance(dt, pd.CategoricalDtype) and isinstance(first[col], pd.CategoricalDtype)
                        else f"dtype {dt} (first chunk: {first[col]})")
                raise ExportError(f"{self.path}: chunk {self.chunks} of table {self.name!r}, column {col!r} has "
                                  f"{what}; every chunk must have the same dtypes and categories")

    def write(self, df: pd.DataFrame) -> None:
        self._check(df)
        if self._handle is None:
            self._handle = open(self.path, "xb")
        if self.fmt == "parquet":
            if self._parquet is None:
                table = _arrow_table(df)
                self._schema = table.schema
                self._parquet = pq.ParquetWriter(self._handle, self._schema)
            else:
                table = _arrow_table(df, self._schema)
            self._parquet.write_table(table, row_group_size=max(table.num_rows, 1))  # one row group per chunk
        else:
            if self._text is None:
                self._text = io.TextIOWrapper(self._handle, encoding="utf-8", newline="")
            _write_csv(df, self._text, header=self.chunks == 0)
        self.rows += len(df)
        self.chunks += 1

    def close(self) -> None:
        """Finish the file and flush it to disk."""
        if self._parquet is not None:
            self._parquet.close()
            self._parquet = None
        if self._text is not None:
            self._text.flush()
            self._text.detach()
            self._text = None
        if self._handle is not None:
            self._handle.flush()
            os.fsync(self._handle.fileno())
            self._handle.close()
            self._handle = None

    def discard(self) -> None:
        """Close without caring about errors (the folder is being removed)."""
        for closer in (self._parquet, self._text, self._handle):
            if closer is not None:
                try:
                    closer.close()
                except Exception:  # noqa: BLE001 - best effort on the abort path
                    pass
        self._parquet = self._text = self._handle = None


class RunWriter:
    """Stream a simulation run into an output folder chunk by chunk, atomically.

    Use as a context manager::

        with RunWriter("out/run1", metadata=metadata_for(text, seed, n)) as w:
            for events, patients in simulate_chunks(model, n, seed, chunk_size=20_000):
                w.write_chunk(events, patients)
        w.paths  # {"events": ..., "patients": ..., "metadata": ...}

    Parameters
    ----------
    out_dir : path-like
        Output folder to create. Missing parent folders are created (and removed again, if still
        empty, when the run fails).
    fmt : {"parquet", "csv"}
        Table format for every table.
    force : bool
        Replace an existing ``out_dir`` once the new output is complete. Without it an existing
        ``out_dir`` is an error raised here, before any work.
    metadata : mapping
        What the caller records about the run (tool version, scenario hash and text, seed, patients,
        ...; see :func:`metadata_for`). Stored in ``metadata.json`` with ``date_utc`` added if
        missing, ``format`` (a caller's ``format`` must equal ``fmt``), and the reserved keys
        ``chunks`` and ``files`` (name, table and row count of each written table), which the writer
        fills in.
    long_format_model : Model or None
        When given, also write ``long_format.<ext>``: :func:`long_format` of each chunk (chunks must
        hold whole patients, as :func:`sim.engine.simulate_chunks` yields them).
    progress : callable or None
        Called as ``progress(patients_done, n_patients)`` after each chunk, with ``n_patients`` from
        ``metadata["patients"]`` when it is an integer, else ``None``.

    Notes
    -----
    Files: ``events.<ext>``, ``patients.<ext>``, optionally ``long_format.<ext>``, any
    ``<name>.csv`` added with :meth:`add_table`, and ``metadata.json``. Parquet tables are written with one ``pyarrow.parquet.ParquetWriter`` each,
    one row group per chunk, so memory is bounded by the chunk (plus the writer's per-file buffers);
    CSV tables get their header once and each chunk is appended. Everything goes into a hidden
    temporary sibling folder (same parent, so the final rename is atomic on one file system), renamed
    to ``out_dir`` on success. On any exception, including ``KeyboardInterrupt``, the temporary folder
    is removed and ``out_dir`` is left as it was.
    """

    def __init__(self, out_dir: str | os.PathLike[str], *, fmt: str = "parquet", force: bool = False,
                 metadata: Mapping[str, Any], long_format_model: Model | None = None,
                 progress: RunProgress | None = None) -> None:
        self.out_dir = Path(out_dir)
        if fmt not in FORMATS:
            raise ExportError(f"{self.out_dir}: format {fmt!r} is not supported; use one of {sorted(FORMATS)}")
        if not isinstance(metadata, Mapping):
            raise TypeError(f"metadata: expected a dict, got {type(metadata).__name__}")
        reserved = [k for k in _RESERVED_METADATA if k in metadata]
        if reserved:
            raise ExportError(f"{self.out_dir}: metadata keys {reserved} are reserved; the writer fills them in")
        if "format" in metadata and metadata["format"] != fmt:
            raise ExportError(f"{self.out_dir}: metadata['format'] is {metadata['format']!r} but the tables are "
                              f"written as {fmt!r}; drop the key or make them agree")
        if long_format_model is not None and not isinstance(long_format_model, Model):
            raise TypeError(f"long_format_model: expected a sim.model.Model or None, got "
                            f"{type(long_format_model).__name__}")
        if (self.out_dir.exists() or self.out_dir.is_symlink()) and not force:
            raise ExportError(f"{self.out_dir} exists; pass force=True (--force) to overwrite")
        self.fmt, self.force = fmt, bool(force)
        self.metadata = dict(metadata)
        _metadata_json(self.metadata, self.out_dir)  # fail now, not after the whole run
        self.model = long_format_model
        self.progress = progress
        total = self.metadata.get("patients")
        self._total = int(total) if isinstance(total, (int, np.integer)) and not isinstance(total, bool) else None
        self.paths: dict[str, Path] = {}
        self.patients_done = 0
        self._tmp: Path | None = None
        self._made_parents: list[Path] = []
        self._sinks: dict[str, _Sink] = {}
        self._extra: dict[str, tuple[Path, int]] = {}
        self._state = "new"

    # ------------------------------------------------------------------ life cycle
    def __enter__(self) -> "RunWriter":
        self.open()
        return self

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        if exc_type is None:
            self.close()
        else:
            self.abort()

    def open(self) -> None:
        """Create the temporary folder (and any missing parents of ``out_dir``)."""
        if self._state != "new":
            raise ExportError(f"{self.out_dir}: the writer is {self._state}; open it once")
        missing = []
        parent = self.out_dir.parent
        while not parent.exists():
            missing.append(parent)
            parent = parent.parent
        try:
            for folder in reversed(missing):
                folder.mkdir()
                self._made_parents.append(folder)
            if not self.out_dir.parent.is_dir():
                raise ExportError(f"{self.out_dir}: parent {self.out_dir.parent} is not a folder")
            tmp = self.out_dir.parent / f".{self.out_dir.name}.tmp-{uuid.uuid4().hex[:12]}"
            tmp.mkdir()  # default mode under the umask (mkdtemp's 0700 would stick to the output)
            self._tmp = tmp
        except BaseException:
            self._remove_parents()
            raise
        ext = FORMATS[self.fmt]
        tables = ("events", "patients") + (("long_format",) if self.model is not None else ())
        self._sinks = {name: _Sink(self._tmp / f"{name}{ext}", self.fmt, name) for name in tables}
        self._state = "open"

    def write_chunk(self, events: pd.DataFrame, patients: pd.DataFrame) -> None:
        """Append one chunk of whole patients (its events and patient rows) to every table."""
        if self._state != "open":
            raise ExportError(f"{self.out_dir}: cannot write a chunk, the writer is {self._state}")
        try:
            for name, df in (("events", events), ("patients", patients)):
                if not isinstance(df, pd.DataFrame):
                    raise TypeError(f"{name}: expected a pandas DataFrame, got {type(df).__name__}")
            if self.model is not None:
                lf = long_format(events, patients, self.model)
            self._sinks["events"].write(events)
            self._sinks["patients"].write(patients)
            if self.model is not None:
                self._sinks["long_format"].write(lf)
                del lf
        except BaseException:
            self.abort()
            raise
        self.patients_done += int(patients["patient"].nunique()) if "patient" in patients.columns else 0
        if self.progress is not None:
            self.progress(self.patients_done, self._total)

    def add_table(self, name: str, df: pd.DataFrame) -> None:
        """Add a small result table (summary, increments, study tables) to the run as ``<name>.csv``.

        Parameters
        ----------
        name : str
            File stem: letters, digits, ``_`` and ``-``; not a streamed table's name, ``metadata``
            or a name added before.
        df : pandas.DataFrame
            A tidy table, written whole as CSV whatever the run's format (as :func:`write_tidy_csv`:
            a meaningful index becomes leading columns). It is committed with the rest of the run.

        Raises
        ------
        ExportError
            A bad or repeated name, or a table that is not tidy; the run stays open. A failure while
            writing aborts the run (see :meth:`abort`).
        """
        if self._state != "open":
            raise ExportError(f"{self.out_dir}: cannot add table {name!r}, the writer is {self._state}")
        # caller mistakes found before anything is written leave the run open
        if not (isinstance(name, str) and name and name.replace("_", "").replace("-", "").isalnum()
                and name.isascii()):
            raise ExportError(f"{self.out_dir}: table name {name!r} is invalid; use letters, digits, '_' and '-'")
        if name in self._sinks or name in self._extra or name == "metadata":
            raise ExportError(f"{self.out_dir}: table name {name!r} is already used in this run")
        assert self._tmp is not None
        path = self._tmp / f"{name}.csv"
        out = _tidy(df, self.out_dir / path.name)
        try:
            with open(path, "xb") as handle:
                with _TextView(handle) as text:
                    _write_csv(out, text, header=True)
                handle.flush()
                os.fsync(handle.fileno())
            self._extra[name] = (path, len(out))
        except BaseException:
            self.abort()
            raise

    def close(self) -> dict[str, Path]:
        """Finish every file, write ``metadata.json`` and move the folder to ``out_dir``.

        Returns
        -------
        dict of str to pathlib.Path
            Final paths by table name (``events``, ``patients``, ``long_format``, tables added with
            :meth:`add_table`) and ``metadata``.
        """
        if self._state != "open":
            raise ExportError(f"{self.out_dir}: cannot close, the writer is {self._state}")
        try:
            assert self._tmp is not None
            n_chunks = self._sinks["events"].chunks
            if n_chunks == 0:
                raise ExportError(f"{self.out_dir}: no chunks were written; a run needs at least one chunk")
            for sink in self._sinks.values():
                sink.close()
            meta = dict(self.metadata)
            meta.setdefault("date_utc", _utc_now())
            meta["format"] = self.fmt
            meta["chunks"] = n_chunks
            meta["files"] = ([{"name": s.path.name, "table": name, "rows": s.rows} for name, s in self._sinks.items()]
                             + [{"name": p.name, "table": name, "rows": rows} for name, (p, rows) in self._extra.items()])
            meta_path = self._tmp / "metadata.json"
            with open(meta_path, "x", encoding="utf-8") as handle:
                handle.write(_metadata_json(meta, self.out_dir))
                handle.flush()
                os.fsync(handle.fileno())
            _fsync_dir(self._tmp)
            self._commit()
        except BaseException:
            self.abort()
            raise
        self._state = "closed"
        self.paths = {name: self.out_dir / s.path.name for name, s in self._sinks.items()}
        self.paths.update({name: self.out_dir / p.name for name, (p, _) in self._extra.items()})
        self.paths["metadata"] = self.out_dir / "metadata.json"
        return dict(self.paths)

    def _commit(self) -> None:
        assert self._tmp is not None
        out = self.out_dir
        if out.exists() or out.is_symlink():
            if not self.force:
                raise ExportError(f"{out} exists (created while the run was being written); "
                                  "pass force=True (--force) to overwrite")
            backup = out.parent / f".{out.name}.old-{uuid.uuid4().hex[:12]}"
            os.rename(out, backup)
            try:
                os.rename(self._tmp, out)
            except BaseException:
                os.rename(backup, out)
                raise
            self._tmp = None
            if backup.is_dir() and not backup.is_symlink():
                shutil.rmtree(backup, ignore_errors=True)
            else:
                backup.unlink(missing_ok=True)
        else:
            os.rename(self._tmp, out)
            self._tmp = None
        _fsync_dir(out.parent)

    def abort(self) -> None:
        """Discard everything written so far; ``out_dir`` is left untouched. Safe to call twice."""
        if self._state in ("closed", "aborted"):
            return
        for sink in self._sinks.values():
            sink.discard()
        if self._tmp is not None:
            shutil.rmtree(self._tmp, ignore_errors=True)
            self._tmp = None
        self._remove_parents()
        self._state = "aborted"

    def _remove_parents(self) -> None:
        for folder in reversed(self._made_parents):
            try:
                folder.rmdir()  # only if still empty
            except OSError:
                break
        self._made_parents = []


def write_run(out_dir: str | os.PathLike[str], chunks: Iterable[tuple[pd.DataFrame, pd.DataFrame]], *,
              fmt: str = "parquet", force: bool = False, metadata: Mapping[str, Any],
              long_format_model: Model | None = None, progress: RunProgress | None = None) -> dict[str, Path]:
    """Stream ``(events, patients)`` chunks to ``out_dir`` with bounded memory, atomically.

    Parameters
    ----------
    out_dir : path-like
        Output folder; must not exist unless ``force``.
    chunks : iterable of (pandas.DataFrame, pandas.DataFrame)
        E.g. :func:`sim.engine.simulate_chunks`; each chunk holds whole patients, and every chunk's
        tables have the same columns, dtypes and categories.
    fmt, force, metadata, long_format_model, progress
        As :class:`RunWriter`.

    Returns
    -------
    dict of str to pathlib.Path
        ``events``, ``patients`` (and ``long_format``) table paths and ``metadata``.

    Raises
    ------
    ExportError
        ``out_dir`` exists without ``force`` (raised before ``chunks`` is touched), chunks that
        disagree on columns or categories, no chunks, metadata that is not JSON. Any exception from
        ``chunks`` propagates after the partial output is removed.
    """
    with RunWriter(out_dir, fmt=fmt, force=force, metadata=metadata, long_format_model=long_format_model,
                   progress=progress) as writer:
        for item in chunks:
            try:
                events, patients = item
            except (TypeError, ValueError):
                raise ExportError(f"{out_dir}: each chunk must be an (events, patients) pair, got "
                                  f"{type(item).__name__}") from None
            writer.write_chunk(events, patients)
    return dict(writer.paths)


def metadata_for(scenario_text: str, seed: int, n_patients: int, extra: Mapping[str, Any] | None = None
                 ) -> dict[str, Any]:
    """Provenance of a run, for ``metadata.json``.

    Parameters
    ----------
    scenario_text : str
        The scenario file's text exactly as run (stored, and hashed as UTF-8).
    seed : int
        The run's seed (non-negative).
    n_patients : int
        Patients per strategy.
    extra : mapping or None
        Further entries (e.g. ``strategies``, ``chunk_size``); they may not reuse the keys below.

    Returns
    -------
    dict
        ``tool`` ("HazardTrace"), ``tool_version`` (``sim.__version__``), ``scenario_sha256``,
        ``scenario``, ``seed``, ``patients``, ``date_utc`` (ISO 8601, seconds, UTC), ``python``,
        ``numpy``, ``pandas``, ``pyarrow`` (versions), then ``extra``.

    Raises
    ------
    ExportError
        A bad seed, patient count or scenario text, or ``extra`` reusing a key.
    """
    if not isinstance(scenario_text, str):
        raise ExportError(f"scenario_text: expected the scenario file's text (str), got {type(scenario_text).__name__}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ExportError(f"seed: expected a non-negative integer, got {seed!r}")
    if isinstance(n_patients, bool) or not isinstance(n_patients, (int, np.integer)) or n_patients < 1:
        raise ExportError(f"n_patients: expected a positive integer, got {n_patients!r}")
    meta: dict[str, Any] = {
        "tool": "HazardTrace",
        "tool_version": __version__,
        "scenario_sha256": hashlib.sha256(scenario_text.encode("utf-8")).hexdigest(),
        "scenario": scenario_text,
        "seed": int(seed),
        "patients": int(n_patients),
        "date_utc": _utc_now(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "pandas": pd.__version__,
        "pyarrow": pa.__version__,
    }
    if extra:
        clash = sorted(set(extra) & set(meta))
        if clash:
            raise ExportError(f"extra: keys {clash} are set by metadata_for; use other names")
        meta.update(extra)
    return meta
