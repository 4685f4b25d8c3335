"""Background mortality (death from other causes): a hazard per sex, or a life table with a q/m
choice and an optional Gompertz fit (b, g, doubling time and the fit against the table).

Reading the table and fitting are done by :mod:`sim.io.lifetable`; this panel only shows the results.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import (QComboBox, QFileDialog, QFormLayout, QGroupBox, QHBoxLayout, QLabel, QPushButton,
                               QVBoxLayout, QWidget)

from gui.editors.base import EditorPanel
from gui.editors.fields import FieldSet
from gui.editors.hazard_form import DEFAULTS, HazardForm
from gui.editors.transitions import CLOCKS
from gui.palette import OKABE_ITO
from gui.preview import make_plot

__all__ = ["BackgroundEditor", "life_table_results", "LifeTableResult"]

MODES = [("none", "No background mortality"), ("hazard", "A hazard per sex"), ("life_table", "A life table")]
FITS = [("", "No fit: the table's band rates (piecewise constant)"), ("gompertz", "Gompertz fit"),
        ("gompertz_makeham", "Gompertz-Makeham fit")]
KINDS = [("q", "q: probability of dying within the age band"), ("m", "m: central death rate per year")]


class LifeTableResult:
    """What the panel shows for one sex: a text, the table as a hazard and the fitted hazard (or None)."""

    def __init__(self, sex: str, text: str, ages: np.ndarray, table: Any, fitted: Any = None) -> None:
        self.sex, self.text, self.ages, self.table, self.fitted = sex, text, ages, table, fitted


def life_table_results(spec: dict, base_dir: Path) -> list[LifeTableResult]:
    """Read the life table named in ``spec`` (the ``[background.life_table]`` table) with
    :func:`sim.io.lifetable.read_life_table` and, if asked, fit it with :func:`sim.io.lifetable.fit_gompertz`.

    Raises ``ValueError``/``OSError`` (from sim) when the table cannot be used.
    """
    from sim.io import lifetable

    columns = spec.get("columns", {})
    columns = {"all": columns} if isinstance(columns, str) else dict(columns)
    path = Path(str(spec.get("file", "")))
    if not path.is_absolute():
        path = base_dir / path
    table = lifetable.read_life_table(path, kind=spec.get("kind", ""), age_column=spec.get("age_column", "age"),
                                      value_columns=columns, sheet=spec.get("sheet"))
    fit = spec.get("fit")
    out = []
    for sex in columns:
        ages = np.asarray(table.ages, dtype=float)
        if not fit:
            out.append(LifeTableResult(sex, table.conversion_note(sex), ages, table.to_hazard(sex)))
            continue
        res = lifetable.fit_gompertz(table, sex=sex, age_range=tuple(spec.get("fit_ages", [40, 90])),
                                     method=spec.get("fit_method", "poisson"), makeham=fit == "gompertz_makeham")
        head = (f"b = {res.b:.4g} per year, g = {res.g:.4g} per year, doubling time "
                f"{res.doubling_time:.3g} years" + (f", c = {res.c:.4g} per year" if res.makeham else ""))
        out.append(LifeTableResult(sex, f"<b>{head}</b><br>{res.summary()}", ages, table.to_hazard(sex),
                                   res.to_hazard()))
    return out


class BackgroundEditor(EditorPanel):
    """The ``[background]`` table."""

    title = "Background mortality"
    sections = ("background",)

    def _build(self, body: QWidget) -> None:
        self.detail_fields = FieldSet(self.document)
        self.forms: dict[str, HazardForm] = {}
        self._signature: Any = None
        self._lt_cache: tuple[Any, Any] = (None, None)
        layout = QVBoxLayout(body)
        top = QFormLayout()
        self.mode_combo = QComboBox()
        self.mode_combo.setObjectName("background_mode")
        self.mode_combo.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToMinimumContentsLengthWithIcon)
        for value, label in MODES:
            self.mode_combo.addItem(label, value)
        self.mode_combo.activated.connect(self._on_mode_chosen)
        top.addRow("Death from other causes", self.mode_combo)
        self.target = self.fields.combo(("background", "to"), [], help="The absorbing state background death leads to.")
        top.addRow("Leads to", self.target)
        top.addRow("Clock", self.fields.combo(("background", "clock"), CLOCKS, default="age",
                                              help="Usually attained age."))
        layout.addLayout(top)
        self.detail_host = QVBoxLayout()
        layout.addLayout(self.detail_host)
        self.detail: QWidget | None = None
        self.lt_plot = None

    def field_sets(self) -> list[FieldSet]:
        return [self.fields, self.detail_fields]

    # ------------------------------------------------------------------ reading
    def mode(self) -> str:
        bg = self.document.get(("background",))
        if not isinstance(bg, dict):
            return "none"
        return "life_table" if "life_table" in bg else "hazard"

    def sexes(self) -> list[str]:
        """Sex labels of the population (``all`` when there is no mix) and any the table names."""
        mix = self.document.table(("population", "sex_mix"))
        out = list(mix) if mix else ["all"]
        bg = self.document.table(("background",))
        if "life_table" not in bg:
            out += [k for k, v in bg.items() if isinstance(v, dict) and k not in out]
        return out

    def _states(self) -> list[str]:
        return self.document.names("states")

    # ------------------------------------------------------------------ refresh
    def _refresh(self) -> None:
        mode = self.mode()
        self.mode_combo.setCurrentIndex([m for m, _ in MODES].index(mode))
        states = self._states()
        if [self.target.itemData(i) for i in range(self.target.count())] != states:
            self.target.blockSignals(True)
            self.target.clear()
            for s in states:
                self.target.addItem(s, s)
            self.target.blockSignals(False)
        self.target.setEnabled(mode != "none")
        sig = (mode, tuple(self.sexes()), tuple(HazardForm.signature(self.document, ("background", s))
                                              for s in self.sexes()), self._lt_signature())
        if sig != self._signature:
            self._rebuild(mode)
            self._signature = sig
        super()._refresh()
        for form in self.forms.values():
            form.refresh_conversion()

    def _lt_signature(self) -> Any:
        cols = self.document.get(("background", "life_table", "columns"))
        return ("str", cols) if isinstance(cols, str) else tuple(cols or ())

    def _rebuild(self, mode: str) -> None:
        self.detail_fields.clear()
        self.forms = {}
        self.lt_plot = None
        if self.detail is not None:
            self.detail.hide()
            self.detail.deleteLater()
        self.detail = QWidget()
        box = QVBoxLayout(self.detail)
        box.setContentsMargins(0, 0, 0, 0)
        if mode == "hazard":
            self._build_hazards(box)
        elif mode == "life_table":
            self._build_life_table(box)
        self.detail_host.addWidget(self.detail)
        self.detail.show()  # now, not on the next event-loop turn
        self.detail_fields.apply_errors(self._errors)

    def _build_hazards(self, box: QVBoxLayout) -> None:
        for sex in self.sexes():
            group = QGroupBox(f"Hazard for {sex}")
            inner = QVBoxLayout(group)
            if self.document.has(("background", sex)):
                form = HazardForm(self.document, self.detail_fields, ("background", sex))
                self.forms[sex] = form
                inner.addWidget(form)
                remove = QPushButton(f"Remove the hazard for {sex}")
                remove.clicked.connect(lambda _c=False, s=sex: self.document.remove(("background", s)))
                inner.addWidget(remove, 0, Qt.AlignmentFlag.AlignLeft)
            else:
                add = QPushButton(f"Add a hazard for {sex}")
                add.clicked.connect(lambda _c=False, s=sex: self.document.set_value(
                    ("background", s), {"family": "gompertz", **DEFAULTS["gompertz"]}, f"Add background hazard for {s}"))
                inner.addWidget(add, 0, Qt.AlignmentFlag.AlignLeft)
            box.addWidget(group)

    def _build_life_table(self, box: QVBoxLayout) -> None:
        f = self.detail_fields
        base = ("background", "life_table")
        group = QGroupBox("Life table")
        form = QFormLayout(group)
        file_row = QHBoxLayout()
        self.file_field = f.line((*base, "file"), kind="text", help="CSV or .xlsx file; a relative path is "
                                 "read from the scenario file's folder.")
        file_row.addWidget(self.file_field, 1)
        browse = QPushButton("Browse…")
        browse.clicked.connect(self._on_browse)
        file_row.addWidget(browse)
        form.addRow("File", file_row)
        form.addRow("Values are", f.combo((*base, "kind"), KINDS, help="Say what the table holds; it is never guessed."))
        form.addRow("Age column", f.line((*base, "age_column"), kind="text", placeholder="age",
                                         help="Header of the column of band start ages."))
        cols = self.document.get((*base, "columns"))
        if isinstance(cols, str):
            form.addRow("Column (all)", f.line((*base, "columns"), kind="text"))
        else:
            for sex in self.sexes():
                form.addRow(f"Column for {sex}", f.line((*base, "columns", sex), kind="text",
                                                         help=f"Header of the column with {sex} values."))
        form.addRow("Sheet (xlsx)", f.line((*base, "sheet"), kind="text", help="Optional: worksheet name."))
        form.addRow("Fit", f.combo((*base, "fit"), FITS, default="", commit=self._set_fit))
        form.addRow("Fit ages", f.line((*base, "fit_ages"), kind="list", placeholder="40, 90",
                                       help="Lowest and highest age of the bands fitted."))
        form.addRow("Fit method", f.combo((*base, "fit_method"), [("poisson", "Poisson maximum likelihood"),
                                                                   ("wls", "weighted least squares on log rates")],
                                          default="poisson"))
        box.addWidget(group)
        self.lt_text = QLabel()
        self.lt_text.setObjectName("life_table_result")
        self.lt_text.setWordWrap(True)
        self.lt_text.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        box.addWidget(self.lt_text)
        self.lt_plot = make_plot("The table's band rates and the fitted law", "age (years)", "per year (log scale)")
        self.lt_plot.setMinimumHeight(260)
        item = self.lt_plot.getPlotItem()
        item.setLogMode(y=True)
        item.getAxis("left").enableAutoSIPrefix(False)
        item.addLegend(offset=(5, 5), labelTextColor=OKABE_ITO["black"])
        self.lt_curves: dict[str, tuple[Any, Any]] = {}
        colours = ("blue", "vermillion", "bluish green", "reddish purple")
        for i, sex in enumerate(self.sexes() if not isinstance(cols, str) else ["all"]):
            c = OKABE_ITO[colours[i % len(colours)]]
            steps = self.lt_plot.plot(pen=pg.mkPen(c, width=1), name=f"{sex}: table")
            line = self.lt_plot.plot(pen=pg.mkPen(c, width=2, style=Qt.PenStyle.DashLine), name=f"{sex}: fitted")
            self.lt_curves[sex] = (steps, line)
        box.addWidget(self.lt_plot)

    # ------------------------------------------------------------------ life-table results
    def _show_validation(self, scenario: Any, errors: list) -> None:
        if scenario is not None and scenario.model.background is not None:
            for sex, form in self.forms.items():
                form.show_resolved(scenario.model.background.hazards.get(sex))
        else:
            for form in self.forms.values():
                form.show_resolved(None)
        if self.mode() == "life_table" and self.lt_plot is not None:
            self._show_life_table()

    def _show_life_table(self) -> None:
        spec = self.document.table(("background", "life_table"))
        base_dir = self.document.path.parent if self.document.path else Path.cwd()
        key = (repr(spec), str(base_dir), self._file_stamp(spec, base_dir))
        if self._lt_cache[0] != key:
            try:
                self._lt_cache = (key, life_table_results(spec, base_dir))
            except (OSError, ValueError, TypeError, KeyError) as err:
                self._lt_cache = (key, str(err))
        results = self._lt_cache[1]
        if isinstance(results, str):
            self.lt_text.setText(f"The life table cannot be used yet: {results}")
            for points, line in self.lt_curves.values():
                points.setData([], [])
                line.setData([], [])
            return
        self.lt_text.setText("<br><br>".join(f"<b>{r.sex}</b>: {r.text}" for r in results))
        for r in results:
            if r.sex not in self.lt_curves:
                continue
            steps, line = self.lt_curves[r.sex]
            grid = np.linspace(r.ages.min(), r.ages.max(), 400)
            table = r.table.hazard(grid)
            steps.setData(grid[table > 0], table[table > 0])
            if r.fitted is None:
                line.setData([], [])
            else:
                fitted = r.fitted.hazard(grid)
                line.setData(grid[fitted > 0], fitted[fitted > 0])

    @staticmethod
    def _file_stamp(spec: dict, base_dir: Path) -> float:
        path = Path(str(spec.get("file", "")))
        path = path if path.is_absolute() else base_dir / path
        try:
            return path.stat().st_mtime
        except OSError:
            return -1.0

    # ------------------------------------------------------------------ edits
    def _on_mode_chosen(self, index: int) -> None:
        mode = self.mode_combo.itemData(index)
        if mode == self.mode():
            return
        if mode == "none":
            self.document.remove(("background",), "Remove background mortality")
            return
        bg = self.document.table(("background",))
        dead = [s.get("name") for s in self.document.tables("states") if s.get("absorbing")]
        items: list[tuple[tuple, Any]] = [(("background", "to"), bg.get("to", dead[0] if dead else "")),
                                          (("background", "clock"), bg.get("clock", "age"))]
        sexes = [s for s in self.sexes()]
        if mode == "hazard":
            items.append((("background", "life_table"), None))
            items += [(("background", s), {"family": "gompertz", **DEFAULTS["gompertz"]}) for s in sexes]
        else:
            items += [(("background", s), None) for s in sexes]
            items.append((("background", "life_table"), {"file": "", "kind": "q", "age_column": "age",
                                                          "columns": {s: s for s in sexes}}))
        self.document.set_values(items, f"Background mortality: {dict(MODES)[mode].lower()}")

    def _set_fit(self, value: Any) -> None:
        self.document.set_value(("background", "life_table", "fit"), value or None,
                                "Background life table: " + (f"fit {value}" if value else "no fit"))

    def _on_browse(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Choose a life table", self.document.dialog_folder(),
                                              "Life tables (*.csv *.xlsx);;All files (*)")
        if not path:
            return
        self.document.remember_folder(Path(path).parent)
        chosen = Path(path)
        if self.document.path is not None:
            try:
                chosen = chosen.resolve().relative_to(self.document.path.parent)
            except ValueError:
                pass
        self.document.set_value(("background", "life_table", "file"), chosen.as_posix(), "Choose life table file")
