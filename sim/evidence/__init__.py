"""From survival evidence to hazards: patient-level data and reconstructed published curves, parametric
fits with censoring and delayed entry, and the fitted hazards in the scenario's own parameterisation
(docs/methods.md, 'Survival fits from trial evidence').

Modules: :mod:`.data` (reading and checking patient-level data), :mod:`.curves` (digitised curves and
numbers at risk, cleaning) and :mod:`.guyot` (the reconstruction algorithm of Guyot et al. 2012),
:mod:`.families` and :mod:`.fitting` (maximum likelihood, covariance, AIC/BIC, two-arm effects),
:mod:`.gengamma` and :mod:`.spline` (fitting-only families), :mod:`.fragment` (fits as a scenario
fragment), :mod:`.background` (where a fitted hazard falls below background mortality).
"""

from .background import BelowBackground, below_background
from .curves import CleanCurve, Reconstruction, clean_curve, read_at_risk, read_curves, reconstruct
from .data import SurvivalData, SurvivalDataError, read_survival_data
from .families import ACCELERATION_FACTOR, FAMILY_NAMES, HAZARD_RATIO, FamilySpec, family_spec
from .fitting import DECREMENT, Effect, Fit, fit_families, fit_family, fit_table
from .fragment import choose_fit, fragment_text, write_fragment
from .gengamma import GeneralizedGamma
from .guyot import GuyotResult, guyot_reconstruct
from .spline import RoystonParmar, spline_knots

__all__ = ["BelowBackground", "below_background", "CleanCurve", "Reconstruction", "clean_curve", "read_at_risk",
           "read_curves", "reconstruct", "SurvivalData", "SurvivalDataError", "read_survival_data",
           "ACCELERATION_FACTOR", "FAMILY_NAMES", "HAZARD_RATIO", "FamilySpec", "family_spec", "DECREMENT", "Effect",
           "Fit", "fit_families", "fit_family", "fit_table", "choose_fit", "fragment_text", "write_fragment",
           "GeneralizedGamma", "GuyotResult", "guyot_reconstruct", "RoystonParmar", "spline_knots"]
