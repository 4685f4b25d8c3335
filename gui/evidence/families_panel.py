"""Which families to fit: a check box per family of :data:`sim.evidence.FAMILY_NAMES`, the piecewise
break points and the spline knots, read into a :class:`~gui.evidence.fit_worker.FitRequest` (a
setting that cannot be read is refused with its name, value and rule)."""

from __future__ import annotations

from PySide6.QtWidgets import QCheckBox, QGridLayout, QLabel, QLineEdit, QWidget

from sim.evidence import FAMILY_NAMES
from sim.problems import ValidationError

from .fit_worker import FitRequest

__all__ = ["FamiliesPanel", "DEFAULT_FAMILIES", "FAMILY_LABELS"]

#: Checked at first: the families ``hazardtrace fit`` fits by default.
DEFAULT_FAMILIES = ("exponential", "weibull", "gompertz", "loglogistic", "lognormal", "gamma", "gengamma")
FAMILY_LABELS = {"loglogistic": "log-logistic", "lognormal": "log-normal", "gengamma": "generalized gamma",
                 "piecewise": "piecewise constant", "spline": "Royston-Parmar spline"}


class FamiliesPanel(QWidget):
    """Check boxes (``checks``), ``breaks`` and ``knots``; :meth:`request` reads them. The grid's
    last row is left for the caller's buttons (:attr:`grid`, :attr:`next_row`)."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.grid = QGridLayout(self)
        self.grid.setContentsMargins(0, 0, 0, 0)
        self.checks: dict[str, QCheckBox] = {}
        for i, name in enumerate(FAMILY_NAMES):
            box = QCheckBox(FAMILY_LABELS.get(name, name))
            box.setChecked(name in DEFAULT_FAMILIES)
            self.grid.addWidget(box, i // 3, i % 3)
            self.checks[name] = box
        self.breaks = QLineEdit()
        self.breaks.setPlaceholderText("band starts, e.g. 0, 6, 12")
        self.breaks.setToolTip("Piecewise constant: the start of each band, in the data's time unit")
        self.knots = QLineEdit("1")
        self.knots.setToolTip("Royston-Parmar splines: numbers of interior knots (1 to 3), e.g. 1, 2")
        row = (len(FAMILY_NAMES) + 2) // 3
        self.grid.addWidget(QLabel("Breaks"), row, 0)
        self.grid.addWidget(self.breaks, row, 1, 1, 2)
        self.grid.addWidget(QLabel("Spline knots"), row + 1, 0)
        self.grid.addWidget(self.knots, row + 1, 1, 1, 2)
        self.next_row = row + 2

    def request(self) -> FitRequest:
        """The families, breaks and knots chosen.

        Raises
        ------
        ValidationError
            No family; breaks that are not numbers, or none for the piecewise family; knots other
            than 1, 2 or 3.
        """
        families = tuple(n for n, box in self.checks.items() if box.isChecked())
        if not families:
            raise ValidationError(("families",), "choose at least one family")
        breaks = None
        if "piecewise" in families:
            try:
                breaks = tuple(float(v) for v in self.breaks.text().replace(";", ",").split(",") if v.strip())
            except ValueError:
                raise ValidationError(("breaks",), "must be numbers separated by commas", self.breaks.text()) from None
            if not breaks:
                raise ValidationError(("breaks",), "are required for the piecewise family (band starts, e.g. 0, 6, 12)")
        knots: tuple[int, ...] = (1,)
        if "spline" in families:
            try:
                knots = tuple(int(v) for v in self.knots.text().split(",") if v.strip()) or (1,)
            except ValueError:
                knots = (0,)
            if any(k not in (1, 2, 3) for k in knots):
                raise ValidationError(("knots",), "must be 1, 2 or 3 interior knots", self.knots.text())
        return FitRequest(families, breaks, knots)
