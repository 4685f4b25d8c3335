"""Small layout helpers shared by the result views."""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QSplitter, QVBoxLayout, QWidget

__all__ = ["column", "two_panes"]


def column(*widgets: QWidget, stretch: QWidget | None = None) -> QWidget:
    """A widget holding ``widgets`` top to bottom without margins; ``stretch`` takes the spare height."""
    box = QWidget()
    layout = QVBoxLayout(box)
    layout.setContentsMargins(0, 0, 0, 0)
    for w in widgets:
        layout.addWidget(w, 1 if w is stretch else 0)
    return box


def two_panes(top: QWidget, bottom: QWidget) -> QSplitter:
    """A vertical splitter giving ``top`` three fifths of the height; neither pane can be collapsed."""
    split = QSplitter(Qt.Orientation.Vertical)
    split.addWidget(top)
    split.addWidget(bottom)
    split.setStretchFactor(0, 3)
    split.setStretchFactor(1, 2)
    split.setChildrenCollapsible(False)
    return split
