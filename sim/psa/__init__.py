"""The probabilistic analysis: parameter draws applied to the model, the per-draw runs (simulated,
exact and cycle-based) and their tables, executed inline or on a Dask cluster (only
``sim.psa`` 's runner module imports Dask)."""

__all__: list[str] = []
