"""One run of a scenario from start to finish (simulate, outcomes, exact solution, estimates, error
study), shared by the command line and the desktop window."""

from .run import RunResults, run_scenario, time_grid

__all__ = ["RunResults", "run_scenario", "time_grid"]
