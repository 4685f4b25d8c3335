"""What outcomes are worth: utilities and costs per state, one-off transition costs, discount rates.

Conventions (METHODS.md section 4): utilities are QALY weights per year spent in a state; state costs
are per year; a transition cost is paid once at the moment of the move. Annual discount rates d for
costs and for effects are given separately and applied continuously at delta = ln(1 + d): a sojourn
from t0 to t1 accrues (exp(-delta t0) - exp(-delta t1)) / delta discounted years and a one-off cost at
time t is multiplied by exp(-delta t). Reference-case rates: 3.5%/year (NICE health technology
evaluations manual, 2022) or 3%/year (Sanders et al. 2016, JAMA 316(10):1093-1103).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping

__all__ = ["Valuation", "ValuationError"]


class ValuationError(ValueError):
    """Invalid valuation; the message names the field, the value and the rule."""


def _finite(where: str, value: float) -> float:
    if not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ValuationError(f"{where} must be a finite number, got {value!r}")
    return float(value)


@dataclass(frozen=True)
class Valuation:
    """Utilities, costs and discounting shared by every strategy; strategies may add costs.

    Parameters
    ----------
    utilities : QALY weight per year in each state (missing states count 0; at most 1).
    state_costs : cost per year in each state (missing states count 0).
    transition_costs : one-off cost per occurrence of a named transition (``"background death"``
        included).
    discount_costs, discount_effects : annual discount rates in [0, 1).
    willingness_to_pay : value of one QALY, for net monetary benefit and decisions.
    currency : label for reports.
    """

    utilities: Mapping[str, float] = field(default_factory=dict)
    state_costs: Mapping[str, float] = field(default_factory=dict)
    transition_costs: Mapping[str, float] = field(default_factory=dict)
    discount_costs: float = 0.035
    discount_effects: float = 0.035
    willingness_to_pay: float = 20_000.0
    currency: str = "EUR"

    def __post_init__(self) -> None:
        for name in ("utilities", "state_costs", "transition_costs"):
            object.__setattr__(self, name, {k: _finite(f"valuation.{name}[{k!r}]", v)
                                            for k, v in dict(getattr(self, name)).items()})
        for k, u in self.utilities.items():
            if u > 1:
                raise ValuationError(f"valuation.utilities[{k!r}] must be <= 1 (full health), got {u!r}")
        for name in ("discount_costs", "discount_effects"):
            d = getattr(self, name)
            if not (isinstance(d, (int, float)) and math.isfinite(d) and 0 <= d < 1):
                raise ValuationError(f"valuation.{name} must be an annual rate in [0, 1), got {d!r}")
        wtp = self.willingness_to_pay
        if not (isinstance(wtp, (int, float)) and math.isfinite(wtp) and wtp >= 0):
            raise ValuationError(f"valuation.willingness_to_pay must be a finite number >= 0, got {wtp!r}")
