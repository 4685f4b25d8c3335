"""Numbers as the report shows them, by the rules of :mod:`sim.analysis.display` (the window's result
tables follow the same rules):

- a table with an ``mcse`` column shows ``mean``, ``mcse``, ``mcse_unpaired``, ``exact`` and
  ``value`` of each row to the decimal place of that row's Monte Carlo standard error's second
  significant digit (:func:`sim.analysis.decimals_from_mcse`);
- every other numeric column has one number of decimals for all its rows (five significant figures
  of its largest value, row by row where it mixes quantities: :func:`sim.analysis.column_decimals`);
- thousands are separated by commas (:func:`sim.analysis.format_fixed`).

Quantities that are not estimates (relative errors, cycle lengths, orders of convergence) are shown
to a few significant figures (:func:`significant`).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from ..analysis import column_decimals, decimals_from_mcse, format_fixed

__all__ = ["MCSE_GOVERNED", "formatted_frame", "significant", "cell_decimals"]

#: columns shown to the precision of the row's Monte Carlo standard error (column ``mcse``)
MCSE_GOVERNED = ("mean", "mcse", "mcse_unpaired", "exact", "value")


def significant(value: float, figures: int = 3) -> str:
    """``value`` to ``figures`` significant figures with thousands separators (blank for NaN,
    ``∞`` for infinities; scientific below 1e-4 and from 1e15)."""
    if value is None:
        return ""
    v = float(value)
    if math.isnan(v):
        return ""
    if math.isinf(v):
        return "∞" if v > 0 else "−∞"
    if v == 0:
        return "0"
    a = abs(v)
    if a < 1e-4 or a >= 1e15:
        return f"{v:.{figures - 1}e}"
    decimals = max(0, figures - 1 - math.floor(math.log10(a)))
    text = f"{v:,.{decimals}f}"
    return text.lstrip("-") if float(text.replace(",", "")) == 0 else text


def cell_decimals(frame: pd.DataFrame) -> dict[str, int | np.ndarray]:
    """The decimals of each numeric column of ``frame`` (an int for the column, or one per row),
    by the rules in the module docstring; -1 means scientific notation."""
    by_mcse = None
    if "mcse" in frame.columns and pd.api.types.is_numeric_dtype(frame["mcse"].dtype):
        by_mcse = decimals_from_mcse(frame["mcse"].to_numpy(dtype=float))
    out: dict[str, int | np.ndarray] = {}
    for name in frame.columns:
        col = frame[name]
        if isinstance(col.dtype, pd.CategoricalDtype) or pd.api.types.is_bool_dtype(col.dtype) \
                or not pd.api.types.is_numeric_dtype(col.dtype):
            continue
        values = col.to_numpy()
        decimals = column_decimals(values)
        if by_mcse is not None and str(name) in MCSE_GOVERNED and values.dtype.kind == "f":
            decimals = np.where(by_mcse >= 0, by_mcse, np.broadcast_to(decimals, by_mcse.shape))
        out[str(name)] = decimals
    return out


def formatted_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` with every cell as the text the report shows (same index and columns)."""
    decimals = cell_decimals(frame)
    out = {}
    for name in frame.columns:
        col = frame[name]
        d = decimals.get(str(name))
        if d is None:
            out[name] = [("yes" if v else "no") if isinstance(v, (bool, np.bool_))
                         else "" if v is None or (isinstance(v, float) and math.isnan(v)) else str(v)
                         for v in col.tolist()]
        elif isinstance(d, np.ndarray):
            out[name] = [format_fixed(v, int(k)) for v, k in zip(col.tolist(), d)]
        else:
            out[name] = [format_fixed(v, int(d)) for v in col.tolist()]
    return pd.DataFrame(out, index=frame.index, columns=frame.columns)
