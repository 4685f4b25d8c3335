"""Streaming a simulation run into an output folder, chunk by chunk, atomically.

The run is written into a hidden temporary sibling folder that is renamed to the output folder only
once every file is complete; an existing output folder is never touched unless ``force=True``.
Temporary folders left by a killed run into the same place are removed by the next one
(:mod:`.leftovers`).
"""

from __future__ import annotations

import io
import os
import shutil
import time
from collections.abc import Callable, Iterable, Mapping
from pathlib import Path
from types import TracebackType
from typing import IO, Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from ...model.multistate import Model
from ..atomic import fsync_folder, replace_folder
from .errors import ExportError
from .leftovers import remove_leftovers, remove_owner, temporary_folder_for, write_owner
from .long_format import long_format
from .metadata import TableHash, _metadata_json, _utc_now
from .tables import FORMATS, _arrow_table, _TextView, _tidy, _write_csv

__all__ = ["RunProgress", "RunWriter", "write_run"]

_RESERVED_METADATA = ("files", "chunks", "event_log_sha256", "patients_sha256", "run_seconds")

RunProgress = Callable[[int, "int | None"], None]


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
                raise ExportError(f"{self.path}: table {self.name!r} has repeated column names {list(df.columns)}",
                                  key=(self.name, "columns"), value=list(df.columns),
                                  rule="column names must be unique", file=self.path)
            self._dtypes = df.dtypes
            return
        first = self._dtypes
        if list(df.columns) != list(first.index):
            raise ExportError(f"{self.path}: chunk {self.chunks} of table {self.name!r} has columns "
                              f"{list(df.columns)}, the first chunk had {list(first.index)}; every chunk "
                              "must have the same columns", key=(self.name, "columns"), value=list(df.columns),
                              rule=f"chunk {self.chunks} must have the first chunk's columns {list(first.index)}",
                              file=self.path)
        for col, dt in df.dtypes.items():
            if dt != first[col]:
                what = (f"categories {list(dt.categories)} (first chunk: {list(first[col].categories)})"
                        if isinstance(dt, pd.CategoricalDtype) and isinstance(first[col], pd.CategoricalDtype)
                        else f"dtype {dt} (first chunk: {first[col]})")
                raise ExportError(f"{self.path}: chunk {self.chunks} of table {self.name!r}, column {col!r} has "
                                  f"{what}; every chunk must have the same dtypes and categories",
                                  key=(self.name, str(col)), value=str(dt), file=self.path,
                                  rule=f"chunk {self.chunks} must have the first chunk's dtype and categories "
                                       f"(it has {what})")

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
        ``chunks``, ``files`` (name, table and row count of each written table),
        ``event_log_sha256`` and ``patients_sha256`` (:class:`TableHash` of the event log and the
        patient table: their content, whatever the format and chunking) and ``run_seconds``
        (wall-clock seconds from :meth:`open` to :meth:`close`: the whole run when the pipeline
        streams into the writer), which the writer fills in.
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
            raise ExportError(f"{self.out_dir}: format {fmt!r} is not supported; use one of {sorted(FORMATS)}",
                              key=("fmt",), value=fmt, rule=f"must be one of {sorted(FORMATS)}", file=self.out_dir)
        if not isinstance(metadata, Mapping):
            raise TypeError(f"metadata: expected a dict, got {type(metadata).__name__}")
        reserved = [k for k in _RESERVED_METADATA if k in metadata]
        if reserved:
            raise ExportError(f"{self.out_dir}: metadata keys {reserved} are reserved; the writer fills them in",
                              key=("metadata", reserved[0]), value=metadata[reserved[0]], file=self.out_dir,
                              rule=f"the keys {list(_RESERVED_METADATA)} are reserved; the writer fills them in")
        if "format" in metadata and metadata["format"] != fmt:
            raise ExportError(f"{self.out_dir}: metadata['format'] is {metadata['format']!r} but the tables are "
                              f"written as {fmt!r}; drop the key or make them agree", key=("metadata", "format"),
                              value=metadata["format"], file=self.out_dir,
                              rule=f"must equal the table format {fmt!r}; drop the key or make them agree")
        if long_format_model is not None and not isinstance(long_format_model, Model):
            raise TypeError(f"long_format_model: expected a sim.model.Model or None, got "
                            f"{type(long_format_model).__name__}")
        if (self.out_dir.exists() or self.out_dir.is_symlink()) and not force:
            raise ExportError(f"{self.out_dir} exists; pass force=True (--force) to overwrite", file=self.out_dir,
                              rule="exists; pass force=True (--force) to overwrite")
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
        self.leftovers_removed: list[Path] = []
        self._made_parents: list[Path] = []
        self._sinks: dict[str, _Sink] = {}
        self._extra: dict[str, tuple[Path, int]] = {}
        self._hashes = {"events": TableHash(), "patients": TableHash()}
        self._opened_at = 0.0
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
            raise self._error(f"the writer is {self._state}; open it once")
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
                raise self._error(f"parent {self.out_dir.parent} is not a folder")
            self.leftovers_removed = remove_leftovers(self.out_dir)  # of runs killed before
            tmp = temporary_folder_for(self.out_dir)
            tmp.mkdir()  # default mode under the umask (mkdtemp's 0700 would stick to the output)
            self._tmp = tmp
            write_owner(tmp)
        except BaseException:
            self._remove_parents()
            raise
        ext = FORMATS[self.fmt]
        tables = ("events", "patients") + (("long_format",) if self.model is not None else ())
        self._sinks = {name: _Sink(self._tmp / f"{name}{ext}", self.fmt, name) for name in tables}
        self._hashes = {"events": TableHash(), "patients": TableHash()}
        self._opened_at = time.perf_counter()
        self._state = "open"

    def write_chunk(self, events: pd.DataFrame, patients: pd.DataFrame) -> None:
        """Append one chunk of whole patients (its events and patient rows) to every table."""
        if self._state != "open":
            raise self._error(f"cannot write a chunk, the writer is {self._state}")
        try:
            for name, df in (("events", events), ("patients", patients)):
                if not isinstance(df, pd.DataFrame):
                    raise TypeError(f"{name}: expected a pandas DataFrame, got {type(df).__name__}")
            if self.model is not None:
                lf = long_format(events, patients, self.model)
            self._sinks["events"].write(events)
            self._sinks["patients"].write(patients)
            self._hashes["events"].update(events)
            self._hashes["patients"].update(patients)
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
            raise self._error(f"cannot add table {name!r}, the writer is {self._state}")
        # caller mistakes found before anything is written leave the run open
        if not (isinstance(name, str) and name and name.replace("_", "").replace("-", "").isalnum()
                and name.isascii()):
            raise ExportError(f"{self.out_dir}: table name {name!r} is invalid; use letters, digits, '_' and '-'",
                              key=("name",), value=name, rule="use letters, digits, '_' and '-'", file=self.out_dir)
        if name in self._sinks or name in self._extra or name == "metadata":
            raise ExportError(f"{self.out_dir}: table name {name!r} is already used in this run", key=("name",),
                              value=name, rule="must not be used already in this run", file=self.out_dir)
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
            raise self._error(f"cannot close, the writer is {self._state}")
        try:
            assert self._tmp is not None
            n_chunks = self._sinks["events"].chunks
            if n_chunks == 0:
                raise self._error("no chunks were written; a run needs at least one chunk")
            for sink in self._sinks.values():
                sink.close()
            meta = dict(self.metadata)
            meta.setdefault("date_utc", _utc_now())
            meta["format"] = self.fmt
            meta["chunks"] = n_chunks
            meta["event_log_sha256"] = self._hashes["events"].hexdigest()
            meta["patients_sha256"] = self._hashes["patients"].hexdigest()
            meta["run_seconds"] = round(time.perf_counter() - self._opened_at, 3)
            meta["files"] = ([{"name": s.path.name, "table": name, "rows": s.rows} for name, s in self._sinks.items()]
                             + [{"name": p.name, "table": name, "rows": rows} for name, (p, rows) in self._extra.items()])
            remove_owner(self._tmp)
            meta_path = self._tmp / "metadata.json"
            with open(meta_path, "x", encoding="utf-8") as handle:
                handle.write(_metadata_json(meta, self.out_dir))
                handle.flush()
                os.fsync(handle.fileno())
            fsync_folder(self._tmp)
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
        if (out.exists() or out.is_symlink()) and not self.force:
            rule = "exists (created while the run was being written); pass force=True (--force) to overwrite"
            raise ExportError(f"{out} {rule}", file=out, rule=rule)
        replace_folder(self._tmp, out)  # never loses an existing ``out``; syncs the parent folder
        self._tmp = None

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

    def _error(self, rule: str) -> ExportError:
        """An ExportError about the output folder as a whole: ``"<out_dir>: <rule>"``."""
        return ExportError(f"{self.out_dir}: {rule}", file=self.out_dir, rule=rule)

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
                                  f"{type(item).__name__}", key=("chunks",), value=type(item).__name__,
                                  rule="each chunk must be an (events, patients) pair", file=out_dir) from None
            writer.write_chunk(events, patients)
    return dict(writer.paths)
