"""The "±" button at the right end of a parameter's field (or Ctrl+Shift+D in the field): it opens the parameter's distribution
editor (:class:`gui.uncertainty.editor.DistributionEditor`) and shows whether the parameter has a
distribution (a blue "±"), none (a grey one) or one with a problem (vermillion); its tooltip
describes the distribution with its mean and 95% interval, as the validated scenario gives them.
"""

from __future__ import annotations

from PySide6.QtCore import QObject, QRectF, Qt
from PySide6.QtGui import QAction, QColor, QFont, QIcon, QKeySequence, QPainter, QPixmap
from PySide6.QtWidgets import QLineEdit, QToolButton

from gui.document import KeyPath, ScenarioDocument
from gui.palette import OKABE_ITO

from .density import number_text
from .entry import find_entry, is_uncertain_parameter, parameter_name, spec_for

__all__ = ["DistributionButton", "STATE_COLOURS", "SHORTCUT"]

#: Opens the distribution editor of the field that has the keyboard focus.
SHORTCUT = "Ctrl+Shift+D"

#: Colour of the "±" for: no distribution, a distribution, a distribution with a problem.
STATE_COLOURS = {"none": "#9A9A9A", "set": OKABE_ITO["blue"], "problem": OKABE_ITO["vermillion"]}
_ICONS: dict[str, QIcon] = {}


def _icon(state: str) -> QIcon:
    if state not in _ICONS:
        pix = QPixmap(32, 32)
        pix.fill(Qt.GlobalColor.transparent)
        p = QPainter(pix)
        font = QFont()
        font.setPixelSize(26)
        font.setBold(state != "none")
        p.setFont(font)
        p.setPen(QColor(STATE_COLOURS[state]))
        p.drawText(QRectF(0, 0, 32, 32), Qt.AlignmentFlag.AlignCenter, "±")
        p.end()
        _ICONS[state] = QIcon(pix)
    return _ICONS[state]


class DistributionButton(QObject):
    """The action in ``line``'s trailing position for the parameter at ``key``."""

    def __init__(self, document: ScenarioDocument, line: QLineEdit, key: KeyPath) -> None:
        super().__init__(line)
        self.document = document
        self.line = line
        self.key = tuple(key)
        self.state = "none"
        self.editor = None
        self.action = QAction(_icon("none"), "Distribution…", line)
        self.action.setObjectName(f"distribution:{parameter_name(self.key)}")
        self.action.setShortcut(QKeySequence(SHORTCUT))
        self.action.setShortcutContext(Qt.ShortcutContext.WidgetShortcut)  # this field's only
        self.action.triggered.connect(self.open_editor)
        line.addAction(self.action, QLineEdit.ActionPosition.TrailingPosition)
        document.validated.connect(self.refresh)  # after each change, with the reader's verdict
        self.refresh()

    @classmethod
    def attach(cls, document: ScenarioDocument, line: QLineEdit, key: KeyPath) -> "DistributionButton | None":
        """A button on ``line`` when ``key`` is a parameter that may carry a distribution, else None."""
        if not is_uncertain_parameter(document.data, key):
            return None
        return cls(document, line, key)

    @property
    def button(self) -> QToolButton | None:
        """The tool button Qt shows for the action (what the user clicks)."""
        return next((w for w in self.action.associatedObjects() if isinstance(w, QToolButton)), None)

    def refresh(self, *_args: object) -> None:
        """Show the parameter's current state (after every change of the document)."""
        name = parameter_name(self.key)
        index, group = find_entry(self.document.data, self.key)
        if index is None:
            self.state = "none"
            tip = (f"Give {name} a distribution for the probabilistic analysis (beside its point value, "
                   "or instead of it)")
        else:
            problems = [e for e in self.document.errors if e.concerns(("uncertainty", index))]
            spec = spec_for(self.document.scenario.uncertainty, self.key) if self.document.scenario else None
            if problems:
                self.state = "problem"
                tip = f"uncertainty[{index}]: " + "; ".join(e.text for e in problems)
            else:
                self.state = "set"
                tip = f"Distribution (uncertainty[{index}]{', a group' if group else ''})"
                if spec is not None:
                    j = spec.keys.index(name)
                    lo, hi = spec.distribution.intervals(0.95)[j]
                    tip += (f": {spec.distribution.describe()}; mean {number_text(float(spec.distribution.means()[j]))}"
                            f", 95% interval {number_text(float(lo))} to {number_text(float(hi))}")
        self.action.setIcon(_icon(self.state))
        tip += f" — {SHORTCUT} in the field"
        self.action.setToolTip(tip)
        self.action.setText(tip)

    def open_editor(self) -> None:
        """Open the distribution editor (window-modal, does not block)."""
        from .editor import DistributionEditor  # here: the editor imports gui.editors.fields, which imports this

        if self.editor is not None:
            self.editor.close()
            self.editor.deleteLater()
        self.editor = DistributionEditor(self.document, self.key, self.line.window())
        self.editor.open()
