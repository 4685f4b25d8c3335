"""HazardTrace numerical core: hazards, multi-state models, continuous-time simulation,
exact solutions and estimators. Never imports Qt (checked by import-linter)."""

__version__ = "0.1.0"
