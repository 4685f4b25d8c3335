"""The population entering the model: initial state, sex mix and entry-age distribution."""

from __future__ import annotations

from typing import Any

from PySide6.QtWidgets import (QFormLayout, QGridLayout, QGroupBox, QHBoxLayout, QLabel, QLineEdit,
                               QPushButton, QVBoxLayout, QWidget)

from gui.editors.base import EditorPanel
from gui.editors.fields import FieldSet

__all__ = ["PopulationEditor", "DISTRIBUTIONS"]

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


class PopulationEditor(EditorPanel):
    """The ``[population]`` table."""

    title = "Population"
    sections = ("population",)

    def _build(self, body: QWidget) -> None:
        self.rows = FieldSet(self.document)
        self._sig: Any = None
        layout = QVBoxLayout(body)
        top = QFormLayout()
        self.initial = self.fields.combo(("population", "initial_state"), [],
                                         help="State every patient starts in (not absorbing).")
        top.addRow("Initial state", self.initial)
        layout.addLayout(top)
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
        return [self.fields, self.rows]

    def _refresh(self) -> None:
        living = [s["name"] for s in self.document.tables("states")
                  if isinstance(s.get("name"), str) and not s.get("absorbing")]
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
        super()._refresh()

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
