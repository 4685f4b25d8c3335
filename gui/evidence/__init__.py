"""The "Fit from data" window: survival fits to patient-level data or to published Kaplan-Meier
curves (``sim.evidence``), their plots and AIC/BIC table, and the chosen fit put into a transition
of the open scenario (undoable). Modules: :mod:`.window` (the window), :mod:`.source_panel` (reading
the evidence), :mod:`.families_panel` (which families), :mod:`.apply_panel` (the choices of
"Into the scenario", two arms' strategy included), :mod:`.fit_worker` (fitting off the GUI thread), :mod:`.plots` (what is drawn: Kaplan-Meier
and numbers at risk from :func:`sim.evidence.kaplan_meier_by_arm`, fits from
:meth:`sim.evidence.Fit.arm_hazards`), :mod:`.scenario_edit` (the edit of the
scenario), :mod:`.words` (errors in words).
"""

from .apply_panel import ApplyPanel
from .families_panel import FamiliesPanel
from .fit_worker import FitOutcome, FitRequest, FitWorker
from .scenario_edit import FitChoice, fit_edit
from .source_panel import Evidence, SourcePanel
from .window import EvidenceWindow

__all__ = ["EvidenceWindow", "SourcePanel", "FamiliesPanel", "ApplyPanel", "Evidence", "FitWorker", "FitRequest", "FitOutcome", "FitChoice",
           "fit_edit"]
