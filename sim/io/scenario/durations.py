"""Durations written as a number of years or as text such as ``"1 week"`` or ``"3 months"``."""

from __future__ import annotations

import math
import re
from typing import Any

from ...hazards import to_years

__all__ = ["parse_duration"]

_DURATION = re.compile(r"^\s*([0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*([a-z]+)\s*$")
_UNIT_ALIASES = {"day": "days", "days": "days", "week": "weeks", "weeks": "weeks", "month": "months",
                 "months": "months", "year": "years", "years": "years"}
_MAX_TEXT = 100  # longer text is no duration; the regular expression never sees it


def parse_duration(value: Any) -> float:
    """A duration in years from a number (years) or a string such as ``"1 week"`` or ``"3 months"``.

    Raises
    ------
    ValueError
        Not a number or such a string (the message is the rule), or not a positive finite duration.
    """
    if isinstance(value, bool):
        raise ValueError("must be a number of years or a string like '1 month'")
    if isinstance(value, (int, float)):
        try:
            v = float(value)
        except OverflowError:
            raise ValueError("must be a positive duration") from None
    elif isinstance(value, str):
        m = _DURATION.match(value.lower()) if len(value) <= _MAX_TEXT else None
        if not m or m.group(2) not in _UNIT_ALIASES:
            raise ValueError("must be a number of years or a string like '1 week', '3 months', '1 year'")
        v = to_years(float(m.group(1)), _UNIT_ALIASES[m.group(2)])
    else:
        raise ValueError("must be a number of years or a string like '1 month'")
    if not (math.isfinite(v) and v > 0):
        raise ValueError("must be a positive duration")
    return v
