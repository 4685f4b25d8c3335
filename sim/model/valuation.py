"""What outcomes are worth: utilities and costs per state, one-off transition costs, discount rates.

Conventions (docs/methods.md, 'Outcomes and increments'): utilities are QALY weights per year spent in a state; state
costs are per year; a transition cost is paid once at the moment of the move. Annual discount rates d for
costs and for effects are given separately and applied continuously at delta = ln(1 + d): a sojourn
from t0 to t1 accrues (exp(-delta t0) - exp(-delta t1)) / delta discounted years and a one-off cost at
time t is multiplied by exp(-delta t). Reference-case rates: 3.5%/year (NICE health technology
evaluations manual, 2022) or 3%/year (Sanders et al. 2016, JAMA 316(10):1093-1103).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping, Sequence

from .checks import Problems, number, number_map, string
from .errors import ValuationError
from .frozen import FrozenMap

__all__ = ["Valuation", "ValuationError"]

# a discount rate of 1 (100% a year) or more makes no sense as an annual rate
_MAX_DISCOUNT = 1.0


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

    The three tables are kept as read-only :class:`~sim.model.FrozenMap` of floats; every number is
    checked by :func:`sim.model.checks.number` and every problem is reported (problems under
    ``("valuation", key, ...)``).
    """

    utilities: Mapping[str, float] = field(default_factory=FrozenMap)
    state_costs: Mapping[str, float] = field(default_factory=FrozenMap)
    transition_costs: Mapping[str, float] = field(default_factory=FrozenMap)
    discount_costs: float = 0.035
    discount_effects: float = 0.035
    willingness_to_pay: float = 20_000.0
    currency: str = "EUR"

    def __post_init__(self) -> None:
        found = Problems()
        p = "valuation"
        tables = {
            "utilities": found.check(number_map, (p, "utilities"), self.utilities, maximum=1.0, error=ValuationError),
            "state_costs": found.check(number_map, (p, "state_costs"), self.state_costs, error=ValuationError),
            "transition_costs": found.check(number_map, (p, "transition_costs"), self.transition_costs,
                                            error=ValuationError),
        }
        rates = {name: found.check(number, (p, name), getattr(self, name), minimum=0.0, maximum=_MAX_DISCOUNT,
                                   strict_max=True, error=ValuationError)
                 for name in ("discount_costs", "discount_effects")}
        wtp = found.check(number, (p, "willingness_to_pay"), self.willingness_to_pay, minimum=0.0,
                          error=ValuationError)
        currency = found.check(string, (p, "currency"), self.currency, error=ValuationError)
        found.raise_if_any(ValuationError)
        for name, table in tables.items():
            object.__setattr__(self, name, FrozenMap(table))
        for name, rate in rates.items():
            object.__setattr__(self, name, rate)
        object.__setattr__(self, "willingness_to_pay", wtp)
        object.__setattr__(self, "currency", currency)

    def utility_row(self, states: Sequence[str]) -> list[float]:
        """QALY weight per year of each of ``states`` (0 where none is given)."""
        return [self.utilities.get(s, 0.0) for s in states]

    def state_cost_row(self, states: Sequence[str], added: Mapping[str, float]) -> list[float]:
        """Cost per year of each of ``states``: the valuation's plus ``added`` (a strategy's own)."""
        return [self.state_costs.get(s, 0.0) + added.get(s, 0.0) for s in states]

    def exit_cost_row(self, exits: Sequence[str], added: Mapping[str, float]) -> list[float]:
        """One-off cost of each of ``exits``: the valuation's plus ``added`` (a strategy's own)."""
        return [self.transition_costs.get(e, 0.0) + added.get(e, 0.0) for e in exits]
