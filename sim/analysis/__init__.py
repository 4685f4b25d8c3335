"""What a simulation's event log says: Kaplan-Meier survival, Aalen-Johansen state occupancy and
cumulative incidence, restricted means and time in state with Monte Carlo standard errors, and the
health-economic outcomes (life years, QALYs, costs, increments, ICER, net benefit) with one set of
definitions shared by simulated, exact and cycle-based results."""

from .columns import label_codes, patient_ids, time_column
from .display import column_decimals, decimals_from_mcse, format_fixed
from ._event_log import ABSORBED, CENSORED
from .aalen_johansen import cumulative_incidence, state_occupancy
from .crude import crude_rate, crude_risk
from .kaplan_meier import kaplan_meier
from .own_horizon import occupancy_to_own_horizon, survival_to_own_horizon
from .time_in_state import per_patient_time_in_states, restricted_mean_survival, time_in_states
from .curve_counts import CurveCounts, curve_counts
from .outcomes import (OUTCOMES, OutcomeAccumulator, combine_outcomes, incremental, increments_from_values,
                       outcome_names, patient_outcomes, summarise)

__all__ = ["column_decimals", "decimals_from_mcse", "format_fixed", "label_codes", "patient_ids", "time_column",
           "ABSORBED", "CENSORED", "crude_rate", "crude_risk",
           "cumulative_incidence", "kaplan_meier", "occupancy_to_own_horizon", "survival_to_own_horizon",
           "per_patient_time_in_states", "restricted_mean_survival",
           "state_occupancy", "time_in_states", "OUTCOMES", "OutcomeAccumulator", "combine_outcomes", "incremental",
           "increments_from_values", "outcome_names", "patient_outcomes", "summarise", "CurveCounts", "curve_counts"]
