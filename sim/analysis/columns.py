"""Columns of event logs and patient tables read into numpy, one way for every reader (the
estimators and the exports): labels (strategies, states, transitions) as integer codes, patient ids
as integers, times as finite non-negative floats. Problems raise the caller's error class with the
table, column, value and rule."""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd
from numpy.typing import NDArray

__all__ = ["label_codes", "patient_ids", "time_column"]


def label_codes(values: pd.Series, labels: Sequence[str]) -> NDArray[np.intp]:
    """Index of each value in ``labels`` (-1 where absent or missing), matched as strings.

    A categorical column is matched through its categories and integer codes, so no Python string
    is built per row (converting a 2M-row categorical to strings holds the GIL for ~0.1 s)."""
    where = {str(label): i for i, label in enumerate(labels)}
    if isinstance(values.dtype, pd.CategoricalDtype):
        lookup = np.array([where.get(str(c), -1) for c in values.cat.categories] + [-1], dtype=np.intp)
        return lookup[values.cat.codes.to_numpy()]  # code -1 (missing) picks the trailing -1
    obj = values.to_numpy(dtype=object)
    codes = pd.Index(list(where), dtype=object).get_indexer(obj).astype(np.intp)  # hash lookup, no per-row Python
    miss = np.flatnonzero(codes < 0)
    if miss.size:  # values that are not text (numbers, say) are matched by their text form
        vals = obj[miss]
        keep = ~pd.isna(vals)
        codes[miss[keep]] = [where.get(str(v), -1) for v in vals[keep]]
    return codes


def patient_ids(df: pd.DataFrame, table: str, error: type[Exception] = ValueError) -> NDArray[np.int64]:
    """The ``patient`` column as int64; ids of any other dtype are an ``error``."""
    ids = df["patient"].to_numpy()
    if not np.issubdtype(ids.dtype, np.integer):
        raise error(f"{table}['patient']: dtype {ids.dtype} is invalid; patient ids must be integers")
    return ids.astype(np.int64, copy=False)


def time_column(df: pd.DataFrame, table: str, column: str, error: type[Exception] = ValueError) -> NDArray[np.float64]:
    """``column`` as float64 times; a value that is not a finite number >= 0 is an ``error``."""
    try:
        x = df[column].to_numpy(dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise error(f"{table}['{column}']: values must be numbers ({exc})") from None
    bad = ~np.isfinite(x) | (x < 0)
    if bad.any():
        raise error(f"{table}['{column}']: value {float(x[bad][0])!r} (row {int(np.flatnonzero(bad)[0])}) is "
                    "invalid; times must be finite and >= 0")
    return x
