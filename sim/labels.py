"""Labels of table columns (strategies, states, transitions) as integer codes, one way for every
reader of event logs and patient tables."""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd
from numpy.typing import NDArray

__all__ = ["label_codes"]


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
