"""The per-draw table of a probabilistic analysis: its columns, how its rows are built and ordered,
and a hash of its contents (for bit-identity checks across workers, chunks and schedulers).

One row per (draw, strategy, method):

``draw`` (int64), ``strategy`` (str), ``method`` (str: ``"simulated"``, ``"exact"``, or a cycle-based
label ``"<conversion>|<cycle length in years>|<correction>"``), then each outcome of
:data:`sim.analysis.OUTCOMES` (``life_years``, ``life_years_discounted``, ``qalys``,
``qalys_discounted``, ``costs``, ``costs_discounted``: means over the draw's patients, or the exact /
cycle-based value), ``<outcome>_mcse`` (the inner-loop Monte Carlo standard error s / sqrt(n); 0 for
the deterministic methods, which have no patient-level noise), ``<outcome>_mcse_paired`` (the MCSE of
the strategy's mean difference from the comparator, the first strategy, from per-patient differences
within the draw: strategies share random numbers per patient; 0 for the comparator and the
deterministic methods) and ``patients`` (simulated patients per strategy in the draw; 0 for the
deterministic methods).
"""

from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd

from ..analysis import OUTCOMES

__all__ = ["SIMULATED", "EXACT", "DRAW_COLUMNS", "cycle_label", "draw_frame", "sort_draw_table", "table_hash"]

SIMULATED = "simulated"
EXACT = "exact"
DRAW_COLUMNS = (("draw", "strategy", "method") + OUTCOMES + tuple(f"{o}_mcse" for o in OUTCOMES)
                + tuple(f"{o}_mcse_paired" for o in OUTCOMES) + ("patients",))


def cycle_label(conversion: str, cycle_length: float, correction: str) -> str:
    """``"<conversion>|<cycle length in years, repr>|<correction>"``, e.g.
    ``"matrix-exponential|1.0|half-cycle"`` (repr keeps the cycle length exactly)."""
    return f"{conversion}|{float(cycle_length)!r}|{correction}"


def draw_frame(draws: np.ndarray, strategy: str, method: str, values: dict[str, np.ndarray],
               patients: int) -> pd.DataFrame:
    """Rows of one strategy and method for ``draws`` from per-draw arrays ``values`` (every outcome;
    ``<outcome>_mcse`` and ``<outcome>_mcse_paired`` default to 0 for deterministic methods)."""
    draws = np.asarray(draws, dtype=np.int64)
    data: dict[str, object] = {"draw": draws, "strategy": np.full(draws.size, strategy, dtype=object),
                               "method": np.full(draws.size, method, dtype=object)}
    for o in OUTCOMES:
        data[o] = np.asarray(values[o], dtype=float)
    for o in OUTCOMES:
        data[f"{o}_mcse"] = np.asarray(values.get(f"{o}_mcse", np.zeros(draws.size)), dtype=float)
    for o in OUTCOMES:
        data[f"{o}_mcse_paired"] = np.asarray(values.get(f"{o}_mcse_paired", np.zeros(draws.size)), dtype=float)
    data["patients"] = np.full(draws.size, int(patients), dtype=np.int64)
    return pd.DataFrame(data, columns=list(DRAW_COLUMNS))


def sort_draw_table(parts: list[pd.DataFrame], strategies: tuple[str, ...]) -> pd.DataFrame:
    """Concatenate parts and order rows by draw, strategy (model order), then method (simulated,
    exact, then cycle-based labels in their order of first appearance): one order whatever the
    blocks and the order they finished in."""
    if not parts:
        return pd.DataFrame({c: pd.Series(dtype=object if c in ("strategy", "method") else
                                          (np.int64 if c in ("draw", "patients") else float)) for c in DRAW_COLUMNS})
    table = pd.concat(parts, ignore_index=True)
    methods = list(dict.fromkeys([SIMULATED, EXACT] + list(table["method"])))
    s_rank = {s: i for i, s in enumerate(strategies)}
    m_rank = {m: i for i, m in enumerate(methods)}
    order = np.lexsort((table["method"].map(m_rank).to_numpy(), table["strategy"].map(s_rank).to_numpy(),
                        table["draw"].to_numpy()))
    return table.iloc[order].reset_index(drop=True)


def table_hash(table: pd.DataFrame) -> str:
    """SHA-256 of the table's columns, their order and every value's bits."""
    h = hashlib.sha256()
    for name in table.columns:
        h.update(str(name).encode())
        col = table[name]
        if col.dtype == object:
            h.update("\x00".join(map(str, col)).encode())
        else:
            h.update(np.ascontiguousarray(col.to_numpy()).tobytes())
    return h.hexdigest()
