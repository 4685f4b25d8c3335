"""Saving a plot widget as PNG or SVG, and the small "Save PNG… / Save SVG…" bar above each plot.

PNG is the widget painted into an image at the screen's resolution, or at a chosen one (e.g. 300 dpi:
the same picture, scaled, with the physical size of the on-screen plot recorded in the file). SVG
does not use pyqtgraph's own SVG exporter (it fails on Qt 6.11+): the widget paints itself into a
``QSvgGenerator`` whose resolution is the widget's logical DPI, size the widget's size and view box
the widget's rect, so text and lines keep their on-screen proportions; :func:`gui.svg_portable.portable_svg`
then removes what only Qt and browsers draw right (non-scaling strokes under data transforms) and
clips the curves to the plot area, so librsvg, ImageMagick and browsers show what the PNG shows.
Images are drawn into memory, then written with :func:`sim.io.atomic.write_atomic` (a temporary
file in the destination folder, renamed into place, with the mode a plain ``open()`` gives under the
user's umask).
"""

from __future__ import annotations

import errno
import os
from pathlib import Path

import pyqtgraph as pg
from PySide6.QtCore import QBuffer, QByteArray, QIODevice, QPoint, Signal, Slot
from PySide6.QtGui import QColor, QImage, QPainter
from PySide6.QtSvg import QSvgGenerator, QSvgRenderer
from PySide6.QtWidgets import QComboBox, QFileDialog, QGraphicsView, QHBoxLayout, QPushButton, QWidget

from sim.io.atomic import AtomicWriteError, write_atomic

from .svg_portable import Affine, portable_svg

__all__ = ["save_png", "save_svg", "svg_bytes", "ask_save_path", "plot_area", "PlotSaveBar", "PNG_RESOLUTIONS"]

#: Choices of the PNG resolution box: label -> dots per inch (None: as on screen).
PNG_RESOLUTIONS: dict[str, int | None] = {"screen": None, "150 dpi": 150, "300 dpi": 300, "600 dpi": 600}
INCHES_PER_METRE = 1 / 0.0254

_FILTERS = {"png": "PNG image (*.png)", "svg": "SVG vector image (*.svg)"}


def _check_folder(path: Path) -> None:
    """Refuse before painting anything: a missing folder or a folder as the file name."""
    if not path.parent.is_dir():
        raise AtomicWriteError(path, f"the folder {path.parent} does not exist", errno.ENOENT)
    if path.is_dir():
        raise AtomicWriteError(path, "is a folder; give a file name", errno.EISDIR)


def _render_png(widget: QWidget, dpi: int | None) -> QImage:
    """``widget`` painted into an image: ``grab()`` at screen resolution, else the same picture with
    ``dpi`` pixels per inch of its on-screen size (at the widget's logical DPI). A plot is drawn from
    its portable SVG (:func:`svg_bytes`), so lines, text and markers all scale together; the image
    records its resolution, so it prints at the plot's on-screen size."""
    if dpi is None:
        return widget.grab().toImage()
    scale = dpi / float(widget.logicalDpiX())
    size = widget.size()
    image = QImage(max(1, round(size.width() * scale)), max(1, round(size.height() * scale)),
                   QImage.Format.Format_ARGB32_Premultiplied)
    image.fill(QColor("white"))
    renderer = QSvgRenderer(QByteArray(svg_bytes(widget)))
    painter = QPainter(image)
    painter.setRenderHint(QPainter.RenderHint.Antialiasing)
    painter.setRenderHint(QPainter.RenderHint.TextAntialiasing)
    painter.setRenderHint(QPainter.RenderHint.SmoothPixmapTransform)
    try:
        renderer.render(painter)
    finally:
        painter.end()
    dots_per_metre = round(dpi * INCHES_PER_METRE)
    image.setDotsPerMeterX(dots_per_metre)
    image.setDotsPerMeterY(dots_per_metre)
    return image


def save_png(widget: QWidget, path: str | os.PathLike[str], dpi: int | None = None) -> Path:
    """Save what ``widget`` shows as a PNG, at screen resolution or at ``dpi`` dots per inch (the
    on-screen size scaled by ``dpi`` / the screen's logical DPI); returns the path."""
    p = Path(path)
    _check_folder(p)
    if dpi is not None and not 10 <= dpi <= 2400:
        raise ValueError(f"dpi must be between 10 and 2400, got {dpi}")
    data = QByteArray()
    buffer = QBuffer(data)
    buffer.open(QIODevice.OpenModeFlag.WriteOnly)
    ok = _render_png(widget, dpi).save(buffer, "PNG")
    buffer.close()
    if not ok or data.isEmpty():
        raise OSError(f"{p}: Qt could not write the PNG image")
    png = data.data()
    return write_atomic(p, lambda handle: handle.write(png))


def svg_bytes(widget: QWidget, title: str = "") -> bytes:
    """``widget`` as a portable SVG document (see the module docstring)."""
    data = QByteArray()
    buffer = QBuffer(data)
    buffer.open(QIODevice.OpenModeFlag.WriteOnly)
    gen = QSvgGenerator()
    gen.setOutputDevice(buffer)
    gen.setSize(widget.size())
    gen.setViewBox(widget.rect())
    gen.setResolution(widget.logicalDpiX())
    gen.setTitle(title or "plot")
    gen.setDescription("Plot saved by HazardTrace")
    painter = QPainter()
    if not painter.begin(gen):
        raise OSError("Qt could not start writing the SVG image")
    try:
        widget.render(painter)
    finally:
        painter.end()  # writes the closing tags into the buffer
    del gen
    buffer.close()
    if data.isEmpty():
        raise OSError("Qt wrote an empty SVG image")
    area = plot_area(widget)
    return portable_svg(data.data(), *(area if area is not None else (None, None)))


def save_svg(widget: QWidget, path: str | os.PathLike[str], title: str = "") -> Path:
    """Save ``widget`` as an SVG vector image (see the module docstring); returns the path."""
    p = Path(path)
    _check_folder(p)
    try:
        svg = svg_bytes(widget, title or p.stem)
    except OSError as err:
        raise OSError(f"{p}: {err}") from err
    return write_atomic(p, lambda handle: handle.write(svg))


def plot_area(widget: QWidget) -> tuple[tuple[float, float, float, float], Affine] | None:
    """The plot area of a pyqtgraph view holding one ViewBox, in ``widget`` coordinates, and the
    transform from that ViewBox's data coordinates to ``widget`` coordinates; None otherwise."""
    if not isinstance(widget, QGraphicsView) or widget.scene() is None:
        return None
    boxes = [item for item in widget.scene().items() if isinstance(item, pg.ViewBox)]
    if len(boxes) != 1:
        return None
    box = boxes[0]
    offset = widget.viewport().mapTo(widget, QPoint(0, 0))
    rect = widget.mapFromScene(box.sceneBoundingRect()).boundingRect().translated(offset)
    t = box.childGroup.sceneTransform() * widget.viewportTransform()
    data = Affine(t.m11(), t.m12(), t.m21(), t.m22(), t.dx() + offset.x(), t.dy() + offset.y())
    return (float(rect.x()), float(rect.y()), float(rect.width()), float(rect.height())), data


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
    """"Save PNG…" (with a resolution box) and "Save SVG…" buttons for one plot widget; reports
    ``saved(path)`` or ``failed(message)``."""

    saved = Signal(str)
    failed = Signal(str)

    def __init__(self, target: QWidget, name: str, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self._target = target
        self.name = name
        self.directory = ""
        self.png_button = QPushButton("Save PNG…")
        self.svg_button = QPushButton("Save SVG…")
        self.resolution = QComboBox()
        self.resolution.addItems(list(PNG_RESOLUTIONS))
        self.resolution.setToolTip("Resolution of a saved PNG: as on screen, or the same picture at more dots per "
                                   "inch (for print; it keeps the plot's on-screen size in inches)")
        for b, tip in ((self.png_button, "Save this plot as a PNG image"),
                       (self.svg_button, "Save this plot as an SVG vector image")):
            b.setToolTip(tip)
            b.setAutoDefault(False)
        layout = QHBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addStretch(1)
        layout.addWidget(self.resolution)
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
            out = (save_png(self._target, path, PNG_RESOLUTIONS[self.resolution.currentText()]) if kind == "png"
                   else save_svg(self._target, path, self.name))
        except OSError as err:
            self.failed.emit(str(err))
            return None
        self.directory = str(out.parent)
        self.saved.emit(str(out))
        return out
