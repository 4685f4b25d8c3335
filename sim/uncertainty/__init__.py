"""Parameter uncertainty as data: distributions for uncertain inputs (fitted from a mean and standard
error by the method of moments) and the value-of-information statistics computed from per-draw net
benefits. Pure numpy/scipy/pandas; knows nothing of the model (``sim.psa`` applies draws to it)."""

__all__: list[str] = []
