"""The probabilistic analysis: parameter draws applied to the model, the per-draw runs (simulated,
exact and cycle-based) and their tables, the block jobs and their inline runner. Running the jobs on
a Dask cluster (``run_psa``, ``run_jobs``, ``PsaResult``, ``SchedulerError``) is
:mod:`sim.distributed`'s, the only sub-package that imports Dask."""

from .apply import describe_uncertainty, inputs_table, model_for_draw, point_values, uncertain_parameters
from .blocks import BlockResult, PsaJob, block_draws_for, join_blocks, psa_jobs, run_block, run_inline
from .cohort_draws import CycleMethod, cycle_methods, cycle_per_draw
from .draws_run import models_for_draws, simulated_per_draw, simulated_vectorised
from .exact_draws import constant_intensities, exact_constant_draws, exact_per_draw
from .output import write_psa
from .summaries import psa_summaries, reference_method, wtp_grid_for
from .tables import DRAW_COLUMNS, EXACT, SIMULATED, cycle_label, sort_draw_table, table_hash

__all__: list[str] = [
    # parameter draws applied to the model
    "uncertain_parameters", "model_for_draw", "point_values", "describe_uncertainty", "inputs_table",
]

__all__ += [
    # the per-draw runs, their table, the block jobs and their inline runner
    "BlockResult", "PsaJob", "block_draws_for", "join_blocks", "psa_jobs", "run_block", "run_inline",
    "CycleMethod", "cycle_methods", "cycle_per_draw",
    "models_for_draws", "simulated_per_draw", "simulated_vectorised", "constant_intensities",
    "exact_constant_draws", "exact_per_draw", "write_psa", "DRAW_COLUMNS", "EXACT", "SIMULATED", "cycle_label",
    "sort_draw_table", "table_hash", "psa_summaries", "reference_method", "wtp_grid_for",
]
