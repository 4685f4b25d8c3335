"""Deterministic references and approximations of the same model: the exact solution of the
Kolmogorov forward equations (Markov models), the cycle-based cohort traces modellers build (rate to
probability conversions, within-cycle corrections, tunnel states), the batched matrix exponential
they use, and the discretization-error study that compares them."""

from .cohort import (CohortError, CohortTrace, Conversion, Correction, EntryAges, RateRule, TunnelEntry,
                     cohort_trace, quadrature_weights, trace_outcomes)
from .exact import (ExactSolution, NoExactSolution, StackedSolution, occupancy_for_entry, occupancy_frame,
                    population_pairs, solve_exact, solve_stacked)
from .exact_outcomes import exact_outcomes, exact_outcomes_and_occupancy, with_exact
from .matrix_exp import expm_batched
from .study import (DEFAULT_CYCLE_LENGTHS, TUNNEL_ENTRY_WORDS, StudyResult, discretization_study,
                    largest_cycle_within, observed_order, orders_of)

__all__ = ["CohortError", "CohortTrace", "Conversion", "Correction", "EntryAges", "RateRule", "TunnelEntry", "cohort_trace",
           "quadrature_weights", "trace_outcomes", "ExactSolution", "NoExactSolution", "StackedSolution",
           "occupancy_for_entry", "occupancy_frame", "population_pairs", "solve_exact", "solve_stacked",
           "exact_outcomes", "exact_outcomes_and_occupancy", "with_exact", "expm_batched",
           "DEFAULT_CYCLE_LENGTHS", "TUNNEL_ENTRY_WORDS", "StudyResult", "discretization_study", "largest_cycle_within",
           "observed_order", "orders_of"]
