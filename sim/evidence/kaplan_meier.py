"""Kaplan-Meier estimates of patient-level survival data with delayed entry (left truncation), a
pointwise confidence interval on the log(-log) scale, and numbers at risk at chosen times
(docs/methods.md, 'Survival fits from trial evidence').

:func:`sim.analysis.kaplan_meier` estimates a simulated cohort, where everybody enters at time 0;
trial data may enter the risk set late, so the risk set here is :math:`Y(t) = \\#\\{i: s_i < t \\le
t_i\\}` (entry :math:`s_i`, exit :math:`t_i`). Without delayed entry both give the same estimate and
Greenwood standard error.

References
----------
Kaplan EL, Meier P (1958). Nonparametric estimation from incomplete observations. JASA 53:457-481.
Kalbfleisch JD, Prentice RL (1980). The Statistical Analysis of Failure Time Data. Wiley, section 1.3
(the log(-log) interval; from memory).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import special

from ..model.checks import number
from .curves import SINGLE_ARM
from .data import SurvivalData, SurvivalDataError

__all__ = ["KaplanMeier", "kaplan_meier", "kaplan_meier_by_arm", "numbers_at_risk"]


@dataclass(frozen=True, eq=False)  # holds a table: compared by identity
class KaplanMeier:
    """One arm's Kaplan-Meier step function with its pointwise confidence interval.

    Attributes
    ----------
    arm : the arm label (:data:`SINGLE_ARM` for data without arms).
    table : columns ``time`` (0, then each distinct exit time), ``at_risk`` (:math:`Y(t)`), ``events``,
        ``censored``, ``survival``, ``std_error`` (Greenwood), ``lower`` and ``upper`` (the interval
        at :attr:`level`).
    level : the confidence level of ``lower`` and ``upper``.
    """

    arm: str
    table: pd.DataFrame
    level: float

    @property
    def time(self) -> NDArray[np.float64]:
        return self.table["time"].to_numpy()

    @property
    def survival(self) -> NDArray[np.float64]:
        return self.table["survival"].to_numpy()

    @property
    def lower(self) -> NDArray[np.float64]:
        return self.table["lower"].to_numpy()

    @property
    def upper(self) -> NDArray[np.float64]:
        return self.table["upper"].to_numpy()


def _level(level: float) -> float:
    return number(("level",), level, minimum=0.0, maximum=1.0, strict_min=True, strict_max=True,
                  error=SurvivalDataError)


def kaplan_meier(data: SurvivalData, level: float = 0.95, arm: str = SINGLE_ARM) -> KaplanMeier:
    """Kaplan-Meier estimate of one arm's survival with delayed entry, Greenwood standard errors and a
    log(-log) confidence interval.

    Parameters
    ----------
    data : SurvivalData
        One arm's exit times, events and entry times (all arms pooled when it has several).
    level : float
        Confidence level of the pointwise interval, in (0, 1).
    arm : str
        The label to carry.

    Returns
    -------
    KaplanMeier

    Notes
    -----
    With :math:`d_j` events among the :math:`Y_j = \\#\\{i: s_i < t_j \\le t_i\\}` at risk at the
    distinct exit times :math:`t_j` (a patient censored at :math:`t_j` is at risk there; one entering
    at :math:`t_j` is not):

    .. math::

        \\hat S(t) = \\prod_{t_j \\le t} (1 - d_j / Y_j), \\qquad
        \\sigma^2(t) = \\sum_{t_j \\le t} \\frac{d_j}{Y_j (Y_j - d_j)} \\quad \\text{(Greenwood)},

    ``std_error`` :math:`= \\hat S \\sigma` (NaN once :math:`\\hat S = 0`), and the interval of
    Kalbfleisch & Prentice (1980), a Wald interval for :math:`\\log(-\\log S)`:

    .. math:: \\hat S(t)^{\\exp(\\pm z \\sigma / \\log \\hat S)}, \\quad z = \\Phi^{-1}((1 + \\text{level}) / 2),

    inside [0, 1] by construction; (1, 1) where :math:`\\hat S = 1` and (0, 0) where
    :math:`\\hat S = 0`, as lifelines' ``KaplanMeierFitter`` reports them. At time 0 ``at_risk`` counts
    the patients who enter at 0. The first row is time 0 (with survival 1 unless nobody is at risk
    at 0 and patients exit there, which the data checks rule out for events).

    References
    ----------
    Kaplan & Meier 1958, JASA 53:457-481; Greenwood M (1926), Reports on Public Health and Medical
    Subjects 33 (from memory); Kalbfleisch & Prentice 1980, The Statistical Analysis of Failure Time
    Data, Wiley (from memory).
    """
    level = _level(level)
    t, s, d = data.time, data.entry, data.event
    times = np.unique(np.concatenate(([0.0], t)))
    exits = np.sort(t)
    entries = np.sort(s)
    # Y(t) = #{exit >= t} - #{entry >= t} (entry < exit for every patient); at 0, those entering at 0
    at_risk = (data.n - np.searchsorted(exits, times, side="left")) - (data.n - np.searchsorted(entries, times,
                                                                                                side="left"))
    at_risk[0] = int(np.count_nonzero(s == 0.0))
    idx = np.searchsorted(times, t)
    events = np.bincount(idx, weights=d.astype(np.float64), minlength=times.size).astype(np.int64)
    censored = np.bincount(idx, weights=(~d).astype(np.float64), minlength=times.size).astype(np.int64)
    survival = np.cumprod(1.0 - events / np.maximum(at_risk, 1))  # Y >= 1 at an exit: the exiting patient
    with np.errstate(divide="ignore", invalid="ignore"):
        alive = at_risk > events
        term = np.divide(events, at_risk * (at_risk - events), out=np.zeros(times.size), where=alive & (events > 0))
        var = np.cumsum(term)
        dead_end = survival == 0.0
        std_error = np.where(dead_end, np.nan, survival * np.sqrt(var))
        z = float(special.ndtri(0.5 + level / 2.0))
        log_s = np.log(survival)
        inside = (survival > 0.0) & (survival < 1.0)
        shift = np.where(inside, z * np.sqrt(var) / np.where(inside, log_s, -1.0), 0.0)
        log_cum = np.log(-np.where(inside, log_s, -1.0))
        lower = np.where(inside, np.exp(-np.exp(log_cum - shift)), survival)
        upper = np.where(inside, np.exp(-np.exp(log_cum + shift)), survival)
    table = pd.DataFrame({"time": times, "at_risk": at_risk.astype(np.int64), "events": events, "censored": censored,
                          "survival": survival, "std_error": std_error, "lower": lower, "upper": upper})
    return KaplanMeier(arm, table, level)


def _arms(data: SurvivalData) -> list[tuple[str, SurvivalData]]:
    return [(g, data.arm(g)) for g in data.groups] if data.group is not None else [(SINGLE_ARM, data)]


def kaplan_meier_by_arm(data: SurvivalData, level: float = 0.95) -> list[KaplanMeier]:
    """:func:`kaplan_meier` of each arm in sorted order (one, labelled :data:`SINGLE_ARM`, without arms)."""
    return [kaplan_meier(arm, level, label) for label, arm in _arms(data)]


def numbers_at_risk(data: SurvivalData, times: ArrayLike | Sequence[float]) -> dict[str, NDArray[np.int64]]:
    """Per arm, the patients at risk at each of ``times``: :math:`\\#\\{i: s_i < t \\le t_i\\}`, and at
    ``t = 0`` those entering at 0 (the row printed under a published Kaplan-Meier plot).

    Raises
    ------
    SurvivalDataError
        A time that is negative or not finite.
    """
    tt = np.asarray(times, dtype=np.float64).ravel()
    bad = ~np.isfinite(tt) | (tt < 0.0)
    if bad.any():
        raise SurvivalDataError(("times",), "must be finite and >= 0", float(tt[bad][0]))
    out = {}
    for label, arm in _arms(data):
        exits, entries = np.sort(arm.time), np.sort(arm.entry)
        n = (np.searchsorted(entries, tt, side="left") - np.searchsorted(exits, tt, side="left")).astype(np.int64)
        out[label] = np.where(tt == 0.0, np.count_nonzero(arm.entry == 0.0), n).astype(np.int64)
    return out
