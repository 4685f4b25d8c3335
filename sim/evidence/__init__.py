"""From survival evidence to hazards: patient-level data and reconstructed published curves, parametric
fits with censoring and delayed entry, and the fitted hazards in the scenario's own parameterisation."""

__all__: list[str] = []
