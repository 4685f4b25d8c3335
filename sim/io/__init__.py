"""Files in and out: the scenario format (read, validated and written in one place), life tables from
CSV or xlsx with Gompertz fits, and exports of event logs, patient tables, the multi-state long
format and summary tables (atomic, streamed). The bundled demo scenarios live here too."""

from .atomic import AtomicWriteError, write_atomic, write_text_atomic
from .demo import DEMOS, SCENARIO_DIR, demo_model, demo_path, demo_scenario
from .export import (FORMATS, LONG_FORMAT_COLUMNS, ExportError, RunWriter, long_format, metadata_for, write_run,
                     write_table, write_tidy_csv)
from .lifetable import KINDS, NOMINAL_EXPOSURE, GompertzFit, LifeTable, LifeTableError, fit_gompertz, read_life_table
from .scenario import (FORMAT_VERSION, RunSettings, Scenario, ScenarioError, ScenarioProblems, document_from_model,
                       load_scenario, parse_duration, parse_scenario, save_scenario, scenario_text)

__all__ = ["AtomicWriteError", "write_atomic", "write_text_atomic",
           "DEMOS", "SCENARIO_DIR", "demo_model", "demo_path", "demo_scenario", "FORMATS", "LONG_FORMAT_COLUMNS",
           "ExportError", "RunWriter", "long_format", "metadata_for", "write_run", "write_table", "write_tidy_csv",
           "KINDS", "NOMINAL_EXPOSURE", "GompertzFit", "LifeTable", "LifeTableError", "fit_gompertz",
           "read_life_table", "FORMAT_VERSION", "RunSettings", "Scenario", "ScenarioError", "ScenarioProblems",
           "document_from_model", "load_scenario", "parse_duration", "parse_scenario", "save_scenario",
           "scenario_text"]
