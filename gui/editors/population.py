"""The population entering the model: initial state (one state, or a mix of states, optionally per
sex), sex mix and entry-age distribution."""

from __future__ import annotations

import math
from typing import Any, Mapping

import tomlkit
from PySide6.QtWidgets import (QComboBox, QFormLayout, QGridLayout, QGroupBox, QHBoxLayout, QLabel, QLineEdit,
                               QPushButton, QVBoxLayout, QWidget)

from gui.editors.base import EditorPanel
from gui.editors.fields import FieldSet

__all__ = ["PopulationEditor", "DISTRIBUTIONS", "INITIAL_MODES", "initial_mode", "initial_for_mode"]

INITIAL = ("population", "initial_state")
#: How patients start: the forms of ``population.initial_state`` (docs/scenario-format.md).
INITIAL_MODES = {"one": "one state", "mix": "a mix of states", "sex": "a mix per sex"}

DISTRIBUTIONS = {
    "fixed": ("age",),
    "uniform": ("low", "high"),
    "normal": ("mean", "sd", "low", "high"),
    "empirical": ("ages", "weights"),
}
_LABELS = {"fixed": "one age for everyone", "uniform": "uniform between two ages",
           "normal": "normal, truncated to [low, high]", "empirical": "observed ages with weights"}
_HELP = {"age": "Entry age in years.", "low": "Lowest entry age.", "high": "Highest entry age.",
         "mean": "Mean of the normal before truncation.", "sd": "Standard deviation (years).",
         "ages": "Entry ages, comma separated.", "weights": "Relative weights, one per age."}


def distribution_defaults(dist: str, current: dict) -> dict:
    """Starting parameters when the distribution changes, reusing what carries over."""
    low = current.get("low", min(current.get("ages", [40.0]) or [40.0]))
    high = current.get("high", max(current.get("ages", [70.0]) or [70.0]))
    mean = current.get("mean", current.get("age", 55.0))
    values = {"fixed": {"age": mean}, "uniform": {"low": low, "high": high},
              "normal": {"mean": mean, "sd": current.get("sd", 8.0), "low": low, "high": high},
              "empirical": {"ages": [low, mean, high], "weights": [1, 2, 1]}}[dist]
    return {"distribution": dist, **values}


def initial_mode(value: Any) -> str:
    """Which form ``population.initial_state`` has: ``"one"`` (a state name, or anything that is not
    a table), ``"sex"`` (a non-empty table of tables) or ``"mix"`` (a table of shares)."""
    if not isinstance(value, Mapping):
        return "one"
    return "sex" if value and all(isinstance(v, Mapping) for v in value.values()) else "mix"


def initial_for_mode(mode: str, value: Any, living: list[str], sexes: list[str]) -> Any:
    """The initial state in form ``mode``, carried over from ``value`` (its current form).

    One state becomes a mix with share 1 (and that mix for every sex); a mix becomes the same mix
    for every sex; per sex becomes the first sex's mix; a mix becomes its state with the largest
    share. ``None`` when there is nothing to start from (no living state).
    """
    current = initial_mode(value)
    if current == "sex":
        shares = next(iter(value.values()))
    elif current == "mix":
        shares = value
    elif isinstance(value, str) and value:
        shares = {value: 1.0}
    else:
        shares = {living[0]: 1.0} if living else {}
    if not shares:
        return None
    if mode == "one":
        numbers = {k: v for k, v in shares.items() if isinstance(v, (int, float)) and not isinstance(v, bool)}
        return max(numbers, key=lambda k: numbers[k]) if numbers else next(iter(shares))
    if mode == "mix":
        return _inline(shares)
    return _inline({sex: shares for sex in sexes})


def _inline(value: Any) -> Any:
    """``value`` with its tables as TOML inline tables (``initial_state = { well = 0.8, ... }``)."""
    if not isinstance(value, Mapping):
        return value
    table = tomlkit.inline_table()
    for k, v in value.items():
        table[k] = _inline(v)
    return table


def _share_sum(table: Any) -> str:
    """The sum of a table of shares as shown under its column (``"?"`` if a share is not a number)."""
    if not isinstance(table, Mapping):
        return "?"
    values = list(table.values())
    if not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values):
        return "?"
    return f"{math.fsum(values):.10g}"


class PopulationEditor(EditorPanel):
    """The ``[population]`` table."""

    title = "Population"
    sections = ("population",)

    def _build(self, body: QWidget) -> None:
        self.rows = FieldSet(self.document)
        self.single = FieldSet(self.document)  # the one-state combo: filled only in that form
        self.shares = FieldSet(self.document)  # the shares of a mix
        self._sig: Any = None
        self._mix_sig: Any = None
        layout = QVBoxLayout(body)
        top = QFormLayout()
        start = QHBoxLayout()
        self.initial_mode = QComboBox()
        self.initial_mode.setObjectName("population.initial_state form")
        for mode, label in INITIAL_MODES.items():
            self.initial_mode.addItem(label, mode)
        self.initial_mode.setToolTip("Everyone starts in one state, or each patient's starting state is drawn "
                                     "from shares (a prevalent cohort), the same for everyone or per sex.")
        self.initial_mode.activated.connect(self._on_initial_mode)
        start.addWidget(self.initial_mode)
        self.initial = self.single.combo(INITIAL, [], help="State every patient starts in (not absorbing).")
        start.addWidget(self.initial, 1)
        top.addRow("Initial state", start)
        layout.addLayout(top)
        self.initial_box = QGroupBox("Initial shares (each column adds up to 1)")
        self.initial_box.setToolTip("Share of patients starting in each living state; a blank share is 0.")
        self.initial_host = QVBoxLayout(self.initial_box)
        self.initial_box.hide()
        self.initial_widget: QWidget | None = None
        self.sum_labels: dict[Any, QLabel] = {}
        layout.addWidget(self.initial_box)
        self.mix_box = QGroupBox("Sex mix (shares add up to 1)")
        mix = QVBoxLayout(self.mix_box)
        self.mix_host = QVBoxLayout()
        mix.addLayout(self.mix_host)
        add_row = QHBoxLayout()
        self.new_sex = QLineEdit()
        self.new_sex.setPlaceholderText("label, e.g. female")
        add = QPushButton("Add")
        add.clicked.connect(self._on_add_sex)
        add_row.addWidget(self.new_sex)
        add_row.addWidget(add)
        mix.addLayout(add_row)
        layout.addWidget(self.mix_box)
        self.age_box = QGroupBox("Entry age (years)")
        age = QFormLayout(self.age_box)
        self.dist = self.fields.combo(("population", "entry_age", "distribution"),
                                      [(d, f"{d}: {_LABELS[d]}") for d in DISTRIBUTIONS],
                                      commit=self._set_distribution, help="Distribution of ages at entry.")
        age.addRow("Distribution", self.dist)
        self.age_host = QVBoxLayout()
        age.addRow(self.age_host)
        layout.addWidget(self.age_box)
        self.fields.group(("population", "sex_mix"), self.mix_box)
        self.fields.group(("population", "entry_age"), self.age_box)
        self.mix_widget: QWidget | None = None

    def field_sets(self) -> list[FieldSet]:
        return [self.fields, self.single, self.shares, self.rows]

    def _living(self) -> list[str]:
        return [s["name"] for s in self.document.tables("states")
                if isinstance(s.get("name"), str) and not s.get("absorbing")]

    def _sexes(self) -> list[str]:
        return list(self.document.table(("population", "sex_mix"))) or ["all"]

    def _refresh(self) -> None:
        living = self._living()
        if [self.initial.itemData(i) for i in range(self.initial.count())] != living:
            self.initial.blockSignals(True)
            self.initial.clear()
            for s in living:
                self.initial.addItem(s, s)
            self.initial.blockSignals(False)
        sexes = tuple(self.document.table(("population", "sex_mix")))
        dist = self.document.get(("population", "entry_age", "distribution"))
        dist = dist if isinstance(dist, str) else None
        sig = (sexes, dist)
        if sig != self._sig:
            self._rebuild(sexes, dist)
            self._sig = sig
        value = self.document.get(INITIAL)
        mode = initial_mode(value)
        self.initial_mode.setCurrentIndex(self.initial_mode.findData(mode))
        self.initial.setVisible(mode == "one")
        self.initial_box.setVisible(mode != "one")
        if mode != "one":
            self._refresh_mix(mode, value, living)
        for fs in self.field_sets():
            if fs is not self.single or mode == "one":
                fs.refresh()
        for column, label in self.sum_labels.items():
            label.setText("Sum " + _share_sum(value if column is None else value.get(column)))

    # ------------------------------------------------------------------ initial mix
    def _refresh_mix(self, mode: str, value: Mapping, living: list[str]) -> None:
        """Rebuild the table of shares when its rows (states) or columns (sexes) change."""
        columns: list[Any] = [None]
        tables: list[Any] = [value]
        if mode == "sex":
            columns = self._sexes() + [s for s in value if s not in self._sexes()]
            tables = [value.get(c) for c in columns]
        rows = list(living)
        for table in tables:
            if isinstance(table, Mapping):
                rows += [s for s in table if s not in rows]
        sig = (mode, tuple(rows), tuple(columns))
        if sig == self._mix_sig:
            return
        self._mix_sig = sig
        self.shares.clear()
        self.sum_labels = {}
        if self.initial_widget is not None:
            self.initial_widget.hide()
            self.initial_widget.deleteLater()
        self.initial_widget = QWidget()
        grid = QGridLayout(self.initial_widget)
        grid.setContentsMargins(0, 0, 0, 0)
        for j, column in enumerate(columns, start=1):
            if column is not None:
                grid.addWidget(QLabel(f"<b>{column}</b>"), 0, j)
        for i, state in enumerate(rows, start=1):
            note = "" if state in living else " (not a living state)"
            grid.addWidget(QLabel(state + note), i, 0)
            for j, column in enumerate(columns, start=1):
                key = (*INITIAL, state) if column is None else (*INITIAL, column, state)
                who = "" if column is None else f" of {column}"
                grid.addWidget(self.shares.line(key, placeholder="0", help=f"Share{who} starting in {state}, "
                                                                          "0 to 1 (blank: 0)."), i, j)
        for j, column in enumerate(columns, start=1):
            label = QLabel()
            label.setObjectName("initial sum" + ("" if column is None else f" {column}"))
            self.shares.group(INITIAL if column is None else (*INITIAL, column), label)
            self.sum_labels[column] = label
            grid.addWidget(label, len(rows) + 1, j)
        if mode == "sex":  # problems with the per-sex table as a whole (a sex missing)
            self.shares.group(INITIAL, self.initial_box)
        self.initial_host.addWidget(self.initial_widget)
        self.initial_widget.show()
        self.shares.apply_errors(self._errors)

    def _on_initial_mode(self, _index: int) -> None:
        mode = self.initial_mode.currentData()
        value = self.document.get(INITIAL)
        if mode == initial_mode(value):
            return
        new = initial_for_mode(mode, value, self._living(), self._sexes())
        if new is None or not self.document.set_value(INITIAL, new, f"Initial state: {INITIAL_MODES[mode]}"):
            self._refresh()  # nothing changed: show the form the document has

    def _rebuild(self, sexes: tuple, dist: Any) -> None:
        self.rows.clear()
        if self.mix_widget is not None:
            self.mix_widget.hide()
            self.mix_widget.deleteLater()
        self.mix_widget = QWidget()
        v = QVBoxLayout(self.mix_widget)
        v.setContentsMargins(0, 0, 0, 0)
        grid = QGridLayout()
        v.addLayout(grid)
        if not sexes:
            grid.addWidget(QLabel("No sex mix: everyone counts as 'all'."), 0, 0)
        for i, sex in enumerate(sexes):
            grid.addWidget(QLabel(sex), i, 0)
            grid.addWidget(self.rows.line(("population", "sex_mix", sex), help=f"Share of {sex}, 0 to 1."), i, 1)
            remove = QPushButton("Remove")
            remove.clicked.connect(lambda _c=False, s=sex: self.document.remove(("population", "sex_mix", s)))
            grid.addWidget(remove, i, 2)
        self.mix_host.addWidget(self.mix_widget)
        self.mix_widget.show()
        # the entry-age parameters live in their own box but are rebuilt together
        self.params_widget = QWidget()
        params = QFormLayout(self.params_widget)
        params.setContentsMargins(0, 0, 0, 0)
        for key in DISTRIBUTIONS.get(dist, ()):
            kind = "list" if key in ("ages", "weights") else "value"
            params.addRow(key, self.rows.line(("population", "entry_age", key), kind=kind, help=_HELP[key]))
        while self.age_host.count():
            old = self.age_host.takeAt(0).widget()
            if old is not None:
                old.hide()
                old.deleteLater()
        self.age_host.addWidget(self.params_widget)
        self.params_widget.show()
        self.rows.apply_errors(self._errors)

    def _set_distribution(self, dist: Any) -> None:
        current = self.document.table(("population", "entry_age"))
        self.document.set_value(("population", "entry_age"), distribution_defaults(str(dist), current),
                                f"Entry age: {dist}")

    def _on_add_sex(self) -> None:
        label = self.new_sex.text().strip()
        if not label:
            return
        self.new_sex.clear()
        mix = self.document.table(("population", "sex_mix"))
        self.document.set_value(("population", "sex_mix", label), 0.0 if mix else 1.0, f"Add sex {label!r}")
