"""Words for the outcome and quantity names that ``sim`` uses in its tables."""

from __future__ import annotations

__all__ = ["outcome_label", "outcome_unit", "quantity_label"]

_OUTCOMES = {
    "life_years": "life years (life expectancy)",
    "life_years_discounted": "life years, discounted",
    "qalys": "QALYs",
    "qalys_discounted": "QALYs, discounted",
    "costs": "costs",
    "costs_discounted": "costs, discounted",
}


def outcome_label(name: str) -> str:
    """``qalys_discounted`` -> ``QALYs, discounted``; ``years in well`` stays as it is."""
    return _OUTCOMES.get(name, name.replace("_", " "))


def outcome_unit(name: str, currency: str) -> str:
    if name.startswith("qalys"):
        return "QALYs"
    if name.startswith("costs"):
        return currency
    return "years"


def quantity_label(name: str, currency: str, willingness_to_pay: float) -> str:
    """Words for the increments' quantities (discounted costs and QALYs, as in ``sim.analysis.outcomes``)."""
    return {
        "delta_costs": f"incremental costs, discounted ({currency})",
        "delta_effects": "incremental QALYs, discounted",
        "icer": f"ICER ({currency} per QALY)",
        "nmb": f"NMB at {willingness_to_pay:,.0f} {currency} per QALY",
    }.get(name, name.replace("_", " "))
