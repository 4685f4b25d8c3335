"""Survival and occupancy curves as inline SVG: simulated (with its 95% band), exact and cycle-based.

Drawn with matplotlib's SVG backend on a bare :class:`matplotlib.figure.Figure` (never pyplot, so no
GUI backend is ever chosen); text stays text (``svg.fonttype = "none"``) so that it is searchable and
scales, and the SVG is deterministic (fixed hash salt, no date). Element ids get a per-figure prefix
so several figures can share one HTML page.
"""

from __future__ import annotations

import io
import math
import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..model import Model
from ..reference import cohort_trace
from ..reference.study import MAX_TUNNEL_STATES

__all__ = ["step_times", "TraceRequest", "cycle_words", "trace_occupancy", "curve_figures", "Z95", "METHOD_COLOURS",
           "method_style", "method_words"]

Z95 = 1.959963984540054  # standard normal 97.5% quantile (scipy.stats.norm.ppf(0.975))
STEP_POINTS = 400  # a simulated step curve is drawn on this many even times (far below print resolution)
COLOURS = ("#1b6ca8", "#c0392b", "#2e8b57", "#8e44ad", "#d68910", "#16a085", "#7f8c8d", "#34495e")
TRACE_STYLES = ((0, (1, 1.5)), (0, (4, 1.5, 1, 1.5)), (0, (6, 2)), (0, (2, 2)))
#: One colour per method wherever the report draws methods side by side (survival curves, the
#: probabilistic analysis's plots): the Okabe-Ito palette (Okabe & Ito 2008, Color Universal Design),
#: as the window's plots (simulated blue, exact vermillion, one colour per conversion method).
METHOD_COLOURS = {"simulated": "#0072B2", "exact": "#D55E00", "per-transition": "#009E73",
                  "competing-exit": "#E69F00", "matrix-exponential": "#CC79A7"}
SPARE_COLOURS = ("#56B4E9", "#000000", "#7f8c8d")
#: one line style per within-cycle correction (simulated solid, exact dashed)
CORRECTION_STYLES = {"start": (0, (4, 1.5, 1, 1.5)), "end": (0, (6, 2)), "half-cycle": (0, (1, 1.5)),
                     "simpson": (0, (2, 2))}


def method_style(method: str) -> tuple[str, object]:
    """Colour and matplotlib line style of a method: ``"simulated"`` (solid), ``"exact"`` (dashed) or
    a cycle-based label ``"conversion|cycle length|correction"`` (the conversion's colour, the
    correction's line style)."""
    if method == "simulated":
        return METHOD_COLOURS["simulated"], "-"
    if method == "exact":
        return METHOD_COLOURS["exact"], "--"
    conversion, _, rest = method.partition("|")
    correction = rest.partition("|")[2]
    colour = METHOD_COLOURS.get(conversion, SPARE_COLOURS[sum(conversion.encode()) % len(SPARE_COLOURS)])
    return colour, CORRECTION_STYLES.get(correction, (0, (3, 1, 1, 1, 1, 1)))


def method_words(method: str) -> str:
    """A method in words: ``simulated``, ``exact`` or ``matrix-exponential, 1 year, half-cycle``."""
    parts = method.split("|")
    if len(parts) != 3:
        return method
    try:
        return f"{parts[0]}, {cycle_words(float(parts[1]))}, {parts[2]}"
    except ValueError:
        return method


@dataclass(frozen=True)
class TraceRequest:
    """A cycle-based cohort trace to draw: conversion method and cycle length (years)."""

    method: str
    cycle_length: float


def cycle_words(h: float) -> str:
    """A cycle length in words: ``1 week``, ``3 months``, ``1 year``, else ``0.3 years``."""
    for per_year, unit in ((1.0, "year"), (12.0, "month"), (365.25 / 7, "week"), (52.0, "week"), (365.25, "day")):
        n = h * per_year
        k = round(n)
        if k >= 1 and math.isclose(n, k, rel_tol=1e-6):
            return f"{k} {unit}{'s' if k != 1 else ''}"
    return f"{h:.3g} years"


def trace_occupancy(model: Model, strategy: str, request: TraceRequest, t_end: float,
                    tunnel_entry: str = "half-cycle") -> tuple[pd.DataFrame | None, str]:
    """Occupancy (time, state, probability) of a cycle-based trace at the cycle boundaries up to
    ``t_end``, or None and the reason (too many tunnel states, a trace sim refuses to build)."""
    tunnels = None
    h = request.cycle_length
    if not model.is_markov:
        tunnels = max(1, int(math.ceil(t_end / h - 1e-9)))
        if tunnels > MAX_TUNNEL_STATES:
            return None, (f"{request.method}, {cycle_words(h)}: not drawn, it needs {tunnels} tunnel states "
                          f"(more than {MAX_TUNNEL_STATES})")
    try:
        table = cohort_trace(model, strategy, h, request.method, tunnel_cycles=tunnels,
                             tunnel_entry=tunnel_entry).table()
    except ValueError as err:
        return None, f"{request.method}, {cycle_words(h)}: {err}"
    return table[table["time"] <= t_end * (1 + 1e-9)], ""


def _alive(table: pd.DataFrame, model: Model) -> tuple[np.ndarray, np.ndarray]:
    """Probability alive (not in an absorbing state) per time of an occupancy table."""
    absorbing = [s.name for s in model.states if s.absorbing]
    dead = table[table["state"].isin(absorbing)].groupby("time", sort=True)["probability"].sum()
    return dead.index.to_numpy(dtype=float), 1.0 - dead.to_numpy(dtype=float)


def step_times(t_end: float) -> np.ndarray:
    """The :data:`STEP_POINTS` even times from 0 to ``t_end`` at which a simulated step curve is drawn
    (a survival curve known only at these times is drawn exactly as the whole step function)."""
    return np.linspace(0.0, t_end, STEP_POINTS)


def _step_on_grid(t: np.ndarray, y: np.ndarray, grid: np.ndarray) -> np.ndarray:
    """A right-continuous step function with value y[i] from t[i], read at ``grid``."""
    idx = np.searchsorted(t, grid, side="right") - 1
    return np.where(idx >= 0, y[np.clip(idx, 0, None)], 1.0)


def _svg(fig, prefix: str) -> str:
    import matplotlib

    buf = io.StringIO()
    with matplotlib.rc_context({"svg.fonttype": "none", "svg.hashsalt": prefix}):
        fig.savefig(buf, format="svg", metadata={"Date": None}, bbox_inches="tight")
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    text = re.sub(r"<metadata>.*?</metadata>\s*", "", text, flags=re.S)  # matplotlib's RDF credits: not content
    text = re.sub(r'id="([^"]+)"', rf'id="{prefix}-\1"', text)
    text = re.sub(r'url\(#([^)]+)\)', rf'url(#{prefix}-\1)', text)
    return re.sub(r'xlink:href="#([^"]+)"', rf'xlink:href="#{prefix}-\1"', text)


def curve_figures(model: Model, survival: pd.DataFrame | None, occupancy: pd.DataFrame | None,
                  exact_occupancy: pd.DataFrame | None, traces: dict[tuple[str, TraceRequest], pd.DataFrame],
                  t_end: float) -> list[tuple[str, str]]:
    """One figure per strategy: survival (left) and state occupancy (right) against years since
    entry, simulated (solid, shaded 95% band: estimate ± 1.96 SE), exact (dashed) and each cycle-based
    trace (dotted styles, through the values at the cycle boundaries). Returns ``(caption, svg)`` pairs."""
    from matplotlib.figure import Figure

    states = [s.name for s in model.states]
    colour = {s: COLOURS[i % len(COLOURS)] for i, s in enumerate(states)}
    requests = list(dict.fromkeys(r for _, r in traces))
    out = []
    grid = step_times(t_end)
    for k, strategy in enumerate(model.strategy_names):
        fig = Figure(figsize=(9.0, 3.4))
        ax_s, ax_o = fig.subplots(1, 2)
        drawn = False
        if survival is not None:
            km = survival[survival["strategy"] == strategy].sort_values("time", kind="stable")
            if len(km):
                t, s, se = (km[c].to_numpy(float) for c in ("time", "survival", "std_error"))
                y, e = _step_on_grid(t, s, grid), np.nan_to_num(_step_on_grid(t, se, grid))
                blue = METHOD_COLOURS["simulated"]
                ax_s.fill_between(grid, np.clip(y - Z95 * e, 0, 1), np.clip(y + Z95 * e, 0, 1), color=blue,
                                  alpha=0.18, linewidth=0, step="post")
                ax_s.step(grid, y, where="post", color=blue, linewidth=1.4, label="simulated")
                drawn = True
        if exact_occupancy is not None:
            ex = exact_occupancy[exact_occupancy["strategy"] == strategy]
            if len(ex):
                t, a = _alive(ex, model)
                ax_s.plot(t, a, color=METHOD_COLOURS["exact"], linestyle="--", linewidth=1.1, label="exact")
        for j, req in enumerate(requests):
            tab = traces.get((strategy, req))
            if tab is None:
                continue
            t, a = _alive(tab, model)
            ax_s.plot(t, a, color=method_style(req.method)[0], linestyle=TRACE_STYLES[j % len(TRACE_STYLES)],
                      linewidth=1.1,
                      label=f"{req.method}, {cycle_words(req.cycle_length)}")
        ax_s.set(title=f"Alive — {strategy}", xlabel="years since entry", ylabel="probability",
                 xlim=(0, t_end), ylim=(0, 1.02))
        if ax_s.get_legend_handles_labels()[0]:
            ax_s.legend(fontsize=7, frameon=False, loc="lower left")
        shown = [s for s in states if not any(x.name == s and x.absorbing for x in model.states)]
        if occupancy is not None:
            occ = occupancy[occupancy["strategy"] == strategy]
            for s in shown:
                g = occ[occ["state"] == s].sort_values("time")
                if len(g):
                    t, p, se = (g[c].to_numpy(float) for c in ("time", "probability", "std_error"))
                    se = np.nan_to_num(se)
                    ax_o.fill_between(t, np.clip(p - Z95 * se, 0, 1), np.clip(p + Z95 * se, 0, 1), color=colour[s],
                                      alpha=0.15, linewidth=0)
                    ax_o.plot(t, p, color=colour[s], linewidth=1.4, label=s)
                    drawn = True
        if exact_occupancy is not None:
            ex = exact_occupancy[exact_occupancy["strategy"] == strategy]
            for s in shown:
                g = ex[ex["state"] == s].sort_values("time")
                if len(g):
                    ax_o.plot(g["time"], g["probability"], color=colour[s], linestyle="--", linewidth=1.1)
        for j, req in enumerate(requests):
            tab = traces.get((strategy, req))
            if tab is None:
                continue
            for s in shown:
                g = tab[tab["state"] == s]
                ax_o.plot(g["time"], g["probability"], color=colour[s], linestyle=TRACE_STYLES[j % len(TRACE_STYLES)],
                          linewidth=1.1, label=s if occupancy is None and j == 0 else None)
        ax_o.set(title=f"In each living state — {strategy}", xlabel="years since entry", ylabel="probability",
                 xlim=(0, t_end), ylim=(0, 1.02))
        if ax_o.get_legend_handles_labels()[0]:
            ax_o.legend(fontsize=7, frameon=False, loc="upper right", title="state", title_fontsize=7)
        for ax in (ax_s, ax_o):
            ax.grid(True, color="#dddddd", linewidth=0.5)
            ax.tick_params(labelsize=8)
        fig.tight_layout()
        what = "simulated (solid, 95% band shaded)" if drawn else "no simulated curve"
        caption = (f"{strategy}: {what}; exact (dashed) where the model has an exact solution; cycle-based traces "
                   f"(dotted and dash-dotted lines through the cycle boundaries): "
                   + (", ".join(f"{r.method} {cycle_words(r.cycle_length)}" for r in requests) or "none") + ".")
        out.append((caption, _svg(fig, f"fig{k + 1}")))
    return out
