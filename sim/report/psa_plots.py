"""The probabilistic analysis's plots as inline SVG (matplotlib's SVG backend, as :mod:`.plots`): the
cost-effectiveness plane, the acceptability curves and frontier, EVPI against the willingness to pay
and the running mean of the incremental net benefit.

Every plot draws each method (simulated, exact, each cycle-based approximation) in its colour of
:func:`sim.report.plots.method_style`, the colours of the report's survival curves, so a method
looks the same wherever it appears.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .plots import Z95, _svg, method_style, method_words

__all__ = ["ce_plane_svg", "acceptability_svg", "evpi_svg", "convergence_svg"]

#: most draws drawn per method on the plane (the first ones, in draw order; the mean uses all)
PLANE_POINTS = 1000


def _finish(fig, axes) -> None:
    for ax in axes:
        ax.grid(True, color="#dddddd", linewidth=0.5)
        ax.tick_params(labelsize=8)
    fig.tight_layout()


def _legend_svg(fig, ax, prefix: str) -> str:
    """A one-panel figure finished: its legend, grid and layout, then the SVG text."""
    ax.legend(fontsize=7, frameon=False, loc="best")
    _finish(fig, [ax])
    return _svg(fig, prefix)


def _money(ax, axis: str) -> None:
    from matplotlib.ticker import FuncFormatter

    fmt = FuncFormatter(lambda v, _: f"{v:,.0f}")
    (ax.xaxis if axis == "x" else ax.yaxis).set_major_formatter(fmt)


def ce_plane_svg(plane: pd.DataFrame, wtp: float, currency: str, prefix: str) -> str:
    """Incremental QALYs (x) and costs (y) of each draw against the comparator, one colour per method
    (at most :data:`PLANE_POINTS` draws each), each method's mean as a large marker with a black edge,
    and the willingness-to-pay line ``ΔC = λ ΔE`` (draws below it are cost-effective)."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7.0, 4.4))
    ax = fig.subplots()
    strategies = list(dict.fromkeys(plane["strategy"]))
    markers = ("o", "s", "^", "D")
    for method, g in plane.groupby("method", sort=False):
        colour, _ = method_style(str(method))
        for k, strategy in enumerate(strategies):
            s = g[g["strategy"] == strategy]
            pts = s[s["point"] == "draw"].head(PLANE_POINTS)
            ax.scatter(pts["delta_effects"], pts["delta_costs"], s=7, color=colour, alpha=0.45, linewidths=0,
                       marker=markers[k % len(markers)])
            mean = s[s["point"] == "mean"]
            label = method_words(str(method)) + (f" — {strategy}" if len(strategies) > 1 else "")
            ax.scatter(mean["delta_effects"], mean["delta_costs"], s=60, color=colour, edgecolors="black",
                       linewidths=1.0, marker=markers[k % len(markers)], label=f"{label} (mean)", zorder=3)
    x0, x1 = ax.get_xlim()
    xs = np.array([min(x0, 0.0), max(x1, 0.0)])
    ax.plot(xs, wtp * xs, color="#444444", linewidth=1.0, linestyle=(0, (6, 3)),
            label=f"willingness to pay {wtp:,.0f} {currency}/QALY")
    ax.axhline(0, color="#999999", linewidth=0.6)
    ax.axvline(0, color="#999999", linewidth=0.6)
    ax.set_xlim(x0, x1)
    ax.set(xlabel="incremental QALYs (discounted)", ylabel=f"incremental costs ({currency}, discounted)",
           title=f"Cost-effectiveness plane against {plane['comparator'].iloc[0]}")
    _money(ax, "y")
    return _legend_svg(fig, ax, prefix)


def acceptability_svg(ceac: pd.DataFrame, frontier: pd.DataFrame, wtp: float, currency: str, prefix: str) -> str:
    """Left: each strategy's probability of being cost-effective against the willingness to pay, one
    colour per method (strategies by line width and marker). Right: the acceptability frontier (the
    probability that the strategy with the highest expected net benefit is the most cost-effective),
    one colour per method, with a marker where the optimal strategy changes."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(9.0, 3.6))
    ax_c, ax_f = fig.subplots(1, 2)
    strategies = list(dict.fromkeys(ceac["strategy"]))
    widths = (1.6, 0.9, 2.4, 1.2)
    for method, g in ceac.groupby("method", sort=False):
        colour, style = method_style(str(method))
        for k, strategy in enumerate(strategies):
            s = g[g["strategy"] == strategy].sort_values("wtp")
            ax_c.plot(s["wtp"], s["probability"], color=colour, linestyle=style, linewidth=widths[k % len(widths)],
                      label=f"{method_words(str(method))} — {strategy}")
    for method, g in frontier.groupby("method", sort=False):
        colour, style = method_style(str(method))
        g = g.sort_values("wtp")
        ax_f.plot(g["wtp"], g["probability"], color=colour, linestyle=style, linewidth=1.5,
                  label=method_words(str(method)))
        switch = g["strategy"].to_numpy()
        where = np.nonzero(switch[1:] != switch[:-1])[0] + 1
        ax_f.plot(g["wtp"].to_numpy()[where], g["probability"].to_numpy()[where], linestyle="none", marker="o",
                  markersize=4, color=colour)
    for ax, title in ((ax_c, "Acceptability curves"), (ax_f, "Acceptability frontier")):
        ax.axvline(wtp, color="#777777", linewidth=0.8, linestyle=(0, (2, 2)))
        ax.set(xlabel=f"willingness to pay ({currency} per QALY)", ylabel="probability cost-effective",
               ylim=(-0.02, 1.02), title=title)
        _money(ax, "x")
        ax.legend(fontsize=6, frameon=False, loc="best")
    _finish(fig, [ax_c, ax_f])
    return _svg(fig, prefix)


def evpi_svg(evpi: pd.DataFrame, wtp: float, currency: str, prefix: str, population_factor: float | None = None,
             band: str = "exact") -> str:
    """EVPI per patient against the willingness to pay, one colour per method, with the 95% band
    (± 1.96 MCSE) of the method ``band`` (the reference); with a population factor, a right-hand axis
    in population EVPI (the same curves times the factor)."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7.0, 3.8))
    ax = fig.subplots()
    for method, g in evpi.groupby("method", sort=False):
        colour, style = method_style(str(method))
        g = g.sort_values("wtp")
        x, y, e = (g[c].to_numpy(float) for c in ("wtp", "evpi", "mcse"))
        if method == band:
            ax.fill_between(x, y - Z95 * np.nan_to_num(e), y + Z95 * np.nan_to_num(e), color=colour, alpha=0.15,
                            linewidth=0)
        ax.plot(x, y, color=colour, linestyle=style, linewidth=1.5, label=method_words(str(method)))
    ax.axvline(wtp, color="#777777", linewidth=0.8, linestyle=(0, (2, 2)))
    ax.set(xlabel=f"willingness to pay ({currency} per QALY)", ylabel=f"EVPI per patient ({currency})",
           title="Expected value of perfect information")
    _money(ax, "x")
    _money(ax, "y")
    if population_factor:
        f = float(population_factor)
        sec = ax.secondary_yaxis("right", functions=(lambda v: v * f, lambda v: v / f))
        sec.set_ylabel(f"population EVPI ({currency})")
        _money(sec, "y")
        sec.tick_params(labelsize=8)
    return _legend_svg(fig, ax, prefix)


def convergence_svg(conv: pd.DataFrame, currency: str, prefix: str) -> str:
    """Running mean of each strategy's incremental net benefit over the draws (simulated), with its
    95% band (± 1.96 MCSE) and the zero line: the decision is settled where the band leaves zero."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7.0, 3.4))
    ax = fig.subplots()
    colour, _ = method_style("simulated")
    for k, (strategy, g) in enumerate(conv.groupby("strategy", sort=False)):
        g = g.sort_values("draws")
        x, y, e = (g[c].to_numpy(float) for c in ("draws", "mean", "mcse"))
        ok = np.isfinite(e)
        ax.fill_between(x[ok], y[ok] - Z95 * e[ok], y[ok] + Z95 * e[ok], color=colour, alpha=0.15, linewidth=0)
        ax.plot(x, y, color=colour, linewidth=1.4 + 0.8 * k, label=f"{strategy} vs {g['comparator'].iloc[0]}")
    ax.axhline(0, color="#777777", linewidth=0.8)
    wtp = float(conv["wtp"].iloc[0])
    ax.set(xlabel="parameter draws", ylabel=f"incremental net benefit ({currency})",
           title=f"Running mean of the incremental net benefit at {wtp:,.0f} {currency}/QALY")
    _money(ax, "y")
    return _legend_svg(fig, ax, prefix)
