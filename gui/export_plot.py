"""Saving a plot widget as PNG or SVG, and the small "Save PNG… / Save SVG…" bar above each plot.

PNG is the widget painted into an image at the screen's resolution, or at a chosen one (e.g. 300 dpi:
the same picture, scaled, with the physical size of the on-screen plot recorded in the file), and at
the on-screen size or a chosen one (a journal column, a page, a slide, or a width and height typed
in cm, inches or pixels): the plot is then laid out at that size for the moment of the export, so
text and lines keep their point sizes and the axes get the room of the new size (not the on-screen
picture stretched), and the window is put back as it was. SVG
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
import math
import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pyqtgraph as pg
from PySide6.QtCore import QBuffer, QByteArray, QCoreApplication, QEvent, QIODevice, QPoint, QSize, Qt, Signal, Slot
from PySide6.QtGui import QColor, QImage, QPainter, QResizeEvent
from PySide6.QtSvg import QSvgGenerator, QSvgRenderer
from PySide6.QtWidgets import (QComboBox, QDoubleSpinBox, QFileDialog, QGraphicsView, QHBoxLayout, QLabel, QPushButton,
                               QVBoxLayout, QWidget)

from sim.io.atomic import AtomicWriteError, write_atomic

from .svg_portable import Affine, portable_svg

__all__ = ["save_png", "save_svg", "svg_bytes", "ask_save_path", "plot_area", "PlotSaveBar", "PNG_RESOLUTIONS",
           "PNG_SIZES", "CUSTOM_SIZE", "SIZE_UNITS", "fitted_size", "MAX_PNG_SIDE", "MAX_PNG_PIXELS"]

#: Choices of the PNG resolution box: label -> dots per inch (None: as on screen).
PNG_RESOLUTIONS: dict[str, int | None] = {"screen": None, "150 dpi": 150, "300 dpi": 300, "600 dpi": 600}
INCHES_PER_METRE = 1 / 0.0254
CM = 1 / 2.54  # inches

#: Choices of the PNG size box: label -> (width, height) in inches of the box the picture is fitted
#: into with the on-screen aspect (:func:`fitted_size`); None: the on-screen size. Common practice,
#: no source (from memory): journals print a figure one column wide at about 8.5 cm or across the
#: page at about 17.5 cm, on at most about 23 cm of height; a 16:9 slide is 13.33 x 7.5 inches.
PNG_SIZES: dict[str, tuple[float, float] | None] = {
    "size on screen": None,
    "journal column (8.5 cm wide)": (8.5 * CM, 23.0 * CM),
    "journal page (17.5 cm wide)": (17.5 * CM, 23.0 * CM),
    "slide 16:9 (33.9 × 19.1 cm)": (13.333, 7.5),
}
#: The size box's last choice: the width and height typed in the boxes beside it, in SIZE_UNITS.
CUSTOM_SIZE = "custom size…"
#: Units of the typed width and height: label -> inches per unit (None: pixels of the saved image).
SIZE_UNITS: dict[str, float | None] = {"cm": CM, "in": 1.0, "px": None}
MAX_PNG_SIDE = 20_000  # pixels
MAX_PNG_PIXELS = 100_000_000  # 400 MB of image in memory

_FILTERS = {"png": "PNG image (*.png)", "svg": "SVG vector image (*.svg)"}


def _check_folder(path: Path) -> None:
    """Refuse before painting anything: a missing folder or a folder as the file name."""
    if not path.parent.is_dir():
        raise AtomicWriteError(path, f"the folder {path.parent} does not exist", errno.ENOENT)
    if path.is_dir():
        raise AtomicWriteError(path, "is a folder; give a file name", errno.EISDIR)


def fitted_size(box: tuple[float, float], aspect: float) -> tuple[float, float]:
    """The largest (width, height) with width / height = ``aspect`` inside ``box`` (width, height)."""
    width = min(box[0], box[1] * aspect)
    return width, width / aspect


def _pixels_of(size: tuple[float, float], dpi: float) -> tuple[int, int]:
    """(width, height) in inches at ``dpi``, in whole pixels; refuses an image too large to hold."""
    w, h = (max(1, round(v * dpi)) for v in size)
    if w > MAX_PNG_SIDE or h > MAX_PNG_SIDE or w * h > MAX_PNG_PIXELS:
        raise ValueError(f"a PNG of {w:,} x {h:,} pixels is too large (at most {MAX_PNG_SIDE:,} pixels a side and "
                         f"{MAX_PNG_PIXELS:,} in all): choose a smaller size or resolution")
    return w, h


@contextmanager
def _laid_out_at(widget: QWidget, size: QSize) -> Iterator[None]:
    """``widget`` resized to ``size`` (logical pixels) and its layouts settled, with screen updates
    off, for as long as the block runs; then its size limits and size are put back (and its parent's
    layout places it again) before the screen is updated."""
    if size == widget.size():
        yield
        return
    old_size, old_min, old_max = widget.size(), widget.minimumSize(), widget.maximumSize()
    updates = widget.updatesEnabled()
    widget.setUpdatesEnabled(False)
    try:
        widget.setMinimumSize(1, 1)
        widget.setMaximumSize(QSize(16_777_215, 16_777_215))
        QCoreApplication.sendPostedEvents(None, QEvent.Type.LayoutRequest.value)
        _resize_now(widget, size)
        yield
    finally:
        widget.setMinimumSize(old_min)
        widget.setMaximumSize(old_max)
        _resize_now(widget, old_size)
        widget.setUpdatesEnabled(updates)


def _resize_now(widget: QWidget, size: QSize) -> None:
    """Resize and deliver the resize event and the layout requests it causes at once (a hidden
    widget's resize event would wait until it is shown)."""
    old = widget.size()
    widget.resize(size)
    if not widget.isVisible() and old != size:
        QCoreApplication.sendEvent(widget, QResizeEvent(size, old))
    QCoreApplication.sendPostedEvents(None, QEvent.Type.LayoutRequest.value)


def _content_minimum(widget: QWidget) -> tuple[float, float]:
    """The smallest size (logical pixels) at which the items of a pyqtgraph layout widget fit (its
    central layout's minimum plus the view's frame); (0, 0) for another widget."""
    central = getattr(widget, "ci", None)
    if central is None or not isinstance(widget, QGraphicsView):
        return 0.0, 0.0
    least = central.effectiveSizeHint(Qt.SizeHint.MinimumSize)
    return (least.width() + widget.width() - widget.viewport().width(),
            least.height() + widget.height() - widget.viewport().height())


def _render_png(widget: QWidget, dpi: int | None, size: tuple[float, float] | None = None) -> QImage:
    """``widget`` painted into an image: ``grab()`` at screen resolution and size, else laid out at
    ``size`` (inches; default the on-screen size at the widget's logical DPI) and drawn with ``dpi``
    pixels per inch (default the logical DPI). A plot is drawn from its portable SVG
    (:func:`svg_bytes`), so lines, text and markers all scale together; the image records its
    resolution, so it prints at ``size``. A size too small for the plot's items (a long legend) is
    laid out at the smallest size of the same aspect that holds them and drawn smaller."""
    if dpi is None and size is None:
        return widget.grab().toImage()
    logical = float(widget.logicalDpiX())
    if size is None:
        size = (widget.width() / logical, widget.height() / logical)
    dpi_used = float(dpi) if dpi is not None else logical
    width, height = _pixels_of(size, dpi_used)
    # laid out at the size in logical pixels; where the plot's items need more room (a long legend),
    # at the smallest size with the same aspect that holds them, then drawn smaller into the image
    need = _content_minimum(widget)
    grow = max(1.0, need[0] / (size[0] * logical), need[1] / (size[1] * logical))
    with _laid_out_at(widget, QSize(max(1, math.ceil(size[0] * logical * grow)),
                                    max(1, math.ceil(size[1] * logical * grow)))):
        svg = svg_bytes(widget)
    image = QImage(width, height, QImage.Format.Format_ARGB32_Premultiplied)
    image.fill(QColor("white"))
    renderer = QSvgRenderer(QByteArray(svg))
    painter = QPainter(image)
    painter.setRenderHint(QPainter.RenderHint.Antialiasing)
    painter.setRenderHint(QPainter.RenderHint.TextAntialiasing)
    painter.setRenderHint(QPainter.RenderHint.SmoothPixmapTransform)
    try:
        renderer.render(painter)
    finally:
        painter.end()
    dots_per_metre = round(dpi_used * INCHES_PER_METRE)
    image.setDotsPerMeterX(dots_per_metre)
    image.setDotsPerMeterY(dots_per_metre)
    return image


def save_png(widget: QWidget, path: str | os.PathLike[str], dpi: int | None = None,
             size: tuple[float, float] | None = None) -> Path:
    """Save what ``widget`` shows as a PNG, at screen resolution or at ``dpi`` dots per inch, and at
    the on-screen size or laid out at ``size`` (width, height) in inches (the image then has
    round(size x dpi) pixels, dpi defaulting to the screen's logical DPI); returns the path.

    Raises ValueError for a dpi outside 10-2400, a size that is not positive, or an image too large
    to hold (:data:`MAX_PNG_SIDE`, :data:`MAX_PNG_PIXELS`)."""
    p = Path(path)
    _check_folder(p)
    if dpi is not None and not 10 <= dpi <= 2400:
        raise ValueError(f"dpi must be between 10 and 2400, got {dpi}")
    if size is not None and not all(v > 0 and math.isfinite(v) for v in size):
        raise ValueError(f"the width and height must be positive, got {size[0]:g} x {size[1]:g} inches")
    data = QByteArray()
    buffer = QBuffer(data)
    buffer.open(QIODevice.OpenModeFlag.WriteOnly)
    ok = _render_png(widget, dpi, size).save(buffer, "PNG")
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
    """"Save PNG…" (with a resolution box and a size box) and "Save SVG…" buttons for one plot widget;
    reports ``saved(path)`` or ``failed(message)``. The size box offers the on-screen size, presets
    (:data:`PNG_SIZES`, fitted with the on-screen aspect) and :data:`CUSTOM_SIZE`, which shows width
    and height boxes in a unit of :data:`SIZE_UNITS`, filled with the on-screen size to start from."""

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
        self.resolution.setToolTip("Resolution of a saved PNG: as on screen, or more dots per inch (for print)")
        self.size_choice = QComboBox()
        self.size_choice.addItems([*PNG_SIZES, CUSTOM_SIZE])
        self.size_choice.setToolTip("Size of a saved PNG: the plot is laid out at this size (text keeps its point "
                                    "size); presets keep the plot's on-screen proportions")
        self.width_box, self.height_box = QDoubleSpinBox(), QDoubleSpinBox()
        for box, what in ((self.width_box, "Width"), (self.height_box, "Height")):
            box.setToolTip(f"{what} of the saved PNG")
            box.setKeyboardTracking(False)
        self.times_label = QLabel("×")
        self.unit = QComboBox()
        self.unit.addItems(list(SIZE_UNITS))
        self.unit.setToolTip("Unit of the width and height (pixels: of the saved image)")
        self._unit_shown = self.unit.currentText()
        self._set_unit_ranges()
        for b, tip in ((self.png_button, "Save this plot as a PNG image"),
                       (self.svg_button, "Save this plot as an SVG vector image")):
            b.setToolTip(tip)
            b.setAutoDefault(False)
        # long preset names are cut in the closed box (the list shows them whole), so that the bar
        # does not widen the plot; the typed size goes on a second row, shown only when chosen
        self.size_choice.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToMinimumContentsLengthWithIcon)
        self.size_choice.setMinimumContentsLength(12)
        self.size_choice.view().setMinimumWidth(self.size_choice.view().sizeHintForColumn(0) + 24)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.setSpacing(2)
        rows = (QHBoxLayout(), QHBoxLayout())
        for row, widgets in zip(rows, ((self.resolution, self.size_choice, self.png_button, self.svg_button),
                                       (self.width_box, self.times_label, self.height_box, self.unit))):
            row.addStretch(1)
            for w in widgets:
                row.addWidget(w)
            layout.addLayout(row)
        self._show_custom(False)
        self.size_choice.currentTextChanged.connect(self._size_changed)
        self.unit.currentTextChanged.connect(self._unit_changed)
        self.png_button.clicked.connect(lambda: self.save("png"))
        self.svg_button.clicked.connect(lambda: self.save("svg"))

    # ---------------------------------------------------------------- size
    def _dpi(self) -> float:
        """The chosen resolution, or the screen's logical DPI."""
        dpi = PNG_RESOLUTIONS[self.resolution.currentText()]
        return float(dpi if dpi is not None else self._target.logicalDpiX())

    def _inches_per(self, unit: str) -> float:
        per = SIZE_UNITS[unit]
        return per if per is not None else 1.0 / self._dpi()

    def _on_screen_inches(self) -> tuple[float, float]:
        logical = float(self._target.logicalDpiX())
        return self._target.width() / logical, self._target.height() / logical

    def _set_unit_ranges(self) -> None:
        unit = self.unit.currentText()
        decimals, low, step = (0, 50.0, 10.0) if unit == "px" else (2, 1.0 if unit == "cm" else 0.5, 0.5)
        for box in (self.width_box, self.height_box):
            box.setDecimals(decimals)
            box.setRange(low, 20_000.0 if unit == "px" else 200.0)
            box.setSingleStep(step)
            box.setSuffix(f" {unit}")

    def _show_custom(self, shown: bool) -> None:
        for w in (self.width_box, self.times_label, self.height_box, self.unit):
            w.setVisible(shown)

    def _fill(self, inches: tuple[float, float]) -> None:
        per = self._inches_per(self.unit.currentText())
        self.width_box.setValue(inches[0] / per)
        self.height_box.setValue(inches[1] / per)

    def _custom_inches(self, unit: str | None = None) -> tuple[float, float]:
        per = self._inches_per(unit or self.unit.currentText())
        return self.width_box.value() * per, self.height_box.value() * per

    @Slot(str)
    def _size_changed(self, label: str) -> None:
        custom = label == CUSTOM_SIZE
        if custom:
            self._fill(self._on_screen_inches())
        self._show_custom(custom)

    @Slot(str)
    def _unit_changed(self, unit: str) -> None:
        inches = self._custom_inches(self._unit_shown)  # what the boxes said, in the unit they said it in
        self._unit_shown = unit
        self._set_unit_ranges()
        self._fill(inches)

    def png_size(self) -> tuple[float, float] | None:
        """The chosen PNG size (width, height) in inches, or None for the on-screen size."""
        label = self.size_choice.currentText()
        if label == CUSTOM_SIZE:
            return self._custom_inches()
        box = PNG_SIZES[label]
        if box is None:
            return None
        width, height = self._on_screen_inches()
        return fitted_size(box, width / height)

    def png_pixels(self) -> tuple[int, int]:
        """The pixel size of the PNG the bar would save now."""
        size = self.png_size() or self._on_screen_inches()
        return _pixels_of(size, self._dpi())

    # ---------------------------------------------------------------- saving
    @Slot(str)
    def save(self, kind: str) -> Path | None:
        """Ask for a path and save the plot as ``kind`` ("png" or "svg")."""
        suggested = str(Path(self.directory or os.getcwd()) / f"{self.name}.{kind}")
        answer = ask_save_path(self, f"Save plot as {kind.upper()}", suggested, {kind: _FILTERS[kind]})
        if answer is None:
            return None
        path, _ = answer
        try:
            out = (save_png(self._target, path, PNG_RESOLUTIONS[self.resolution.currentText()], self.png_size())
                   if kind == "png" else save_svg(self._target, path, self.name))
        except (OSError, ValueError) as err:
            self.failed.emit(str(err))
            return None
        self.directory = str(out.parent)
        self.saved.emit(str(out))
        return out
