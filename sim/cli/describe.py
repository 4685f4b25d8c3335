"""The model in words, for ``hazardtrace check`` (written in :mod:`sim.report.describe`, which the
report shares), followed by the uncertain inputs of its ``[[uncertainty]]`` section, if any
(:func:`sim.psa.describe_uncertainty`)."""

from __future__ import annotations

from ..io import Scenario
from ..psa.apply import describe_uncertainty
from ..report import describe as describe_model

__all__ = ["describe"]


def describe(scenario: Scenario) -> str:
    """The model in words, then each uncertain input (distribution, fitted parameters, mean, 95%
    interval, point value); without ``[[uncertainty]]`` exactly the model's description."""
    extra = describe_uncertainty(scenario)
    text = describe_model(scenario)
    return text + "\n" + "\n".join(extra) if extra else text
