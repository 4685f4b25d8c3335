"""HazardTrace desktop front end (PySide6 + pyqtgraph). Thin: all modelling lives in ``sim``."""
