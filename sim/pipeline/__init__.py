"""One run of a scenario from start to finish, shared by the command line, the desktop window and
(next) the uncertainty analysis: staged (simulate -> outcomes -> exact -> estimates -> study), with
pluggable sinks for the simulated chunks (kept in memory, streamed to disk) and a pluggable executor
for computing them (threads now; processes or a cluster implement the same protocol).

Modules: :mod:`.run` (``run_scenario``), :mod:`.stages`, :mod:`.sinks`, :mod:`.executors`,
:mod:`.chunks` (the pure chunk function), :mod:`.assembly` (joining chunks), :mod:`.plan` (resolved
settings), :mod:`.results` (``RunResults``).
"""

from .assembly import StrategyMajorJoin
from .chunks import ChunkJob, ChunkTables, chunk_jobs, simulate_chunk
from .executors import Executor, SerialExecutor, ThreadExecutor, executor_for
from .plan import RunPlan
from .results import RunResults, horizon_range, time_grid
from .run import run_plan, run_scenario
from .sinks import ChunkSink, MemorySink, StreamSink
from .stages import STAGES, Progress, RunState, Stage, failure_text, run_stages

__all__ = ["StrategyMajorJoin", "ChunkJob", "ChunkTables", "chunk_jobs", "simulate_chunk", "Executor",
           "SerialExecutor", "ThreadExecutor", "executor_for", "RunPlan", "RunResults", "horizon_range", "time_grid", "run_plan",
           "run_scenario", "ChunkSink", "MemorySink", "StreamSink", "STAGES", "Progress", "RunState", "Stage",
           "run_stages", "failure_text"]
