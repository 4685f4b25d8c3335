"""The probabilistic analysis: parameter draws applied to the model, the per-draw runs (simulated,
exact and cycle-based) and their tables, executed inline or on a Dask cluster (only
``sim.psa`` 's runner module imports Dask)."""

from .apply import model_for_draw, point_values, uncertain_parameters

__all__: list[str] = [
    # parameter draws applied to the model
    "uncertain_parameters", "model_for_draw", "point_values",
]
