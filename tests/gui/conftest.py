"""Shared fixtures for the Qt tests."""

import gc

import pytest
from PySide6.QtCore import QEvent


@pytest.fixture(autouse=True)
def _collect_in_the_gui_thread(qapp):
    """Delete this test's widgets and collect its garbage here, in the GUI thread: a later garbage
    collection inside some worker thread must never be the one that destroys Qt objects."""
    yield
    qapp.sendPostedEvents(None, QEvent.Type.DeferredDelete)
    gc.collect()


@pytest.fixture
def isolated_document(tmp_path):
    """A factory of scenario documents whose settings and recovery files live in ``tmp_path`` (never
    the user's): ``isolated_document(path)`` opens ``path`` and checks it is a valid scenario;
    ``isolated_document()`` opens nothing."""
    from PySide6.QtCore import QSettings

    from gui.document import ScenarioDocument

    def make(path=None) -> ScenarioDocument:
        settings = QSettings(str(tmp_path / "settings.ini"), QSettings.Format.IniFormat)
        doc = ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=0)
        if path is not None:
            doc.open(path)
            assert doc.scenario is not None, doc.errors
        return doc

    return make


@pytest.fixture
def shown(qtbot):
    """``shown(widget)``: the widget, owned by qtbot (closed after the test), shown and exposed."""
    def show(widget):
        qtbot.addWidget(widget)
        widget.show()
        qtbot.waitExposed(widget)
        return widget

    return show


@pytest.fixture
def main_window(qtbot, isolated_document):
    """``main_window(path, size=None)``: the main window started on the scenario at ``path``, shown
    (resized to ``size`` if given). After the test its probabilistic analysis is stopped and it closes
    without asking about unsaved edits."""
    from gui.main_window import MainWindow

    made = []

    def make(path, size=None):
        w = MainWindow(isolated_document())
        made.append(w)
        w.start(path)
        if size is not None:
            w.resize(*size)
        w.show()
        qtbot.waitExposed(w)
        return w

    yield make
    for w in made:
        w.psa_page.shutdown()
        w.document.undo_stack.setClean()
        w.close()
        w.deleteLater()


@pytest.fixture
def screenshots(tmp_path):
    """The folder for the tests' screenshots: ``$HAZARDTRACE_SCREENSHOTS`` (to look at them) or
    ``tmp_path``."""
    import os
    from pathlib import Path

    folder = Path(os.environ.get("HAZARDTRACE_SCREENSHOTS", tmp_path))
    folder.mkdir(parents=True, exist_ok=True)
    return folder


@pytest.fixture
def set_spin(qtbot):
    """``set_spin(spin, value)``: type a value into a spin box as a user would, then leave it."""
    from PySide6.QtCore import Qt

    def type_value(spin, value: int) -> None:
        spin.setFocus()
        spin.selectAll()
        qtbot.keyClicks(spin, str(value))
        qtbot.keyClick(spin, Qt.Key.Key_Tab)
        assert spin.value() == value

    return type_value
