"""Saving a plot widget as PNG or SVG, and the small "Save PNG… / Save SVG…" bar above each plot.

PNG is ``widget.grab()``. SVG does not use pyqtgraph's own SVG exporter (it fails on Qt 6.11+): the
widget paints itself into a ``QSvgGenerator`` whose resolution is the widget's logical DPI, size the
widget's size and view box the widget's rect, so text and lines keep their on-screen proportions.
The image is drawn into memory, then written with :func:`sim.io.atomic.write_atomic` (a temporary
file in the destination folder, renamed into place, with the mode a plain ``open()`` gives under the
user's umask).
"""

from __future__ import annotations

import errno
import os
from pathlib import Path

from PySide6.QtCore import QBuffer, QByteArray, QIODevice, Signal, Slot
from PySide6.QtGui import QPainter
from PySide6.QtSvg import QSvgGenerator
from PySide6.QtWidgets import QFileDialog, QHBoxLayout, QPushButton, QWidget

from sim.io.atomic import AtomicWriteError, write_atomic

__all__ = ["save_png", "save_svg", "ask_save_path", "PlotSaveBar"]

_FILTERS = {"png": "PNG image (*.png)", "svg": "SVG vector image (*.svg)"}


def _check_folder(path: Path) -> None:
    """Refuse before painting anything: a missing folder or a folder as the file name."""
    if not path.parent.is_dir():
        raise AtomicWriteError(path, f"the folder {path.parent} does not exist", errno.ENOENT)
    if path.is_dir():
        raise AtomicWriteError(path, "is a folder; give a file name", errno.EISDIR)


def save_png(widget: QWidget, path: str | os.PathLike[str]) -> Path:
    """Save what ``widget`` shows as a PNG at screen resolution; returns the path."""
    p = Path(path)
    _check_folder(p)
    data = QByteArray()
    buffer = QBuffer(data)
    buffer.open(QIODevice.OpenModeFlag.WriteOnly)
    ok = widget.grab().save(buffer, "PNG")
    buffer.close()
    if not ok or data.isEmpty():
        raise OSError(f"{p}: Qt could not write the PNG image")
    png = data.data()
    return write_atomic(p, lambda handle: handle.write(png))


def save_svg(widget: QWidget, path: str | os.PathLike[str], title: str = "") -> Path:
    """Save ``widget`` as an SVG vector image (see the module docstring); returns the path."""
    p = Path(path)
    _check_folder(p)
    data = QByteArray()
    buffer = QBuffer(data)
    buffer.open(QIODevice.OpenModeFlag.WriteOnly)
    gen = QSvgGenerator()
    gen.setOutputDevice(buffer)
    gen.setSize(widget.size())
    gen.setViewBox(widget.rect())
    gen.setResolution(widget.logicalDpiX())
    gen.setTitle(title or p.stem)
    gen.setDescription("Plot saved by HazardTrace")
    painter = QPainter()
    if not painter.begin(gen):
        raise OSError(f"{p}: Qt could not start writing the SVG image")
    try:
        widget.render(painter)
    finally:
        painter.end()  # writes the closing tags into the buffer
    del gen
    buffer.close()
    if data.isEmpty():
        raise OSError(f"{p}: Qt wrote an empty SVG image")
    svg = data.data()
    return write_atomic(p, lambda handle: handle.write(svg))


def ask_save_path(parent: QWidget | None, title: str, suggested: str,
                  filters: dict[str, str]) -> tuple[Path, str] | None:
    """Ask for a file name with ``QFileDialog.getSaveFileName``; returns (path, format) or None if
    cancelled. ``filters`` maps format -> dialog filter; a name without a known suffix gets the
    suffix of the chosen filter."""
    path, chosen = QFileDialog.getSaveFileName(parent, title, suggested, ";;".join(filters.values()))
    if not path:
        return None
    p = Path(path)
    by_suffix = {f".{k}": k for k in filters} | ({".pq": "parquet"} if "parquet" in filters else {})
    fmt = by_suffix.get(p.suffix.lower())
    if fmt is None:
        fmt = next((k for k, v in filters.items() if v == chosen), next(iter(filters)))
        p = p.with_name(p.name + f".{fmt}")
    return p, fmt


class PlotSaveBar(QWidget):
    """"Save PNG…" and "Save SVG…" buttons for one plot widget; reports ``saved(path)`` or
    ``failed(message)``."""

    saved = Signal(str)
    failed = Signal(str)

    def __init__(self, target: QWidget, name: str, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self._target = target
        self.name = name
        self.directory = ""
        self.png_button = QPushButton("Save PNG…")
        self.svg_button = QPushButton("Save SVG…")
        for b, tip in ((self.png_button, "Save this plot as a PNG image"),
                       (self.svg_button, "Save this plot as an SVG vector image")):
            b.setToolTip(tip)
            b.setAutoDefault(False)
        layout = QHBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addStretch(1)
        layout.addWidget(self.png_button)
        layout.addWidget(self.svg_button)
        self.png_button.clicked.connect(lambda: self.save("png"))
        self.svg_button.clicked.connect(lambda: self.save("svg"))

    @Slot(str)
    def save(self, kind: str) -> Path | None:
        """Ask for a path and save the plot as ``kind`` ("png" or "svg")."""
        suggested = str(Path(self.directory or os.getcwd()) / f"{self.name}.{kind}")
        answer = ask_save_path(self, f"Save plot as {kind.upper()}", suggested, {kind: _FILTERS[kind]})
        if answer is None:
            return None
        path, _ = answer
        try:
            out = save_png(self._target, path) if kind == "png" else save_svg(self._target, path, self.name)
        except OSError as err:
            self.failed.emit(str(err))
            return None
        self.directory = str(out.parent)
        self.saved.emit(str(out))
        return out
