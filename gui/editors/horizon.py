"""Horizon (end of follow-up) and the run settings stored in the scenario file."""

from __future__ import annotations

from PySide6.QtWidgets import QFormLayout, QGroupBox, QLabel, QVBoxLayout, QWidget

from gui.editors.base import EditorPanel

__all__ = ["HorizonEditor"]


class HorizonEditor(EditorPanel):
    """The ``[horizon]`` and ``[run]`` tables."""

    title = "Horizon and run settings"
    sections = ("horizon", "run")

    def _build(self, body: QWidget) -> None:
        f = self.fields
        layout = QVBoxLayout(body)
        hz = QGroupBox("Horizon")
        form = QFormLayout(hz)
        form.addRow("Follow up to", f.line(("horizon", "value"), help="Years since entry, or an attained age."))
        form.addRow("Measured as", f.combo(("horizon", "scale"), [("time", "years since entry"),
                                                                  ("age", "attained age")], default="time"))
        layout.addWidget(hz)
        run = QGroupBox("Run settings saved with the scenario")
        form = QFormLayout(run)
        form.addRow("Patients per strategy", f.line(("run", "patients"), placeholder="100000"))
        form.addRow("Seed", f.line(("run", "seed"), placeholder="1", help="Same seed, same results."))
        form.addRow("Threads", f.line(("run", "workers"), placeholder="2"))
        form.addRow("Cycle lengths to compare", f.line(
            ("run", "cycle_lengths"), kind="list", placeholder="1 week, 1 month, 3 months, 1 year",
            help="Comma separated: durations like '1 month' or numbers of years."))
        form.addRow("Tolerance", f.line(("run", "tolerance"), placeholder="0.01",
                                        help="Largest acceptable relative error in the cycle-length study."))
        note = QLabel("The run panel starts from these values; changing patients, seed or threads there "
                      "affects the next run only.")
        note.setWordWrap(True)
        form.addRow(note)
        layout.addWidget(run)
