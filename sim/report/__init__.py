"""Reports a reviewer can check: one self-contained HTML file (and its PDF) from a finished run or a
comparison, and the rerun that reproduces a run from its metadata.

Modules: :mod:`.inputs` (what a report shows, from a run in memory or a comparison),
:mod:`.run_folder` (the same from a run folder), :mod:`.document` (the HTML), :mod:`.pdf`,
:mod:`.plots` (curves as SVG, matplotlib's SVG backend), :mod:`.diagram` (the model as SVG),
:mod:`.tables` and :mod:`.numbers` (what the tables show), :mod:`.describe` (the model in words),
:mod:`.cautions`, :mod:`.rerun`, :mod:`.writing` (one call to write HTML or PDF); the uncertainty
section of a probabilistic analysis: :mod:`.psa_folder` (its folder read back), :mod:`.uncertainty`
(the section), :mod:`.psa_tables` and :mod:`.psa_plots`.
"""

from .cautions import CAUTION
from .describe import CLOCK_WORDS, describe, describe_lines
from .diagram import model_svg
from .document import default_traces, report_html, uncertainty_section
from .inputs import ReportInputs, inputs_from_results, inputs_from_study
from .numbers import formatted_frame, significant
from .pdf import pdf_bytes
from .psa_folder import PSA_TABLES, folder_kind, inputs_from_psa, load_psa_folder, read_inputs_csv
from .plots import METHOD_COLOURS, TraceRequest, cycle_words, method_style, method_words
from .rerun import RerunResult, rerun
from .run_folder import load_run_folder, metadata_path, read_metadata, scenario_of
from .tables import outcome_table
from .writing import write_report

__all__ = ["CAUTION", "CLOCK_WORDS", "describe", "describe_lines", "model_svg", "default_traces", "report_html",
           "uncertainty_section", "ReportInputs", "inputs_from_results", "inputs_from_study", "formatted_frame",
           "significant", "pdf_bytes", "TraceRequest", "cycle_words", "RerunResult", "rerun", "load_run_folder",
           "metadata_path", "read_metadata", "scenario_of", "outcome_table", "write_report", "PSA_TABLES",
           "folder_kind", "load_psa_folder", "inputs_from_psa", "read_inputs_csv", "METHOD_COLOURS", "method_style",
           "method_words"]
