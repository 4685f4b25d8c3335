"""Provenance of a run (``metadata.json``): what was run, with which seed and which versions."""

from __future__ import annotations

import hashlib
import json
import os
import platform
from collections.abc import Mapping
from datetime import date, datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa

from ... import __version__
from .errors import ExportError

__all__ = ["metadata_for"]


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


def _utc_now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


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
            raise ExportError(f"extra: keys {clash} are set by metadata_for; use other names", key=("extra",),
                              value=clash, rule="may not reuse the keys set by metadata_for; use other names")
        meta.update(extra)
    return meta
