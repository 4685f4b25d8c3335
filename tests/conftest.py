"""Test-wide setup: Qt runs headless. Set before any QApplication exists (pytest-qt creates it lazily)."""

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
