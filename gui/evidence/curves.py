"""What the plots of the evidence window draw, read from ``sim``: the Kaplan-Meier estimate of each
arm (:func:`sim.analysis.kaplan_meier`, Greenwood standard errors), the numbers at risk at chosen
times, and each fit's survival, hazard and cumulative hazard from its own hazard object
(:meth:`sim.evidence.Fit.hazard`). Only array plumbing here (no estimation).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from sim.analysis import kaplan_meier
from sim.evidence import Fit, SurvivalData
from sim.hazards import make_hazard

__all__ = ["ArmKM", "km_by_arm", "at_risk_counts", "fit_hazards", "Z95"]

Z95 = 1.959963984540054  # the 97.5% standard normal quantile (scipy.stats.norm.ppf(0.975))


@dataclass(frozen=True, eq=False)
class ArmKM:
    """One arm's Kaplan-Meier step function and its pointwise 95% band (S +- 1.96 SE, in [0, 1])."""

    arm: str
    table: pd.DataFrame  # time, at_risk, events, survival, std_error

    @property
    def time(self) -> NDArray[np.float64]:
        return self.table["time"].to_numpy()

    @property
    def survival(self) -> NDArray[np.float64]:
        return self.table["survival"].to_numpy()

    def band(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        se = np.nan_to_num(self.table["std_error"].to_numpy(), nan=0.0)
        s = self.survival
        return np.clip(s - Z95 * se, 0.0, 1.0), np.clip(s + Z95 * se, 0.0, 1.0)


def _arms(data: SurvivalData) -> list[tuple[str, SurvivalData]]:
    return [(g, data.arm(g)) for g in data.groups] if data.group is not None else [("all", data)]


def km_by_arm(data: SurvivalData) -> list[ArmKM]:
    """Kaplan-Meier per arm (exit times only: the estimator of :mod:`sim.analysis` has no delayed
    entry, so with left truncation the window says the curve ignores the entry times)."""
    out = []
    for label, arm in _arms(data):
        patients = pd.DataFrame({"strategy": label, "patient": np.arange(arm.n), "exit_time": arm.time,
                                 "exit_reason": np.where(arm.event, "absorbed", "censored")})
        out.append(ArmKM(label, kaplan_meier(patients)))
    return out


def at_risk_counts(data: SurvivalData, times: NDArray[np.float64]) -> dict[str, NDArray[np.int64]]:
    """Per arm, patients at risk at each time: entered before it and not yet exited (``entry < t <= exit``,
    at 0 everyone who starts at 0)."""
    out = {}
    for label, arm in _arms(data):
        t = np.asarray(times, dtype=np.float64)[:, None]
        inside = (arm.time[None, :] >= t) & ((arm.entry[None, :] < t) | (arm.entry[None, :] == 0.0))
        out[label] = inside.sum(axis=1).astype(np.int64)
    return out


def fit_hazards(fit: Fit) -> dict[str, object]:
    """Per arm label, the fitted hazard object (the compared arm's through
    :meth:`sim.evidence.Fit.compared_parameters`; for a family that is not a scenario family the
    compared arm is built by the fit's own recipe)."""
    if fit.effect is None:
        return {"all": fit.hazard()}
    out: dict[str, object] = {fit.effect.reference: fit.hazard()}
    params = fit.compared_parameters()
    assert params is not None and fit.spec is not None
    if fit.scenario:
        out[fit.effect.compared] = make_hazard(fit.family, **params)
    else:
        values = np.array([params[n] for n in fit.spec.names], dtype=np.float64)
        out[fit.effect.compared] = fit.spec.build(values)
    return out
