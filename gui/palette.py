"""Colour-blind-safe colours and line styles for every plot.

The eight colours are the Okabe-Ito palette (Okabe M, Ito K (2008). Color Universal Design (CUD):
how to make figures and presentations that are friendly to colorblind people. J*Fly, University of
Tokyo). Series also differ by line style, so that they stay distinct in grey-scale prints and for
readers who cannot tell two of the colours apart.

This module is the single source of what each kind of curve looks like in every plot and legend:
the simulated curve (blue, solid) and the exact one (vermillion, dashed) in the curves view; one
colour per cycle-based conversion method (:func:`method_colour`) and one line style and marker per
within-cycle correction (:func:`correction_style`) wherever those appear. The colour follows the
method's name, never its place in a list.
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtGui import QBrush, QColor, QPen

__all__ = ["OKABE_ITO", "SERIES_COLOURS", "LINE_STYLES", "STYLE_NAMES", "METHOD_COLOURS", "CORRECTION_STYLES",
           "CORRECTION_SYMBOLS", "SIMULATED", "EXACT", "colour", "style", "pen", "brush", "method_colour",
           "correction_style", "method_pen"]

#: The Okabe-Ito palette in its published order (name -> hex).
OKABE_ITO: dict[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky blue": "#56B4E9",
    "bluish green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish purple": "#CC79A7",
}

#: Order used for plot series on a white background: strong colours first, yellow (faint on white) last.
SERIES_COLOURS: list[str] = [OKABE_ITO[n] for n in ("blue", "vermillion", "bluish green", "reddish purple",
                                                    "orange", "sky blue", "black", "yellow")]

#: Line styles cycled together with the colours (solid, dash, dot, dash-dot).
LINE_STYLES: list[Qt.PenStyle] = [Qt.PenStyle.SolidLine, Qt.PenStyle.DashLine, Qt.PenStyle.DotLine,
                                  Qt.PenStyle.DashDotLine]
STYLE_NAMES: list[str] = ["solid", "dash", "dot", "dash-dot"]


def colour(i: int) -> str:
    """Hex colour of series ``i`` (cycles through :data:`SERIES_COLOURS`)."""
    return SERIES_COLOURS[i % len(SERIES_COLOURS)]


def style(i: int) -> Qt.PenStyle:
    """Line style of series ``i`` (cycles through :data:`LINE_STYLES`)."""
    return LINE_STYLES[i % len(LINE_STYLES)]


def pen(i: int, width: float = 2.0, style_index: int | None = None) -> QPen:
    """Cosmetic pen of series ``i``: colour ``i`` and line style ``i`` (or ``style_index`` when the
    caller encodes a second variable, e.g. colour = method and style = correction)."""
    p = QPen(QColor(colour(i)))
    p.setWidthF(width)
    p.setCosmetic(True)
    p.setStyle(style(i if style_index is None else style_index))
    return p


def brush(i: int, alpha: int = 50) -> QBrush:
    """Translucent fill in the colour of series ``i`` (for confidence bands)."""
    c = QColor(colour(i))
    c.setAlpha(alpha)
    return QBrush(c)


#: Series indices of the simulated and the exact curves (blue and vermillion).
SIMULATED, EXACT = 0, 1

#: One colour per conversion method (values of ``sim.reference.cohort.Conversion``), distinct from
#: the simulated (blue) and exact (vermillion) curves.
METHOD_COLOURS: dict[str, str] = {
    "per-transition": OKABE_ITO["bluish green"],
    "competing-exit": OKABE_ITO["orange"],
    "matrix-exponential": OKABE_ITO["reddish purple"],
}
_SPARE = [OKABE_ITO["sky blue"], OKABE_ITO["black"], OKABE_ITO["yellow"]]

#: One line style and marker per within-cycle correction (values of ``sim.reference.cohort.Correction``).
CORRECTION_STYLES: dict[str, Qt.PenStyle] = {
    "start": Qt.PenStyle.SolidLine,
    "end": Qt.PenStyle.DashLine,
    "half-cycle": Qt.PenStyle.DotLine,
    "simpson": Qt.PenStyle.DashDotLine,
}
CORRECTION_SYMBOLS: dict[str, str] = {"start": "o", "end": "s", "half-cycle": "t", "simpson": "d"}


def method_colour(method: str) -> str:
    """Hex colour of a conversion method (a method this palette does not know gets a spare colour,
    always the same one for the same name)."""
    if method in METHOD_COLOURS:
        return METHOD_COLOURS[method]
    return _SPARE[sum(method.encode()) % len(_SPARE)]


def correction_style(correction: str | None) -> Qt.PenStyle:
    """Line style of a within-cycle correction; a cohort trace without one is dash-dot-dotted."""
    if correction is None:
        return Qt.PenStyle.DashDotDotLine
    return CORRECTION_STYLES.get(correction, Qt.PenStyle.DashDotDotLine)


def method_pen(method: str, width: float = 2.0, correction: str | None = None) -> QPen:
    """Cosmetic pen of a cycle-based curve: the method's colour, the correction's line style."""
    p = QPen(QColor(method_colour(method)))
    p.setWidthF(width)
    p.setCosmetic(True)
    p.setStyle(correction_style(correction))
    return p
