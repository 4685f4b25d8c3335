"""Start the desktop window: ``hazardtrace gui [SCENARIO]``."""

from __future__ import annotations

import sys

from PySide6.QtWidgets import QApplication

__all__ = ["main"]

def main(argv: list[str] | None = None) -> int:
    """Create the application and the main window, open ``argv[0]`` if given (else an untitled copy of
    the demo), and run the event loop. Returns the exit code."""
    args = list(sys.argv[1:] if argv is None else argv)
    app = QApplication.instance() or QApplication(["hazardtrace"])
    app.setOrganizationName("HazardTrace")
    app.setApplicationName("HazardTrace")
    from gui.main_window import MainWindow  # after the application exists

    window = MainWindow()
    window.start(args[0] if args else None)
    window.show()
    return int(app.exec())


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
