"""The parameters of one hazard: family, time unit, the family's parameters and, for a constant
hazard, how it is given (a rate, events per person-time, or a risk over a period); a
piecewise-constant hazard's break points and rates in a two-column table with a row per band
(:class:`PiecewiseBands`), each rate and break with its "±" distribution button.

The converted rate per year and the assumption behind it come from :mod:`sim.hazards.units`; the
parameters the model actually uses (in years) come from the validated model.
"""

from __future__ import annotations

from typing import Any, Mapping

from PySide6.QtWidgets import (QComboBox, QFormLayout, QHBoxLayout, QHeaderView, QLabel, QPushButton, QSizePolicy,
                               QTableWidget, QToolButton, QVBoxLayout, QWidget)

from gui.document import KeyPath, ScenarioDocument, format_key, remove_value, set_value
from gui.toml_edit import append_item, get_item, remove_item, to_plain
from gui.uncertainty.entry import band_groups, forget_band
from sim.hazards import matched_start
from gui.editors.fields import FieldSet
from sim.hazards import (FAMILIES, FAMILY_DIMENSIONS, Dimension, Hazard, UnitError, rate_from_risk, rate_per_year,
                         risk_from_rate)
from sim.io.scenario import TIME_UNITS

__all__ = ["HazardForm", "PiecewiseBands", "family_params", "exponential_mode", "FAMILY_LABELS", "DEFAULTS", "MODES",
           "equivalent_form", "band_count"]

FAMILY_LABELS = {
    "exponential": "exponential (constant hazard)",
    "weibull": "Weibull",
    "gompertz": "Gompertz",
    "gompertz_makeham": "Gompertz-Makeham",
    "loglogistic": "log-logistic",
    "lognormal": "log-normal",
    "gamma": "gamma",
    "piecewise": "piecewise constant",
}
# Starting values when the family is changed (the user edits them next); the level parameter is
# then matched to the previous hazard (sim.hazards.level_match).
DEFAULTS: dict[str, dict[str, Any]] = {
    "exponential": {"rate": 0.1},
    "weibull": {"shape": 1.2, "scale": 10.0},
    "gompertz": {"rate": 1e-4, "shape": 0.085},
    "gompertz_makeham": {"rate": 1e-4, "shape": 0.085, "constant": 5e-4},
    "loglogistic": {"shape": 2.0, "scale": 10.0},
    "lognormal": {"mu": 2.0, "sigma": 1.0},
    "gamma": {"shape": 2.0, "scale": 5.0},
    "piecewise": {"breaks": [0.0, 5.0], "rates": [0.05, 0.1]},
}
MODES = {"rate": ("rate",), "events": ("events", "per"), "risk": ("risk", "period")}
_MODE_LABELS = {"rate": "rate per {u}", "events": "events per N person-{us}", "risk": "risk over a period"}
_EXP_KEYS = ("rate", "events", "per", "risk", "period")


def family_params(family: str) -> list[str]:
    """Parameter names of a family, in the family's order (:data:`sim.hazards.FAMILY_DIMENSIONS`)."""
    return list(FAMILY_DIMENSIONS.get(family, ()))


ALL_HAZARD_KEYS = frozenset({"family", "unit", *_EXP_KEYS, *(p for fam in FAMILIES for p in family_params(fam))})


def exponential_mode(values: Mapping[str, Any]) -> str:
    """How a constant hazard is given: ``"rate"``, ``"events"`` or ``"risk"``."""
    if "events" in values or "per" in values:
        return "events"
    if "risk" in values or "period" in values:
        return "risk"
    return "rate"


def equivalent_form(mode: str, rate: float) -> dict[str, Any]:
    """Keys giving the constant ``rate`` per year in ``mode`` (unit years): the rate itself, events
    per 1000 person-years, or the one-year risk ``1 - exp(-rate)`` (sim.hazards.units.risk_from_rate)."""
    if mode == "events":
        return {"events": float(f"{rate * 1000:.6g}"), "per": 1000, "unit": "years"}
    if mode == "risk":
        return {"risk": float(f"{risk_from_rate(rate, 1.0, 'years'):.10g}"), "period": 1, "unit": "years"}
    return {"rate": rate, "unit": "years"}


def _unit_text(family: str, name: str, unit: str) -> str:
    """How a parameter of ``family`` written in ``unit`` is labelled, from its dimension."""
    dimension = FAMILY_DIMENSIONS.get(family, {}).get(name)
    if dimension is Dimension.TIME:
        return f"{unit}"
    if dimension is Dimension.RATE:
        return f"per {unit[:-1]}"
    if dimension is Dimension.LOG_TIME:
        return f"log of {unit}"
    return "no unit"


_HELP = {
    ("weibull", "shape"): "k > 0: above 1 the hazard rises, below 1 it falls, 1 is constant. H(t) = (t / scale)^k.",
    ("weibull", "scale"): "The time by which H = 1 (63.2 % have had the event).",
    ("gompertz", "rate"): "h(t) = rate * exp(shape * t): the hazard at clock 0.",
    ("gompertz", "shape"): "Growth of the log hazard per unit of time (negative: the event may never happen).",
    ("gompertz_makeham", "constant"): "Age-independent part added to the Gompertz hazard.",
    ("piecewise", "breaks"): "Band starts, comma separated, beginning at 0.",
    ("piecewise", "rates"): "Hazard in each band, comma separated, one per break.",
    ("exponential", "rate"): "Constant hazard (events per person-time).",
    ("exponential", "events"): "Number of events counted ...",
    ("exponential", "per"): "... per this much person-time.",
    ("exponential", "risk"): "Probability of the event within the period, in [0, 1).",
    ("exponential", "period"): "The period the risk applies to.",
}


class HazardForm(QWidget):
    """Fields of the hazard at ``base`` (a transition, a background sex or a replacement)."""

    def __init__(self, document: ScenarioDocument, fields: FieldSet, base: KeyPath,
                 parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.document, self.fields, self.base = document, fields, tuple(base)
        values = document.table(self.base)
        self.family = str(values.get("family", ""))
        self.mode = exponential_mode(values) if self.family == "exponential" else ""
        unit = str(values.get("unit", "years"))
        form = QFormLayout(self)
        form.setContentsMargins(0, 0, 0, 0)
        fields.group(self.base, self)
        self.family_combo = fields.combo((*self.base, "family"), [(f, FAMILY_LABELS.get(f, f)) for f in FAMILIES],
                                         help="Hazard family: the shape of the hazard over the clock.",
                                         commit=self._set_family)
        form.addRow("Family", self.family_combo)
        self.unit_combo = fields.combo((*self.base, "unit"), TIME_UNITS, default="years",
                                       help="Unit of time the parameters are written in; the model works in years.")
        form.addRow("Time unit", self.unit_combo)
        self.mode_combo: QComboBox | None = None
        if self.family == "exponential":
            self.mode_combo = QComboBox()
            self.mode_combo.setObjectName("mode")
            for mode, label in _MODE_LABELS.items():
                self.mode_combo.addItem(label.format(u=unit[:-1], us=unit), mode)
            self.mode_combo.setCurrentIndex(list(MODES).index(self.mode))
            self.mode_combo.activated.connect(self._on_mode_chosen)
            form.addRow("Given as", self.mode_combo)
            names = list(MODES[self.mode])
        else:
            names = family_params(self.family)
        self.param_fields = {}
        self.bands: PiecewiseBands | None = None
        if self.family == "piecewise" and band_count(values) is not None:
            self.bands = PiecewiseBands(document, fields, self.base, unit)
            form.addRow(self.bands)
            names = []
        for name in names:
            fam_for_units = self.family if self.family != "exponential" or name == "rate" else ""
            kind = "list" if self.family == "piecewise" else "value"
            w = fields.line((*self.base, name), kind=kind, help=_HELP.get((self.family, name), ""))
            self.param_fields[name] = w
            if self.family == "exponential" and name in ("per", "period"):
                label = f"{name} ({unit if name == 'period' else 'person-' + unit})"
            elif self.family == "exponential" and name in ("events", "risk"):
                label = name
            else:
                label = f"{name} ({_unit_text(fam_for_units, name, unit)})"
            form.addRow(label, w)
        self.conversion = QLabel()
        self.conversion.setObjectName("conversion")
        self.conversion.setWordWrap(True)
        form.addRow(self.conversion)
        self.resolved = QLabel()
        self.resolved.setObjectName("resolved")
        self.resolved.setWordWrap(True)
        form.addRow(self.resolved)
        self.refresh_conversion()

    @staticmethod
    def signature(document: ScenarioDocument, base: KeyPath) -> tuple:
        """What decides the form's rows: rebuild when it changes."""
        values = document.table(tuple(base))
        family = values.get("family")
        return (family, exponential_mode(values) if family == "exponential" else "", values.get("unit", "years"),
                band_count(values) if family == "piecewise" else None)

    # ------------------------------------------------------------------ edits
    def _set_family(self, family: Any) -> None:
        """Switch to ``family``, starting at the level of the hazard it replaces (and say so)."""
        if not isinstance(family, str) or family not in FAMILIES:
            return
        t, where = self._reference_clock()
        unit = str(self.document.get((*self.base, "unit"), "years"))
        start = matched_start(family, DEFAULTS[family], self._current_hazard(), t,
                              unit if unit in TIME_UNITS else "years", where)

        def change(doc: Any) -> None:
            for key in ALL_HAZARD_KEYS - {"unit"}:
                remove_value(doc, (*self.base, key))
            set_value(doc, (*self.base, "family"), family)
            for k, v in start.params.items():
                set_value(doc, (*self.base, k), v)
        if self.document.edit(f"Set {self.base_label()} family to {family}", change):
            self.document.notice.emit(f"{self.base_label()}: {start.note}")

    def _current_hazard(self) -> Hazard | None:
        """The hazard of this form in the validated model (years), or None."""
        scenario = self.document.scenario
        if scenario is None:
            return None
        model, base = scenario.model, self.base
        if len(base) == 2 and base[0] == "transitions" and isinstance(base[1], int) and base[1] < len(model.transitions):
            return model.transitions[base[1]].hazard
        if len(base) == 2 and base[0] == "background" and model.background is not None:
            return model.background.hazards.get(base[1])
        return None

    def _reference_clock(self) -> tuple[float, str]:
        """Where the old and new hazards are made equal: the mean entry age on the age clock, else
        5 years on the clock."""
        if self.base[0] == "background":
            clock = self.document.get(("background", "clock"), "age")
        else:
            clock = self.document.get((*self.base, "clock"), "entry")
        scenario = self.document.scenario
        if clock == "age":
            age = float(scenario.model.population.entry_age.mean) if scenario is not None else 50.0
            return age, f"age {age:g}"
        return 5.0, "5 years " + ("in the state" if clock == "state" else "after entry")

    def _on_mode_chosen(self, index: int) -> None:
        mode = self.mode_combo.itemData(index) if self.mode_combo is not None else "rate"
        if mode == self.mode:
            return
        rate = self._rate_per_year()
        rate = DEFAULTS["exponential"]["rate"] if rate is None else rate
        items = [((*self.base, k), None) for k in _EXP_KEYS]
        items += [((*self.base, k), v) for k, v in equivalent_form(mode, rate).items()]
        self.document.set_values(items, f"Give {self.base_label()} as {_MODE_LABELS[mode].format(u='year', us='years')}")

    def base_label(self) -> str:
        """How messages and undo labels name this hazard."""
        name = self.document.get((*self.base, "name"))
        return repr(name) if isinstance(name, str) else format_key(self.base)

    # ------------------------------------------------------------------ display
    def _rate_per_year(self) -> float | None:
        """The constant rate per year the current entries give (sim.hazards.units), or None."""
        return self._conversion()[0]

    def _conversion(self) -> tuple[float | None, str]:
        v = self.document.table(self.base)
        unit = v.get("unit", "years")
        try:
            if self.mode == "events":
                r = rate_per_year(v["events"], v["per"], unit)
                return r, (f"{v['events']:g} events per {v['per']:g} person-{unit} = {r:.6g} per year "
                           f"(a constant rate).")
            if self.mode == "risk":
                conv = rate_from_risk(v["risk"], v["period"], unit)
                return conv.rate, f"Rate used: {conv.rate:.6g} per year. {conv.note}"
            if self.mode == "rate":
                r = rate_per_year(v["rate"], 1.0, unit)
                return r, f"Constant rate {r:.6g} per year." if unit != "years" else ""
        except (KeyError, TypeError, UnitError, ValueError):
            pass
        return None, ""

    def refresh_conversion(self) -> None:
        """Show the converted rate and its assumption (constant hazards)."""
        text = self._conversion()[1]
        self.conversion.setText(text)
        self.conversion.setVisible(bool(text))

    def show_resolved(self, hazard: Hazard | None) -> None:
        """Show the parameters the validated model uses (years), or nothing."""
        if hazard is None:
            self.resolved.setText("")
            self.resolved.hide()
            return
        parts = []
        for k, v in hazard.params().items():
            parts.append(f"{k} = " + (", ".join(f"{x:.6g}" for x in v) if isinstance(v, tuple) else f"{v:.6g}"))
        self.resolved.setText("Used by the model (time in years): " + "; ".join(parts))
        self.resolved.show()


def band_count(values: Mapping[str, Any]) -> int | None:
    """The number of bands a piecewise hazard's table shows (the longer of ``breaks`` and ``rates``),
    or None when either is not a list (then they are edited as text, and the loader says why)."""
    breaks, rates = values.get("breaks", []), values.get("rates", [])
    if not (isinstance(breaks, list) and isinstance(rates, list)):
        return None
    return max(len(breaks), len(rates))


_BAND_HELP = {"breaks": "Where the band starts on the hazard's clock; the first band starts at 0 and each "
                         "later one after the one before.",
              "rates": "The constant hazard within the band."}


class PiecewiseBands(QWidget):
    """A piecewise-constant hazard's bands: a row per band with where it starts and its rate (both
    in the hazard table's unit; each a model parameter with its "±" button), "Add band" and a remove
    button per row. Cells are fields of ``fields`` (written as the other fields, undoable); adding or
    removing a band is one undoable edit of both lists, which also keeps the ``[[uncertainty]]``
    names of the later bands pointing at the same bands."""

    def __init__(self, document: ScenarioDocument, fields: FieldSet, base: KeyPath, unit: str,
                 parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.document, self.base = document, tuple(base)
        n = band_count(document.table(self.base)) or 0
        self.table = QTableWidget(n, 3)
        self.table.setObjectName("piecewise_bands")
        self.table.setHorizontalHeaderLabels([f"Band starts at ({unit})", f"Rate (per {unit[:-1]})", ""])
        self.table.setVerticalHeaderLabels([str(j + 1) for j in range(n)])
        header = self.table.horizontalHeader()
        header.setSectionResizeMode(0, QHeaderView.ResizeMode.Stretch)
        header.setSectionResizeMode(1, QHeaderView.ResizeMode.Stretch)
        header.setSectionResizeMode(2, QHeaderView.ResizeMode.ResizeToContents)
        self.table.setSelectionMode(QTableWidget.SelectionMode.NoSelection)
        for key in ("breaks", "rates"):  # problems of a whole list (order, lengths) mark the table
            fields.group((*self.base, key), self.table)
        self.cells: dict[tuple[str, int], Any] = {}
        for j in range(n):
            for c, key in enumerate(("breaks", "rates")):
                w = fields.line((*self.base, key, j), kind="item", help=_BAND_HELP[key])
                w.setFrame(False)
                self.cells[(key, j)] = w
                self.table.setCellWidget(j, c, w)
            remove = QToolButton()
            remove.setText("✕")
            remove.setObjectName(f"remove_band[{j}]")
            remove.setToolTip("Remove this band (its start and rate)")
            remove.setEnabled(n > 1)
            remove.clicked.connect(lambda _c=False, j=j: self.remove_band(j))
            self.table.setCellWidget(j, 2, remove)
        self.table.resizeRowsToContents()
        height = self.table.horizontalHeader().sizeHint().height() + self.table.verticalHeader().length() + 4
        self.table.setFixedHeight(min(height, 320))  # the rows, no empty space below them (scrolls beyond)
        self.table.setMinimumWidth(220)
        self.table.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Fixed)
        self.add_button = QPushButton("Add band")
        self.add_button.setObjectName("add_band")
        self.add_button.setToolTip("A band after the last one, starting one unit later at the same rate")
        self.add_button.clicked.connect(self.add_band)
        row = QHBoxLayout()
        row.addWidget(self.add_button)
        row.addStretch(1)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(QLabel("Bands (a band lasts until the next one starts; the first starts at 0):"))
        layout.addWidget(self.table)
        layout.addLayout(row)

    def _label(self) -> str:
        name = self.document.get((*self.base, "name"))
        return repr(name) if isinstance(name, str) else format_key(self.base)

    def add_band(self) -> None:
        """Append a band starting one unit after the last start, at the last band's rate (edited next)."""
        values = self.document.table(self.base)
        breaks, rates = values.get("breaks", []), values.get("rates", [])
        last = breaks[-1] if breaks and isinstance(breaks[-1], (int, float)) else -1.0
        rate = rates[-1] if rates and isinstance(rates[-1], (int, float)) else DEFAULTS["exponential"]["rate"]

        def change(doc: Any) -> None:
            append_item(doc, (*self.base, "breaks"), float(last) + 1.0)
            append_item(doc, (*self.base, "rates"), rate)
        self.document.edit(f"Add a band to {self._label()}", change)

    def remove_band(self, band: int) -> None:
        """Remove band ``band``: its start and rate, and their single-parameter distributions; refused
        (with a notice) while a group of ``[[uncertainty]]`` names it."""
        held = band_groups(self.document.data, self.base, band)
        if held:
            self.document.notice.emit(f"{self._label()}: band {band + 1} is drawn in a group (uncertainty[{held[0]}]); "
                                      "take it out of the group first.")
            return

        def change(doc: Any) -> None:
            for key in ("breaks", "rates"):
                if band < len(to_plain(get_item(doc, (*self.base, key))) or []):
                    remove_item(doc, (*self.base, key, band))
            forget_band(doc, self.base, band)
        self.document.edit(f"Remove band {band + 1} of {self._label()}", change)
