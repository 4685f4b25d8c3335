"""Provenance of a run (``metadata.json``): what was run, with which seed and which versions, the
hashes of the input files the scenario reads (life tables) and of the event log it produced, so that
``hazardtrace rerun`` can say whether a rerun reproduces it bit for bit and, if not, what changed."""

from __future__ import annotations

import hashlib
import json
import os
import platform
import tomllib
from collections.abc import Iterable, Mapping
from datetime import date, datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa

from ... import __version__
from ...engine import STREAM_LAYOUT
from .errors import ExportError

__all__ = ["metadata_for", "input_files", "file_sha256", "TableHash"]

_BLOCK = 1 << 20


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
        rule = "must be JSON: numbers, strings, lists and dicts (NaN and infinity are not allowed)"
        raise ExportError(f"{where}: metadata cannot be stored as JSON ({exc}); pass numbers, strings, lists "
                          "and dicts (NaN and infinity are not allowed)", key=("metadata",), rule=f"{rule}; {exc}",
                          file=where) from None


def file_sha256(path: str | os.PathLike[str]) -> str:
    """SHA-256 of a file's bytes (hex), read in 1 MiB blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(_BLOCK), b""):
            digest.update(block)
    return digest.hexdigest()


def input_files(scenario_text: str, base_dir: str | os.PathLike[str] | None) -> list[dict[str, Any]]:
    """The files a scenario reads (the schema's file keys, e.g. ``background.life_table.file``), each
    with its SHA-256.

    Parameters
    ----------
    scenario_text : str
        The scenario as run. Text that is not TOML has no input files (nothing to record).
    base_dir : path-like or None
        Where relative paths are read from (the scenario file's folder, as the reader does); None:
        the current folder.

    Returns
    -------
    list of dict
        ``key`` (dotted key path), ``path`` (as written in the scenario), ``resolved`` (absolute
        path) and ``sha256`` (None when the file cannot be read).
    """
    from ..scenario.schema import file_keys  # the format declares which keys hold file paths

    try:
        doc = tomllib.loads(scenario_text)
    except (tomllib.TOMLDecodeError, TypeError):
        return []
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    out = []
    for key in file_keys(doc):
        value: Any = doc
        for part in key:
            value = value[part]
        target = Path(value)
        if not target.is_absolute():
            target = base / target
        try:
            digest: str | None = file_sha256(target)
        except OSError:
            digest = None
        out.append({"key": ".".join(map(str, key)), "path": value, "resolved": os.fspath(target.resolve()),
                    "sha256": digest})
    return out


class TableHash:
    """SHA-256 of a table's content, fed chunk by chunk (independent of the chunking and of the file
    format the table is written in).

    Each column has its own running hash over its values in row order: numbers as little-endian
    64-bit values (integers as int64, floats as float64, so the bytes are the values themselves),
    categorical columns as their codes (int64) after the list of category labels; the digest is the
    SHA-256 of the row count and the columns' names, kinds and digests in column order. Two tables
    have the same digest when (up to a hash collision) they hold the same values bit for bit.
    """

    def __init__(self) -> None:
        self.rows = 0
        self._columns: dict[str, Any] = {}
        self._kinds: dict[str, str] = {}

    def update(self, df: pd.DataFrame) -> None:
        """Add the rows of ``df`` (every chunk must have the first chunk's columns)."""
        if self._columns and list(map(str, df.columns)) != list(self._columns):
            raise ValueError(f"chunk columns {list(df.columns)} differ from the first chunk's {list(self._columns)}")
        for name in df.columns:
            col = df[name]
            key = str(name)
            if key not in self._columns:
                self._columns[key] = hashlib.sha256()
                if isinstance(col.dtype, pd.CategoricalDtype):
                    self._kinds[key] = "category:" + json.dumps([str(c) for c in col.cat.categories])
                else:
                    self._kinds[key] = str(col.dtype)
            self._columns[key].update(_column_bytes(col))
        self.rows += len(df)

    def hexdigest(self) -> str:
        digest = hashlib.sha256(f"rows={self.rows}\n".encode())
        for name, h in self._columns.items():
            digest.update(f"{name}\t{self._kinds[name]}\t{h.hexdigest()}\n".encode())
        return digest.hexdigest()

    @classmethod
    def of(cls, frames: Iterable[pd.DataFrame]) -> str:
        """The digest of the concatenation of ``frames``."""
        h = cls()
        for df in frames:
            h.update(df)
        return h.hexdigest()


def _column_bytes(col: pd.Series) -> bytes:
    if isinstance(col.dtype, pd.CategoricalDtype):
        return np.ascontiguousarray(col.cat.codes.to_numpy(), dtype="<i8").tobytes()
    values = col.to_numpy()
    if values.dtype.kind in "iub":
        return np.ascontiguousarray(values, dtype="<i8").tobytes()
    if values.dtype.kind == "f":
        return np.ascontiguousarray(values, dtype="<f8").tobytes()
    return "\x1f".join(map(str, values)).encode("utf-8") + b"\x1e"


def _utc_now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def metadata_for(scenario_text: str, seed: int, n_patients: int, extra: Mapping[str, Any] | None = None, *,
                 base_dir: str | os.PathLike[str] | None = None) -> dict[str, Any]:
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
    base_dir : path-like or None
        Where the scenario's relative file paths are read from; default: the folder of
        ``extra["scenario_file"]`` when given, else the current folder (as the scenario reader).

    Returns
    -------
    dict
        ``tool`` ("HazardTrace"), ``tool_version`` (``sim.__version__``), ``stream_layout``
        (``sim.engine.STREAM_LAYOUT``), ``scenario_sha256``,
        ``scenario``, ``seed``, ``patients``, ``date_utc`` (ISO 8601, seconds, UTC), ``python``,
        ``numpy``, ``pandas``, ``pyarrow`` (versions), ``input_files`` (:func:`input_files`: each
        file the scenario reads with its SHA-256), then ``extra``.

    Raises
    ------
    ExportError
        A bad seed, patient count or scenario text, or ``extra`` reusing a key.
    """
    if not isinstance(scenario_text, str):
        raise ExportError(f"scenario_text: expected the scenario file's text (str), got {type(scenario_text).__name__}",
                          key=("scenario_text",), value=type(scenario_text).__name__,
                          rule="must be the scenario file's text (str)")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ExportError(f"seed: expected a non-negative integer, got {seed!r}", key=("seed",), value=seed,
                          rule="must be a non-negative integer")
    if isinstance(n_patients, bool) or not isinstance(n_patients, (int, np.integer)) or n_patients < 1:
        raise ExportError(f"n_patients: expected a positive integer, got {n_patients!r}", key=("n_patients",),
                          value=n_patients, rule="must be a positive integer")
    meta: dict[str, Any] = {
        "tool": "HazardTrace",
        "tool_version": __version__,
        "stream_layout": STREAM_LAYOUT,  # how draws sit on the generator's counters (sim.engine.rng)
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
    if base_dir is None and extra and isinstance(extra.get("scenario_file"), (str, os.PathLike)):
        base_dir = Path(extra["scenario_file"]).resolve().parent
    meta["input_files"] = input_files(scenario_text, base_dir)
    if extra:
        clash = sorted(set(extra) & set(meta))
        if clash:
            raise ExportError(f"extra: keys {clash} are set by metadata_for; use other names", key=("extra",),
                              value=clash, rule="may not reuse the keys set by metadata_for; use other names")
        meta.update(extra)
    return meta
