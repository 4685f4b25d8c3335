"""Issue 12 item 12: the diagram's legend names background death only in models that have it."""

from __future__ import annotations

import re

from PySide6.QtCore import QSettings

from gui.diagram import ModelDiagram
from gui.document import ScenarioDocument
from sim.io.demo import demo_path


def _without_background(text: str) -> str:
    """The demo's text with its [background...] tables removed (up to the next top-level table)."""
    return re.sub(r"(?ms)^\[background[^\n]*\n.*?(?=^\[(?!background)|\Z)", "", text)


def test_legend_lists_background_death_only_when_the_model_has_it(qtbot, tmp_path):
    settings = QSettings(str(tmp_path / "settings.ini"), QSettings.Format.IniFormat)
    doc = ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=0)
    doc.new_from_demo("lanthic")
    diagram = ModelDiagram(doc)
    qtbot.addWidget(diagram)
    assert any(label.startswith("background death") for label in diagram.legend_labels())
    assert any(e.background for e in diagram.edges)
    text = _without_background(demo_path("lanthic").read_text(encoding="utf-8"))
    assert "[background" not in text
    doc.load_text(text)
    assert not any(e.background for e in diagram.edges)
    assert diagram.legend_labels() == ["transition", "absorbing state"]
