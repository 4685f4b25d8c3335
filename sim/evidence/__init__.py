"""From survival evidence to hazards: patient-level data and reconstructed published curves, parametric
fits with censoring and delayed entry, and the fitted hazards in the scenario's own parameterisation
(docs/methods.md, 'Survival fits from trial evidence').

Modules: :mod:`.data` (reading and checking patient-level data, a file's columns and worksheets),
:mod:`.kaplan_meier` (Kaplan-Meier with delayed entry, its interval, numbers at risk), :mod:`.curves`
(digitised curves and numbers at risk, cleaning, reported total events) and :mod:`.guyot` (the
reconstruction algorithm of Guyot et al. 2012),
:mod:`.arms` (the reference arm), :mod:`.families` and :mod:`.fitting` (maximum likelihood,
covariance, AIC/BIC, two-arm effects),
:mod:`.gengamma` and :mod:`.spline` (fitting-only families), :mod:`.fragment` (fits as a scenario
fragment), :mod:`.background` (background mortality on a fit's clock; where a fitted hazard falls below it).
"""

from .arms import reference_first
from .background import (BackgroundOnFitClock, BelowBackground, background_on_fit_clock, below_background,
                         follow_up_years)
from .curves import (SINGLE_ARM, CleanCurve, Reconstruction, clean_curve, parse_total_events, read_at_risk, read_curves,
                     reconstruct)
from .data import SurvivalData, SurvivalDataError, file_columns, file_sheets, read_survival_data
from .families import ACCELERATION_FACTOR, FAMILY_NAMES, HAZARD_RATIO, FamilySpec, family_spec
from .fitting import DECREMENT, Effect, Fit, fit_families, fit_family, fit_table
from .fragment import (COMPARED_ARM_PLACES, ComparedArm, choose_fit, compared_arm, compared_arm_group,
                       fragment_text, write_fragment)
from .gengamma import GeneralizedGamma
from .guyot import GuyotResult, guyot_reconstruct
from .kaplan_meier import KaplanMeier, kaplan_meier, kaplan_meier_by_arm, numbers_at_risk
from .spline import RoystonParmar, spline_knots

__all__ = ["reference_first", "BelowBackground", "below_background", "BackgroundOnFitClock", "background_on_fit_clock",
           "follow_up_years", "CleanCurve", "Reconstruction", "clean_curve", "read_at_risk",
           "read_curves", "reconstruct", "parse_total_events", "SINGLE_ARM", "SurvivalData", "SurvivalDataError",
           "read_survival_data", "file_columns", "file_sheets", "KaplanMeier", "kaplan_meier", "kaplan_meier_by_arm",
           "numbers_at_risk",
           "ACCELERATION_FACTOR", "FAMILY_NAMES", "HAZARD_RATIO", "FamilySpec", "family_spec", "DECREMENT", "Effect",
           "Fit", "fit_families", "fit_family", "fit_table", "choose_fit", "fragment_text", "write_fragment",
           "ComparedArm", "compared_arm", "compared_arm_group", "COMPARED_ARM_PLACES",
           "GeneralizedGamma", "GuyotResult", "guyot_reconstruct", "RoystonParmar", "spline_knots"]
