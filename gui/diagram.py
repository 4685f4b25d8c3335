"""A diagram of the model's states and transitions, redrawn when the document changes.

Layout: states in columns by the number of transitions needed to reach them from the initial state
(breadth-first), absorbing states in the last column; several arrows between the same two states
bend apart, and arrows that skip a column bend around the states in between. Transitions are solid
arrows labelled with their names; background death is dashed, from every living state. Colours are
from the Okabe-Ito palette (:mod:`gui.palette`). Clicking an arrow emits ``transition_clicked``.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

from PySide6.QtCore import QPointF, QRectF, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QFont, QFontMetricsF, QMouseEvent, QPainter, QPainterPath, QPen, QPolygonF
from PySide6.QtWidgets import (QGraphicsItem, QGraphicsPathItem, QGraphicsPolygonItem, QGraphicsRectItem,
                               QGraphicsScene, QGraphicsSimpleTextItem, QGraphicsView, QWidget)

from gui.document import ScenarioDocument
from gui.palette import OKABE_ITO
from sim.model.multistate import BACKGROUND

__all__ = ["ModelDiagram", "layout_states", "diagram_edges", "Edge"]

COL_SPACING = 240.0
ROW_SPACING = 120.0
NODE_HEIGHT = 46.0
LIVING = QColor(OKABE_ITO["blue"])
ARROW = QColor(OKABE_ITO["blue"])
BACKGROUND_COLOUR = QColor(OKABE_ITO["reddish purple"])
SELECTED = QColor(OKABE_ITO["orange"])
TEXT = QColor(OKABE_ITO["black"])
ABSORBING_FILL = QColor("#EEEEEE")


@dataclass(frozen=True)
class Edge:
    """An arrow: ``name`` (a transition or background death), ends, and whether it is background."""

    name: str
    source: str
    target: str
    background: bool = False


def diagram_edges(doc: dict) -> tuple[list[tuple[str, bool]], list[Edge], tuple[str, ...]]:
    """States ``(name, absorbing)``, arrows and the initial states (one name, or those with a share > 0
    of an initial mix) read from a plain scenario document; entries that do not name existing states
    are skipped (the loader reports them)."""
    def tables(key: str) -> list[dict]:
        value = doc.get(key)
        return [x for x in value if isinstance(x, dict)] if isinstance(value, list) else []

    states = [(s["name"], s.get("absorbing") is True) for s in tables("states") if isinstance(s.get("name"), str)]
    names = {n for n, _ in states}
    edges = [Edge(str(t.get("name", "")), t["from"], t["to"]) for t in tables("transitions")
             if t.get("from") in names and t.get("to") in names and t["from"] != t["to"]]
    bg = doc.get("background")
    if isinstance(bg, dict) and bg.get("to") in names:
        edges += [Edge(BACKGROUND, n, bg["to"], True) for n, absorbing in states if not absorbing and n != bg["to"]]
    pop = doc.get("population")
    raw = pop.get("initial_state") if isinstance(pop, dict) else None
    tables = [raw] if isinstance(raw, dict) else []
    if tables and all(isinstance(v, dict) for v in raw.values()):
        tables = list(raw.values())  # per sex
    shares = [(k, v) for t in tables for k, v in t.items()]
    named = [raw] if isinstance(raw, str) else [k for k, v in shares if isinstance(v, (int, float)) and v > 0]
    initial = tuple(dict.fromkeys(n for n in named if n in names))
    if not initial:
        first = next((n for n, a in states if not a), None)
        initial = (first,) if first is not None else ()
    return states, edges, initial


def layout_states(states: list[tuple[str, bool]], edges: list[Edge],
                  initial: str | tuple[str, ...] | None) -> dict[str, tuple[int, int]]:
    """Column and row of every state: breadth-first depth from ``initial`` along transitions
    (not background death); unreachable living states after the reachable ones; absorbing states in
    the last column. Rows follow the order of the states in the file."""
    depth: dict[str, int] = {}
    absorbing = {n for n, a in states if a}
    starts = (initial,) if isinstance(initial, str) else tuple(initial or ())
    if starts:
        depth.update((s, 0) for s in starts)
        queue = deque(starts)
        while queue:
            s = queue.popleft()
            for e in edges:
                if not e.background and e.source == s and e.target not in depth and e.target not in absorbing:
                    depth[e.target] = depth[s] + 1
                    queue.append(e.target)
    last_living = max(depth.values(), default=-1)
    cols: dict[str, int] = {}
    for n, a in states:
        if not a:
            cols[n] = depth.get(n, last_living + 1)
    dead_col = max(cols.values(), default=-1) + 1
    for n, a in states:
        if a:
            cols[n] = dead_col
    rows: dict[int, int] = {}
    out = {}
    for n, _ in states:
        c = cols[n]
        out[n] = (c, rows.get(c, 0))
        rows[c] = rows.get(c, 0) + 1
    return out


class _Node(QGraphicsPathItem):
    def __init__(self, name: str, absorbing: bool, initial: bool, font: QFont) -> None:
        super().__init__()
        width = max(110.0, QFontMetricsF(font).horizontalAdvance(name) + 32.0)
        self.half = QPointF(width / 2, NODE_HEIGHT / 2)
        path = QPainterPath()
        path.addRoundedRect(QRectF(-width / 2, -NODE_HEIGHT / 2, width, NODE_HEIGHT), 10, 10)
        self.setPath(path)
        pen = QPen(TEXT if absorbing else LIVING, 3.0 if initial else 1.6)
        self.setPen(pen)
        self.setBrush(QBrush(ABSORBING_FILL if absorbing else QColor("white")))
        label = QGraphicsSimpleTextItem(name, self)
        label.setFont(font)
        label.setBrush(TEXT)
        r = label.boundingRect()
        label.setPos(-r.width() / 2, -r.height() / 2)
        self.setZValue(2)
        self.setData(0, ("state", name))


def _clip(centre: QPointF, half: QPointF, toward: QPointF) -> QPointF:
    """Where the ray from ``centre`` toward ``toward`` leaves the node's box."""
    d = toward - centre
    if abs(d.x()) < 1e-9 and abs(d.y()) < 1e-9:
        return centre
    sx = half.x() / abs(d.x()) if abs(d.x()) > 1e-9 else math.inf
    sy = half.y() / abs(d.y()) if abs(d.y()) > 1e-9 else math.inf
    return centre + d * min(sx, sy)


class ModelDiagram(QGraphicsView):
    """States and transitions of the document's model; click an arrow to select its transition."""

    transition_clicked = Signal(str)

    def __init__(self, document: ScenarioDocument, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.document = document
        self.setScene(QGraphicsScene(self))
        self.setRenderHint(QPainter.RenderHint.Antialiasing)
        self.setBackgroundBrush(QBrush(QColor("white")))
        self.setMinimumHeight(200)
        self.font_ = QFont()
        self.font_.setPointSizeF(10)
        self.small = QFont()
        self.small.setPointSizeF(9)
        self._selected = ""
        self.positions: dict[str, tuple[int, int]] = {}
        self.edges: list[Edge] = []
        self.arrows: dict[str, list[QGraphicsPathItem]] = {}
        self.labels: dict[str, list[QGraphicsSimpleTextItem]] = {}
        self._legend_labels: list[str] = []
        document.changed.connect(self._on_document_changed)
        self._on_document_changed()

    # ------------------------------------------------------------------ public
    def select_transition(self, name: str) -> None:
        """Highlight the arrow of transition ``name``."""
        self._selected = name
        for n, items in self.arrows.items():
            colour = SELECTED if n == name else (BACKGROUND_COLOUR if n == BACKGROUND else ARROW)
            for item in items:
                pen = item.pen()
                pen.setColor(colour)
                pen.setWidthF(3.0 if n == name else 1.6)
                item.setPen(pen)
                for child in item.childItems():
                    if isinstance(child, QGraphicsPolygonItem):
                        child.setBrush(colour)
                        child.setPen(QPen(colour))

    # ------------------------------------------------------------------ slots
    def _on_document_changed(self) -> None:
        data = self.document.data
        if data is None:
            return  # keep the last drawing while the text is not valid TOML
        states, edges, initial = diagram_edges(data.unwrap())
        self._draw(states, edges, initial)

    # ------------------------------------------------------------------ drawing
    def _draw(self, states: list[tuple[str, bool]], edges: list[Edge], initial: tuple[str, ...]) -> None:
        scene = self.scene()
        scene.clear()
        self.arrows, self.labels = {}, {}
        self.edges = edges
        self.positions = layout_states(states, edges, initial)
        rows_per_col: dict[int, int] = {}
        for c, r in self.positions.values():
            rows_per_col[c] = max(rows_per_col.get(c, 0), r + 1)
        tallest = max(rows_per_col.values(), default=1)
        nodes: dict[str, _Node] = {}
        centres: dict[str, QPointF] = {}
        for name, absorbing in states:
            c, r = self.positions[name]
            offset = (tallest - rows_per_col[c]) * ROW_SPACING / 2
            node = _Node(name, absorbing, name in initial, self.font_)
            centres[name] = QPointF(c * COL_SPACING, r * ROW_SPACING + offset)
            node.setPos(centres[name])
            scene.addItem(node)
            nodes[name] = node
        for start in initial:  # an entry arrow into every initial state
            if start in centres:
                self._entry_arrow(centres[start], nodes[start].half)
        groups: dict[frozenset, list[Edge]] = {}
        for e in edges:
            groups.setdefault(frozenset((e.source, e.target)), []).append(e)
        bg_labelled = False
        for pair, group in groups.items():
            for k, e in enumerate(group):
                a, b = centres[e.source], centres[e.target]
                lo, hi = sorted((e.source, e.target))
                canon = centres[hi] - centres[lo]
                length = math.hypot(canon.x(), canon.y()) or 1.0
                normal = QPointF(-canon.y() / length, canon.x() / length)
                bend = (k - (len(group) - 1) / 2) * 44.0
                ca, cb = self.positions[e.source], self.positions[e.target]
                if abs(ca[0] - cb[0]) > 1 or (ca[0] == cb[0] and abs(ca[1] - cb[1]) > 1):
                    bend += 70.0 if bend >= 0 else -70.0
                elif len(group) == 1 and ca[0] == cb[0]:
                    bend += 30.0
                control = (a + b) / 2 + normal * bend * 2
                show_label = not e.background or not bg_labelled
                self._arrow(e, a, nodes[e.source].half, b, nodes[e.target].half, control, show_label)
                bg_labelled = bg_labelled or e.background
        self._legend(any(e.background for e in edges))
        self.select_transition(self._selected)
        self._fit()

    def _entry_arrow(self, centre: QPointF, half: QPointF) -> None:
        start = centre - QPointF(half.x() + 46, 0)
        end = centre - QPointF(half.x() + 2, 0)
        path = QPainterPath(start)
        path.lineTo(end)
        item = self.scene().addPath(path, QPen(TEXT, 1.4))
        self._head(item, start, end, TEXT)
        text = self.scene().addSimpleText("start", self.small)
        text.setBrush(TEXT)
        text.setPos(start + QPointF(0, -18))

    def _arrow(self, e: Edge, a: QPointF, ha: QPointF, b: QPointF, hb: QPointF, control: QPointF,
               show_label: bool) -> None:
        p0 = _clip(a, ha, control)
        p1 = _clip(b, hb, control)
        path = QPainterPath(p0)
        path.quadTo(control, p1)
        colour = BACKGROUND_COLOUR if e.background else ARROW
        pen = QPen(colour, 1.6, Qt.PenStyle.DashLine if e.background else Qt.PenStyle.SolidLine)
        item = QGraphicsPathItem(path)
        item.setPen(pen)
        item.setZValue(1)
        item.setData(0, ("transition", e.name))
        item.setCursor(Qt.CursorShape.PointingHandCursor)
        item.setToolTip(f"{e.name}: {e.source} \u2192 {e.target}")
        self.scene().addItem(item)
        self._head(item, control, p1, colour)
        self.arrows.setdefault(e.name, []).append(item)
        if show_label:
            mid = p0 * 0.25 + control * 0.5 + p1 * 0.25
            text = QGraphicsSimpleTextItem(e.name)
            text.setFont(self.small)
            text.setBrush(TEXT)
            if e.background:
                font = QFont(self.small)
                font.setItalic(True)
                text.setFont(font)
            r = text.boundingRect()
            box = QGraphicsRectItem(QRectF(-3, -1, r.width() + 6, r.height() + 2))
            box.setBrush(QBrush(QColor(255, 255, 255, 225)))
            box.setPen(QPen(Qt.PenStyle.NoPen))
            box.setZValue(3)
            box.setPos(mid - QPointF(r.width() / 2, r.height() / 2))
            text.setParentItem(box)
            box.setData(0, ("transition", e.name))
            self.scene().addItem(box)
            self.labels.setdefault(e.name, []).append(text)

    def _head(self, parent: QGraphicsItem, frm: QPointF, tip: QPointF, colour: QColor) -> None:
        d = tip - frm
        length = math.hypot(d.x(), d.y()) or 1.0
        u = QPointF(d.x() / length, d.y() / length)
        n = QPointF(-u.y(), u.x())
        poly = QPolygonF([tip, tip - u * 11 + n * 5, tip - u * 11 - n * 5])
        head = QGraphicsPolygonItem(poly, parent)
        head.setBrush(colour)
        head.setPen(QPen(colour))

    def legend_labels(self) -> list[str]:
        """The legend's texts (for tests and screen readers)."""
        return list(self._legend_labels)

    def _legend(self, background: bool) -> None:
        """Key to the arrows and boxes; background death only when the model has it (issue 12)."""
        rect = self.scene().itemsBoundingRect()
        y = rect.bottom() + 24
        x = rect.left()
        items = [(ARROW, Qt.PenStyle.SolidLine, "transition")]
        if background:
            items.append((BACKGROUND_COLOUR, Qt.PenStyle.DashLine, "background death (from every living state)"))
        self._legend_labels = [label for _, _, label in items] + ["absorbing state"]
        for colour, style, label in items:
            self.scene().addLine(x, y, x + 34, y, QPen(colour, 1.6, style))
            text = self.scene().addSimpleText(label, self.small)
            text.setBrush(TEXT)
            text.setPos(x + 40, y - 8)
            x += 40 + text.boundingRect().width() + 24
        swatch = self.scene().addRect(QRectF(x, y - 8, 22, 16), QPen(TEXT, 1.0), QBrush(ABSORBING_FILL))
        swatch.setZValue(0)
        text = self.scene().addSimpleText("absorbing state", self.small)
        text.setBrush(TEXT)
        text.setPos(x + 28, y - 8)

    def _fit(self) -> None:
        rect = self.scene().itemsBoundingRect().adjusted(-20, -20, 20, 20)
        self.scene().setSceneRect(rect)
        if rect.isEmpty() or self.viewport().width() < 10:
            return
        scale = min(self.viewport().width() / rect.width(), self.viewport().height() / rect.height(), 1.25)
        self.resetTransform()
        self.scale(scale, scale)
        self.centerOn(rect.center())

    def resizeEvent(self, event) -> None:  # noqa: N802 - Qt API
        super().resizeEvent(event)
        self._fit()

    def mousePressEvent(self, event: QMouseEvent) -> None:  # noqa: N802 - Qt API
        item = self.itemAt(event.position().toPoint())
        while item is not None:
            tag = item.data(0)
            if isinstance(tag, tuple) and tag[0] == "transition":
                self.select_transition(tag[1])
                self.transition_clicked.emit(tag[1])
                break
            item = item.parentItem()
        super().mousePressEvent(event)
