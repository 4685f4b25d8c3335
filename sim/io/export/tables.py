"""Single tables written atomically as Parquet or CSV.

A table goes to a temporary file in the destination folder and is moved into place
(:func:`sim.io.atomic.write_atomic`: ``os.replace``, or a no-clobber hard link without ``force``), so
readers never see a partial file and a failed write leaves the destination as it was. An existing
destination is never touched unless ``force=True``.
"""

from __future__ import annotations

import errno
import io
import os
from collections.abc import Callable
from pathlib import Path
from typing import IO, BinaryIO

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from ..atomic import AtomicWriteError, write_atomic
from .errors import ExportError

__all__ = ["FORMATS", "write_table", "write_tidy_csv"]

FORMATS: dict[str, str] = {"parquet": ".parquet", "csv": ".csv"}
"""Supported table formats and the file suffix each is written with."""

_SUFFIXES: dict[str, str] = {".parquet": "parquet", ".pq": "parquet", ".csv": "csv"}


def _format_for(path: Path, fmt: str | None) -> str:
    if fmt is not None:
        if fmt not in FORMATS:
            raise ExportError(f"{path}: format {fmt!r} is not supported; use one of {sorted(FORMATS)}",
                              key=("fmt",), value=fmt, rule=f"must be one of {sorted(FORMATS)}", file=path)
        return fmt
    suffix = path.suffix.lower()
    if suffix not in _SUFFIXES:
        rule = f"use one of the suffixes {sorted(_SUFFIXES)} or pass fmt='parquet' or fmt='csv'"
        raise ExportError(f"{path}: cannot tell the format from the suffix {suffix!r}; use one of "
                          f"{sorted(_SUFFIXES)} or pass fmt='parquet' or fmt='csv'",
                          key=("path",), value=suffix, rule=rule, file=path)
    return _SUFFIXES[suffix]


def _arrow_table(df: pd.DataFrame, schema: pa.Schema | None = None) -> pa.Table:
    return pa.Table.from_pandas(df, schema=schema, preserve_index=False)


def _write_csv(df: pd.DataFrame, handle: IO[str], header: bool) -> None:
    # floats are written with the shortest repr that round-trips (read back with
    # pandas.read_csv(..., float_precision="round_trip") for bit-identical values)
    df.to_csv(handle, index=False, header=header, lineterminator="\n")


def _check_destination(path: Path, force: bool) -> None:
    if path.is_dir():
        raise ExportError(f"{path} is a folder; write_table writes a file", file=path,
                          rule="is a folder; write_table writes a file")
    if (path.exists() or path.is_symlink()) and not force:
        raise _exists(path)
    if not path.parent.is_dir():
        raise ExportError(f"{path}: folder {path.parent} does not exist; create it first", file=path,
                          rule=f"folder {path.parent} does not exist; create it first")


def _exists(path: Path) -> ExportError:
    return ExportError(f"{path} exists; pass force=True (--force) to overwrite", file=path,
                       rule="exists; pass force=True (--force) to overwrite")


def _atomic_write(path: Path, force: bool, write: Callable[[BinaryIO], None]) -> Path:
    """:func:`sim.io.atomic.write_atomic` with this module's checks and messages (ExportError)."""
    _check_destination(path, force)
    try:
        return write_atomic(path, write, force=force)
    except AtomicWriteError as err:  # the destination changed after the check above
        if err.errno == errno.EEXIST:
            raise _exists(path) from None
        raise ExportError(str(err), file=path, rule=err.reason) from None


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
        rule = "a tidy table has one column level (use DataFrame.melt or flatten the column names first)"
        raise ExportError(f"{where}: the table has {df.columns.nlevels} column levels; a tidy table has one "
                          "(use DataFrame.melt or flatten the column names first)",
                          key=("df", "columns"), value=df.columns.nlevels, rule=rule, file=where)
    index = df.index
    default = (isinstance(index, pd.RangeIndex) and index.start == 0 and index.step == 1
               and all(name is None for name in index.names))
    out = df if default else df.reset_index()
    cols = [str(c) for c in out.columns]
    if len(set(cols)) != len(cols):
        dups = sorted({c for c in cols if cols.count(c) > 1})
        raise ExportError(f"{where}: column names {dups} are repeated; tidy tables need unique column names",
                          key=("df", "columns"), value=dups, rule="tidy tables need unique column names",
                          file=where)
    return out
