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
