"""Joining chunk tables into a run's tables, in the row order of :func:`sim.engine.simulate`.

A chunk holds its rows by strategy, then patient; the run's tables hold them by strategy first,
then patient (every strategy's rows form one block). :class:`StrategyMajorJoin` keeps each chunk
as bare column arrays (categoricals as their codes) and, when asked for the table, builds one column
at a time in a preallocated array, releasing the chunks' pieces of that column as soon as they are
copied: the peak is about the joined table plus one column, as in the engine's own assembly.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["StrategyMajorJoin"]


class StrategyMajorJoin:
    """Collects chunk tables that have a categorical ``strategy`` column (rows sorted by it) and
    joins them strategy-major: all chunks' rows of the first strategy, then of the second, ..."""

    def __init__(self) -> None:
        self._dtypes: dict[str, object] | None = None
        self._parts: list[tuple[np.ndarray, dict[str, np.ndarray]]] = []
        self.rows = 0

    def add(self, table: pd.DataFrame) -> None:
        """Keep one chunk's table (its column arrays; the DataFrame itself may then be dropped)."""
        codes = table["strategy"].cat.codes.to_numpy()
        if codes.size and np.any(codes[1:] < codes[:-1]):
            raise ValueError("a chunk's rows must be ordered by strategy")
        n_strategies = len(table["strategy"].cat.categories)
        bounds = np.searchsorted(codes, np.arange(n_strategies + 1), side="left")
        bounds[-1] = codes.size
        if self._dtypes is None:
            self._dtypes = dict(table.dtypes.items())
        elif list(table.columns) != list(self._dtypes):
            raise ValueError(f"chunk columns {list(table.columns)} differ from the first chunk's {list(self._dtypes)}")
        columns = {}
        for name, column in table.items():
            is_cat = isinstance(column.dtype, pd.CategoricalDtype)
            columns[name] = column.cat.codes.to_numpy() if is_cat else column.to_numpy()
        self._parts.append((bounds, columns))
        self.rows += int(codes.size)

    def join(self) -> pd.DataFrame:
        """The joined table (the collected chunks are consumed)."""
        if self._dtypes is None:
            raise ValueError("no chunk was added")
        parts, self._parts = self._parts, []
        n_strategies = len(parts[0][0]) - 1
        total = sum(int(bounds[-1]) for bounds, _ in parts)
        data = {}
        for name, dtype in self._dtypes.items():
            out = np.empty(total, dtype=parts[0][1][name].dtype)
            pos = 0
            for k in range(n_strategies):
                for bounds, columns in parts:
                    piece = columns[name][bounds[k]:bounds[k + 1]]
                    out[pos:pos + piece.size] = piece
                    pos += piece.size
            for _, columns in parts:
                del columns[name]
            if isinstance(dtype, pd.CategoricalDtype):
                data[name] = pd.Categorical.from_codes(out, dtype=dtype, validate=False)
            else:
                data[name] = out
        self._dtypes, self.rows = None, 0
        return pd.DataFrame(data, copy=False)
