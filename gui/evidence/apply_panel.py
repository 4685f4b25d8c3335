"""Step 4 of the evidence window, "Into the scenario": the transition, the arm, the compared arm's
strategy (its hazard ratio, or for an accelerated-failure-time fit its own hazard, as
:func:`sim.evidence.compared_arm` decides), the covariance group, the entry age and the
``at_least_background`` choice, and the apply button. The window connects the signals and applies
(:func:`gui.evidence.scenario_edit.fit_edit`); this panel only shows the choices and reads them back.
"""

from __future__ import annotations

from PySide6.QtWidgets import QCheckBox, QComboBox, QDoubleSpinBox, QFormLayout, QGroupBox, QLabel, QPushButton, QWidget

from gui.document import ScenarioDocument
from sim.evidence import Fit, SurvivalData, compared_arm

__all__ = ["ApplyPanel"]


class _Note(QLabel):
    """A word-wrapped label that has its layout redone when its text changes: inside a scroll area a
    form laid out for a shorter text would otherwise clip the new one to its old height."""

    def __init__(self, name: str) -> None:
        super().__init__()
        self.setObjectName(name)
        self.setWordWrap(True)

    def setText(self, text: str) -> None:  # noqa: N802 - Qt API
        super().setText(text)
        parent = self.parentWidget()
        layout = parent.layout() if parent is not None else None
        if layout is not None:
            layout.invalidate()
            layout.activate()


class ApplyPanel(QGroupBox):
    """The widgets of "4. Into the scenario" (public attributes, read by the window and the tests)."""

    def __init__(self, document: ScenarioDocument, parent: QWidget | None = None) -> None:
        super().__init__("4. Into the scenario", parent)
        self.document = document
        form = QFormLayout(self)
        self.transition = QComboBox()
        self.transition.setToolTip("The transition whose hazard the fit replaces (its clock, hazard ratio and waning "
                                   "stay)")
        self.arm = QComboBox()
        self.arm.setToolTip("Two arms: the reference arm's hazard, or the compared arm's in the same family")
        self.covariance = QCheckBox("Add its covariance as a correlated parameter group ([[uncertainty]])")
        self.covariance.setChecked(True)
        self.covariance.setToolTip("A multivariate normal on the fit's estimation scale (log of positive "
                                   "parameters) for the probabilistic analysis; replaces groups on the old hazard")
        self.ratio = QCheckBox("Also put the other arm's hazard ratio into a strategy")
        self.ratio.setObjectName("ratio")
        self.ratio.setToolTip("Two arms: the strategy below gets the other arm's fitted hazard ratio for this "
                              "transition (hazard_ratios); for a log-logistic, log-normal or gamma fit the effect "
                              "is an acceleration factor, which the scenario format has no key for, so that "
                              "strategy gets the other arm's own fitted hazard instead (replacements)")
        self.strategy = QComboBox()
        self.strategy.setObjectName("strategy")
        self.strategy.setToolTip("The strategy that stands for the other arm (a new one can be added)")
        self.ratio_note = _Note("ratio_note")
        self.floor = QCheckBox("At least the background hazard (at_least_background = true)")
        self.floor.setToolTip("The transition's hazard becomes the larger of the fit and the background hazard; "
                              "reported by hazardtrace check")
        self.floor_note = _Note("floor_note")
        self.entry_age = QDoubleSpinBox()
        self.entry_age.setRange(0.0, 130.0)
        self.entry_age.setDecimals(1)
        self.entry_age.setSuffix(" years")
        self.entry_age.setToolTip("Attained age at time 0 of the data, to read the background hazard")
        self.apply_button = QPushButton("Put the selected fit into the transition")
        self.apply_button.setEnabled(False)
        self.apply_message = _Note("apply_message")
        form.addRow("Transition", self.transition)
        form.addRow("Arm", self.arm)
        form.addRow(self.ratio)
        form.addRow("Strategy", self.strategy)
        form.addRow(self.ratio_note)
        form.addRow(self.covariance)
        form.addRow("Entry age", self.entry_age)
        form.addRow(self.floor)
        form.addRow(self.floor_note)
        form.addRow(self.apply_button)
        form.addRow(self.apply_message)

    def update_for(self, fit: Fit | None) -> None:
        """Enable what applies to ``fit`` and the arm chosen: the covariance group for the reference
        arm of a fit with a covariance; the compared arm's strategy for a converged two-arm fit of a
        scenario family when the transition takes the reference arm's hazard."""
        compared = self.arm.currentData() == "compared"
        ok = fit is not None and fit.covariance is not None and not compared
        self.covariance.setEnabled(ok)
        self.covariance.setToolTip("" if ok else "Only for the reference arm's hazard of a fit with a covariance")
        two = (fit is not None and fit.effect is not None and fit.converged and fit.scenario and not compared
               and self.strategy.count() > 0)
        self.ratio.setEnabled(two)
        self.strategy.setEnabled(two and self.ratio.isChecked())
        self._show_ratio_note(fit if two else None)

    def fill_strategies(self, data: SurvivalData | None) -> None:
        """The scenario's strategies (by index, the edit's address), and a new one named after the
        compared arm when no strategy has that name; the compared arm's strategy is chosen first (one
        named after it, else the first after the comparator, else the new one), and kept while the
        list stays the same."""
        other = data.groups[1] if data is not None and len(data.groups) == 2 else None
        names = [t.get("name") for t in self.document.tables("strategies")]
        items = [(name if isinstance(name, str) and name else f"strategies[{k}]", k) for k, name in enumerate(names)]
        if other is not None and other not in names:
            first = f"new strategies {data.groups[0]!r} (comparator) and " if not names else "new strategy "
            items.append((f"{first}{other!r}", ("new", other)))
        old = [(self.strategy.itemText(j), self.strategy.itemData(j)) for j in range(self.strategy.count())]
        current = self.strategy.currentIndex()
        self.strategy.blockSignals(True)
        self.strategy.clear()
        for text, data in items:
            self.strategy.addItem(text, data)
        pick = current if items == old else -1  # the user's choice stays while the strategies do
        if pick < 0 and other in names:
            pick = names.index(other)
        if pick < 0:
            pick = 1 if len(names) > 1 else self.strategy.count() - 1
        self.strategy.setCurrentIndex(pick)
        self.strategy.blockSignals(False)

    def strategy_choice(self) -> tuple[int | None, str | None]:
        """(strategy index, name of a new strategy or None) chosen for the compared arm; (None, None)
        when the option is off or does not apply."""
        if not (self.ratio.isChecked() and self.ratio.isEnabled()):
            return None, None
        data = self.strategy.currentData()
        if isinstance(data, tuple):  # appended; after a comparator when there is no strategy yet
            return max(len(self.document.tables("strategies")), 1), data[1]
        return data, None

    def _show_ratio_note(self, fit: Fit | None) -> None:
        """What the option writes, from :func:`sim.evidence.compared_arm` (an acceleration factor is said
        to be one, with where it goes instead)."""
        if fit is None or fit.effect is None:
            self.ratio_note.setText("")
            return
        arm = compared_arm(fit, transition=self.transition.currentText() or "the transition",
                           strategy=max(self.strategy.currentIndex(), 0))
        e = fit.effect
        ci = f" (95% CI {e.lower:.3g} to {e.upper:.3g})"
        if arm.hazard_ratio is not None:
            text = (f"Hazard ratio {arm.hazard_ratio:.4g}{ci} of arm {e.compared!r} against {e.reference!r}: the "
                    f"strategy's hazard_ratios multiply the transition's hazard by it.")
        else:
            text = (f"{fit.label} is an accelerated-failure-time fit: the effect of arm {e.compared!r} is an "
                    f"acceleration factor {e.estimate:.4g}{ci}, S(t) = S_ref(t / AF), not a hazard ratio. The "
                    f"scenario format has no acceleration factor, so the strategy gets the own fitted {fit.label} "
                    f"hazard of arm {e.compared!r} (replacements) instead.")
        if self.covariance.isChecked() and self.covariance.isEnabled():
            text += " The covariance group holds the reference arm's parameters and the " + (
                "log hazard ratio" if arm.hazard_ratio is not None else "replacement's parameters") + " jointly."
        self.ratio_note.setText(text)
