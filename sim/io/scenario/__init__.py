"""Scenario files: a commented TOML format of this project's own design, declared once and read,
validated and written from that declaration.

A scenario holds a model (states, transitions, background mortality, population, horizon,
strategies, valuation) and the run settings (patients, seed, threads, cycle lengths to compare).
See ``docs/scenario-format.md`` for every key with its meaning and unit, and ``scenarios/`` for
examples.

Modules: :mod:`.schema` (the format: every key with its type, default, range, dimension and the
names it refers to), :mod:`.reader` (text to a validated :class:`Scenario`, every problem reported
as data), :mod:`.writer` (a model to a document and text; atomic saving), :mod:`.rename` (renaming a
state or transition with its references), :mod:`.parameters` (every numeric parameter with its
dimension), :mod:`.errors` (:class:`ScenarioError`), :mod:`.positions` (key lines of a text),
:mod:`.durations`, :mod:`.uncertain` (the ``[[uncertainty]]`` section), :mod:`.substitute` (a
model with other parameter values, for the probabilistic analysis).

Reading keeps the document (``tomlkit``, which preserves comments and order) so that an edited
scenario can be written back without losing what the user typed. Unknown keys are errors, never
ignored.
"""

from ...model import RunSettings
from .durations import parse_duration
from .errors import ScenarioError, ScenarioProblems, problem_text
from .parameters import Parameter, parameters
from .reader import Scenario, load_scenario, parse_scenario
from .rename import RENAMEABLE, rename
from .schema import FORMAT_VERSION, SCHEMA, TIME_UNITS, Ref, declared_keys, references
from .uncertain import distribution_of, parse_key
from .writer import document_from_model, save_scenario, scenario_text, uncertainty_entry

__all__ = ["FORMAT_VERSION", "Scenario", "RunSettings", "ScenarioError", "ScenarioProblems", "load_scenario",
           "parse_scenario", "scenario_text", "save_scenario", "document_from_model", "parse_duration",
           "problem_text", "Parameter", "parameters", "RENAMEABLE", "rename", "SCHEMA", "TIME_UNITS", "Ref",
           "declared_keys", "references", "parse_key", "distribution_of", "uncertainty_entry"]
