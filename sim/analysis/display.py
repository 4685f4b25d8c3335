"""How numbers are shown in tables (the window's result tables and, next, reports).

Three rules, all common practice in reporting simulation results (no single source):

- A simulated mean is shown to the decimal place of its Monte Carlo standard error's second
  significant digit, and the MCSE with two significant digits: ``26.484 (0.041)``,
  ``17,044 (53)``. More digits than that are noise; fewer hide what the run resolved.
- Any other column has one number of decimals for all its rows (so that the digits line up),
  chosen to give its largest value five significant figures, between 0 and 6 decimals; a column
  that mixes quantities of very different size (values spanning more than two orders of
  magnitude) gets five significant figures row by row instead.
- Thousands are separated by commas; values too large or too small for fixed notation
  (>= 1e15, or a column whose largest value is < 1e-6) use scientific notation.

The functions are vectorised over a column: the decimals are computed once per column (or per row
from its MCSE), and a cell is formatted only when shown.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["MAX_DECIMALS", "decimals_from_mcse", "column_decimals", "format_fixed"]

MAX_DECIMALS = 6
_SCIENTIFIC = -1  # decimals value meaning "scientific notation"


def decimals_from_mcse(mcse: ArrayLike, max_decimals: int = 8) -> NDArray[np.int64]:
    """Decimals that show each MCSE with two significant digits (and its mean to the same place):
    ``1 - floor(log10(mcse))``, clipped to ``[0, max_decimals]``. Rows whose MCSE is 0, negative,
    NaN or infinite get -2 (meaning "no rule here": the caller falls back to the column's decimals).
    """
    m = np.asarray(mcse, dtype=float)
    out = np.full(m.shape, -2, dtype=np.int64)
    ok = np.isfinite(m) & (m > 0)
    out[ok] = np.clip(1 - np.floor(np.log10(m[ok])).astype(np.int64), 0, max_decimals)
    return out


def column_decimals(values: ArrayLike, significant: int = 5) -> int | NDArray[np.int64]:
    """Decimals for a column: ``significant`` significant figures for its largest finite absolute
    value, clipped to ``[0, MAX_DECIMALS]``, the same for every row. A column whose non-zero values
    span more than two orders of magnitude holds several quantities (e.g. life years and costs in
    one ``value`` column): each row then gets its own decimals by the same rule. Integers, zeros and
    columns without finite values get 0; -1 means scientific notation (largest value >= 1e15, or
    every non-zero value < 1e-6)."""
    v = np.asarray(values)
    if v.dtype.kind in "iub":
        return 0
    a = np.abs(v.astype(float))
    ok = np.isfinite(a) & (a > 0)
    if not ok.any():
        return 0
    top, low = float(a[ok].max()), float(a[ok].min())
    if top >= 1e15 or top < 1e-6:
        return _SCIENTIFIC
    if top <= 100 * low:
        return int(min(MAX_DECIMALS, max(0, significant - 1 - math.floor(math.log10(top)))))
    per_row = np.zeros(a.shape, dtype=np.int64)
    per_row[ok] = np.clip(significant - 1 - np.floor(np.log10(a[ok])).astype(np.int64), 0, MAX_DECIMALS)
    return per_row


def format_fixed(value: float | int | None, decimals: int) -> str:
    """One cell: ``decimals`` fixed decimals with thousands separators (``-1``: scientific with four
    significant figures); blank for None/NaN, ``∞``/``−∞`` for infinities; no sign on a value that
    rounds to zero."""
    if value is None:
        return ""
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        text = f"{int(value):,}"
    else:
        v = float(value)
        if math.isnan(v):
            return ""
        if math.isinf(v):
            return "∞" if v > 0 else "−∞"
        if decimals < 0:
            text = f"{v:.3e}"
        else:
            text = f"{v:,.{decimals}f}"
            if float(text.replace(",", "")) == 0:  # -0.000 reads as a sign without a value
                text = text.lstrip("-")
    return text
