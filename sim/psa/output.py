"""Writing a probabilistic analysis to a folder, atomically.

Files: ``draws.parquet`` and ``draws.csv`` (the per-draw table, :mod:`sim.psa.tables`),
``parameters.parquet`` and ``parameters.csv`` (each draw's parameter values: ``draw`` then one column
per parameter), ``inputs.csv`` (the uncertain inputs, :func:`sim.psa.inputs_table`, when given: the
folder then describes its own distributions without the scenario file), any summary tables given
(``<name>.csv``) and ``metadata.json`` (the run's
provenance, :func:`sim.io.export.metadata_for`, with the table's SHA-256).

Everything is written into a hidden sibling folder ``.<name>.tmp-<12 hex digits>`` that is renamed to
the output folder only once every file is complete; on any failure or interrupt the temporary folder
is removed and an existing output folder is left as it was (replaced only with ``force``).
"""

from __future__ import annotations

import json
import os
import shutil
import uuid
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..io import ExportError, write_table, write_text_atomic, write_tidy_csv
from ..io.atomic import replace_folder
from .tables import table_hash

__all__ = ["write_psa"]


def _json_default(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, (Path, os.PathLike)):
        return os.fspath(value)
    raise TypeError(f"{type(value).__name__} is not JSON serialisable")


def write_psa(folder: str | os.PathLike[str], table: pd.DataFrame, values: pd.DataFrame,
              metadata: Mapping[str, Any], summaries: Mapping[str, pd.DataFrame] | None = None,
              force: bool = False, inputs: pd.DataFrame | None = None) -> dict[str, Path]:
    """Write the analysis to ``folder`` atomically; returns the final path of every file by name.

    Raises :class:`sim.io.ExportError` when ``folder`` exists and ``force`` is False (before
    anything is written); ``OSError`` when it cannot be written (nothing is left behind).
    """
    out = Path(folder)
    if (out.exists() or out.is_symlink()) and not force:
        raise ExportError(f"{out} exists; pass force=True (--force) to overwrite", file=out,
                          rule="exists; pass force=True (--force) to overwrite")
    made = []
    parent = out.parent
    while not parent.exists():
        made.append(parent)
        parent = parent.parent
    tmp: Path | None = None
    try:
        for p in reversed(made):
            p.mkdir()
        tmp = out.parent / f".{out.name}.tmp-{uuid.uuid4().hex[:12]}"
        tmp.mkdir()
        names = {}
        params = values.reset_index()
        for stem, df in (("draws", table), ("parameters", params)):
            for fmt in ("parquet", "csv"):
                write_table(df, tmp / f"{stem}.{fmt}", fmt=fmt)
                names[f"{stem}_{fmt}"] = f"{stem}.{fmt}"
        if inputs is not None:
            write_tidy_csv(inputs, tmp / "inputs.csv")
            names["inputs"] = "inputs.csv"
        for stem, df in (summaries or {}).items():
            write_tidy_csv(df, tmp / f"{stem}.csv")
            names[stem] = f"{stem}.csv"
        meta = dict(metadata)
        meta["draws_table_sha256"] = table_hash(table)
        meta["files"] = sorted(names.values()) + ["metadata.json"]
        text = json.dumps(meta, indent=2, ensure_ascii=False, allow_nan=False, default=_json_default) + "\n"
        write_text_atomic(tmp / "metadata.json", text)
        names["metadata"] = "metadata.json"
        replace_folder(tmp, out)
        tmp = None
    except BaseException:
        if tmp is not None:
            shutil.rmtree(tmp, ignore_errors=True)
        for p in made:  # innermost first; only if still empty
            try:
                p.rmdir()
            except OSError:
                break
        raise
    return {k: out / v for k, v in names.items()}
