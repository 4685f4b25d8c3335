"""Running HazardTrace on Dask: the only sub-package that imports Dask (import-linter contract in
pyproject.toml), and only inside its functions.

- :mod:`.cluster`: a loopback ``LocalCluster`` or an existing scheduler (``tcp://host:port``),
  :class:`SchedulerError`, futures as they complete with cancel.
- :mod:`.psa`: the probabilistic analysis' block jobs on a cluster (:func:`run_psa`, :func:`run_jobs`).
- :mod:`.run`: a plain run written as partitioned Parquet (:func:`run_distributed`), read back
  whole (:func:`read_partitioned`) or a partition at a time (:func:`partition_paths`).
"""

from .cluster import SchedulerError, connect
from .psa import PsaResult, run_jobs, run_psa
from .run import PARTITIONED_FORMAT, partition_paths, read_partitioned, run_distributed

__all__ = ["SchedulerError", "connect", "PsaResult", "run_jobs", "run_psa", "PARTITIONED_FORMAT", "read_partitioned",
           "run_distributed", "partition_paths"]
