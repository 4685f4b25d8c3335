"""Limits on the size of a scenario and on values a run cannot carry out, checked when it is read.

Two kinds of rule, both documented in ``docs/scenario-format.md`` ("Limits"):

- **Size** (:func:`size_problems`, :func:`document_problems`): the file, the number of states,
  transitions and strategies, the length of texts and lists, the size of costs and utilities. Real
  models stay far below them; they keep reading and checking a file to a second or two, whatever it
  holds, and sums over patients from overflowing. They are checked on the raw document, before any
  part of it is built.
- **What a run can do** (:func:`run_problems`): each cycle length of the error study must give a
  trace of at most :data:`MAX_CYCLES` cycles over the longest follow-up, and each hazard (with its
  strategy's hazard ratio or replacement) must have a cumulative hazard over the follow-up of at
  most :data:`MAX_CUMULATIVE_HAZARD`. Beyond that a patient's expected number of events exceeds
  what a double-precision clock can separate (about one part in 4.5e15 of the clock's value),
  successive event times round to the same value, and the exact solver's generator overflows.

Every problem is a :class:`~sim.problems.Problem` at the key it concerns; long values are
summarised (:func:`summary`) so that a message never echoes megabytes.
"""

from __future__ import annotations

import math
from typing import Any, Mapping

import numpy as np

from ...hazards import Dimension
from ...model import Clock, Model, RunSettings
from ...problems import KeyPath, Problem
from .schema import Number, walk

__all__ = ["MAX_FILE_BYTES", "MAX_STATES", "MAX_TRANSITIONS", "MAX_STRATEGIES", "MAX_TEXT", "MAX_FREE_TEXT",
           "MAX_LIST", "MAX_CYCLE_LENGTHS", "MAX_CYCLES", "MAX_CUMULATIVE_HAZARD", "MAX_MONEY", "MIN_UTILITY", "summary", "size_problems",
           "document_problems", "run_problems"]

MAX_FILE_BYTES = 524_288
"""A scenario file is at most 512 KiB (the examples are 2-6 kB; a 500-state model about 60 kB); the
TOML parser reads about 100 kB a second of dense text."""
MAX_STATES = 500
MAX_TRANSITIONS = 5_000
MAX_STRATEGIES = 100
MAX_TEXT = 1_000
"""Names, labels, state references, file paths and column names: at most 1,000 characters."""
MAX_FREE_TEXT = 100_000
"""``description`` texts: at most 100,000 characters."""
MAX_LIST = 10_000
"""Lists of numbers (piecewise bands, empirical entry ages and weights): at most 10,000 entries."""
MAX_CYCLE_LENGTHS = 50
MAX_CYCLES = 20_000
"""A cycle length gives at most 20,000 cycles over the longest follow-up (daily cycles for 54 years)."""
MAX_CUMULATIVE_HAZARD = 1e15
"""Cumulative hazard of one transition over the follow-up: at most 1e15 expected events."""
MAX_MONEY = 1e12
"""Costs (per year, per move) and the willingness to pay: at most 1e12 in size, so that sums and
squares over patients and years (means, standard errors, net benefit) stay far from overflow."""
MIN_UTILITY = -100.0
"""Utilities (at most 1 already): at least -100 (states worse than death are valued above -1.1 in
published tariffs, from memory), for the same reason."""

_COUNTED = {"states": MAX_STATES, "transitions": MAX_TRANSITIONS, "strategies": MAX_STRATEGIES}
_FREE_TEXT_KEYS = frozenset({"description"})


def summary(value: Any, width: int = 40) -> Any:
    """``value`` itself when short; else a short text saying what it is (for a message)."""
    if isinstance(value, str) and len(value) > width:
        return f"{value[:width]}... ({len(value):,} characters)"
    if isinstance(value, (list, tuple)) and len(value) > 8:
        return f"a list of {len(value):,} entries"
    if isinstance(value, Mapping) and len(value) > 8:
        return f"a table of {len(value):,} keys"
    return value


def size_problems(n_bytes: int, *, more: bool = False) -> list[Problem]:
    """The file-size rule for a text of ``n_bytes`` bytes (UTF-8); ``more``: at least that many
    (reading stopped there)."""
    if n_bytes <= MAX_FILE_BYTES:
        return []
    size = f"more than {MAX_FILE_BYTES:,} bytes" if more else f"{n_bytes:,} bytes"
    return [Problem((), f"a scenario file is at most {MAX_FILE_BYTES:,} bytes (512 KiB)", size)]


def document_problems(doc: Any) -> list[Problem]:
    """The size rules on a raw (parsed, unchecked) document: counts of states, transitions and
    strategies, lengths of texts and lists, the number of cycle lengths."""
    out: list[Problem] = []
    if not isinstance(doc, Mapping):
        return out
    for key, limit in _COUNTED.items():
        items = doc.get(key)
        if isinstance(items, list) and len(items) > limit:
            out.append(Problem((key,), f"at most {limit:,} {key}", f"{len(items):,} {key}"))
    run = doc.get("run")
    cycles = run.get("cycle_lengths") if isinstance(run, Mapping) else None
    if isinstance(cycles, list) and len(cycles) > MAX_CYCLE_LENGTHS:
        out.append(Problem(("run", "cycle_lengths"), f"at most {MAX_CYCLE_LENGTHS} cycle lengths",
                           summary(cycles)))
    if out:  # counts first: a walk of an oversized document is not worth it
        return out
    _walk(doc, (), out)
    if not out:
        out += _magnitude_problems(doc)
    return out


def _magnitude_problems(doc: Mapping) -> list[Problem]:
    """Money within :data:`MAX_MONEY` and utilities from :data:`MIN_UTILITY`: the schema's
    dimensions say which numbers are which (values of other types are the reader's to report)."""
    out: list[Problem] = []
    for path, node, value in walk(doc):
        if (not isinstance(node, Number) or isinstance(value, bool) or not isinstance(value, (int, float))
                or not math.isfinite(value)):  # NaN and infinities: the reader's number rule
            continue
        if node.dimension is Dimension.MONEY and abs(value) > MAX_MONEY:
            out.append(Problem(path, f"must be between {-MAX_MONEY:g} and {MAX_MONEY:g}", value))
        elif path[:2] == ("valuation", "utilities") and value < MIN_UTILITY:
            out.append(Problem(path, f"must be >= {MIN_UTILITY:g}", value))
    return out


def _walk(value: Any, path: KeyPath, out: list[Problem]) -> None:
    if isinstance(value, str):
        free = bool(path) and path[-1] in _FREE_TEXT_KEYS
        limit = MAX_FREE_TEXT if free else MAX_TEXT
        if len(value) > limit:
            out.append(Problem(path, f"at most {limit:,} characters", summary(value)))
    elif isinstance(value, Mapping):
        for k, v in value.items():
            if isinstance(k, str) and len(k) > MAX_TEXT:
                out.append(Problem(path, f"a key has at most {MAX_TEXT:,} characters", summary(k)))
                continue
            _walk(v, (*path, k), out)
    elif isinstance(value, list):
        if len(value) > MAX_LIST and path[:1] not in (("states",), ("transitions",), ("strategies",)):
            out.append(Problem(path, f"at most {MAX_LIST:,} entries", summary(value)))
            return
        for i, v in enumerate(value):
            _walk(v, (*path, i), out)


def _follow_up(model: Model) -> float:
    """The longest follow-up in years (the youngest entrant's)."""
    return float(model.horizon.time_limit(np.array([model.population.entry_age.low]))[0])


def run_problems(model: Model, run: RunSettings) -> list[Problem]:
    """The rules on what a run can do (see the module docstring). Paths name list items by name,
    as model problems do (``("strategies", "treated", "hazard_ratios", "onset")``)."""
    follow = _follow_up(model)
    out: list[Problem] = []
    for j, h in enumerate(run.cycle_lengths):
        n = follow / h
        if not n <= MAX_CYCLES:
            out.append(Problem(("run", "cycle_lengths", j),
                               f"gives {n:.3g} cycles over the {follow:g}-year follow-up; at most {MAX_CYCLES:,} "
                               f"(a cycle of at least {follow / MAX_CYCLES:.3g} years)", h))
    out += _hazard_problems(model, follow)
    return out


def _hazard_problems(model: Model, follow: float) -> list[Problem]:
    pop = model.population.entry_age
    ages = (pop.low, pop.high + follow) if model.horizon.scale == "time" else (pop.low, model.horizon.value)
    seen: set[tuple[int, int]] = set()  # (strategy-independent) hazard objects checked once
    out: list[Problem] = []
    for strategy in model.strategy_names:
        st = model.strategy(strategy)
        for exits in model.resolve(strategy):
            for ex in exits:
                for sex, h in zip(model.population.sexes, ex.hazards):
                    if (id(h), ex.clock is Clock.AGE) in seen:
                        continue
                    seen.add((id(h), ex.clock is Clock.AGE))
                    lo, hi = ages if ex.clock is Clock.AGE else (0.0, follow)
                    with np.errstate(all="ignore"):
                        total = float(h.cumhazard(hi)) - float(h.cumhazard(lo))
                    if total <= MAX_CUMULATIVE_HAZARD:  # NaN (inf - inf) fails too
                        continue
                    out.append(Problem(_hazard_path(model, st, ex.name, ex.is_background, sex),
                                       f"the cumulative hazard over the clock's range {lo:g} to {hi:g} years must "
                                       f"be at most {MAX_CUMULATIVE_HAZARD:g} (beyond it successive event times "
                                       f"round to the same clock value)", total))
    return out


def _hazard_path(model: Model, st, name: str, background: bool, sex: str) -> KeyPath:
    if background:
        bg = model.background
        assert bg is not None
        return ("background", sex if sex in bg.hazards else "all")
    if name in st.replacements:
        return ("strategies", st.name, "replacements", name)
    if name in st.hazard_ratios:
        return ("strategies", st.name, "hazard_ratios", name)
    return ("transitions", name)

