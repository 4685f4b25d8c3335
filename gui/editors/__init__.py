"""Editor panels, one per section of the scenario. Each takes the :class:`~gui.document.ScenarioDocument`,
rebuilds from it on ``changed`` and writes the user's edits back as undoable commands."""

from gui.editors.background import BackgroundEditor
from gui.editors.base import EditorPanel
from gui.editors.horizon import HorizonEditor
from gui.editors.population import PopulationEditor
from gui.editors.source import SourceEditor
from gui.editors.states import StatesEditor
from gui.editors.strategies import StrategiesEditor
from gui.editors.transitions import TransitionsEditor
from gui.editors.valuation import ValuationEditor

__all__ = ["EditorPanel", "StatesEditor", "TransitionsEditor", "BackgroundEditor", "PopulationEditor",
           "StrategiesEditor", "ValuationEditor", "HorizonEditor", "SourceEditor", "PANELS"]

#: The panels in the order the window lists them.
PANELS = (StatesEditor, TransitionsEditor, BackgroundEditor, PopulationEditor, StrategiesEditor, ValuationEditor,
          HorizonEditor, SourceEditor)
