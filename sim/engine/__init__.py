"""The continuous-time engine: individual patient histories simulated vectorised over patients, with
competing risks and inverse-cumulative-hazard sampling driven by counter-based random numbers
(Philox4x64-10 keyed on seed, patient, stream and occurrence), giving an event log and a patient
table that are identical for any chunking or number of workers. Large result columns come from
buffers the process keeps after the tables that used them are gone (:mod:`sim.engine.buffers`)."""

from . import buffers
from .histories import (CancelToken, SimulationCancelled, SimulationError, SimulationResult, cancel_requested,
                        chunk_size_for, simulate, simulate_chunks, simulate_range)
from .draws import DrawExit, DrawSet, simulate_draws
from .rng import ATTRIBUTE_STREAM, STREAM_LAYOUT, exponentials, key_from_seed, philox4x64, uniforms

__all__ = ["buffers", "CancelToken", "SimulationCancelled", "SimulationError", "SimulationResult", "cancel_requested",
           "chunk_size_for", "simulate", "simulate_chunks", "simulate_range", "DrawExit", "DrawSet", "simulate_draws",
           "ATTRIBUTE_STREAM", "STREAM_LAYOUT", "exponentials", "key_from_seed",
           "philox4x64", "uniforms"]
