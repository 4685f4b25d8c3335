"""The About box: what HazardTrace is, its version and the cautions from the README."""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QDialog, QDialogButtonBox, QLabel, QVBoxLayout, QWidget

import sim

__all__ = ["AboutDialog", "about_text", "CAUTIONS"]

CAUTIONS = (
    "HazardTrace is a modelling aid. It is not for clinical decisions about individual patients.",
    "Its results are only as good as the model structure and the inputs you give it.",
    "Follow your local HTA guidance, and have models and results reviewed by qualified people.",
    "The demo model describes an invented disease with invented numbers.",
)


def about_text() -> str:
    """Rich text of the About box."""
    cautions = "".join(f"<li>{c}</li>" for c in CAUTIONS)
    return (f"<h3>HazardTrace {sim.__version__}</h3>"
            "<p>Define a multi-state patient model once, simulate patient histories in continuous time, "
            "solve it exactly and compare cycle-based approximations.</p>"
            f"<p><b>Cautions</b></p><ul>{cautions}</ul>"
            "<p>MIT licence.</p>")


class AboutDialog(QDialog):
    """Version and cautions; closes with OK."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("About HazardTrace")
        self.label = QLabel(about_text())
        self.label.setWordWrap(True)
        self.label.setTextFormat(Qt.TextFormat.RichText)
        self.label.setMinimumWidth(420)
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok)
        buttons.accepted.connect(self.accept)
        layout = QVBoxLayout(self)
        layout.addWidget(self.label)
        layout.addWidget(buttons)
