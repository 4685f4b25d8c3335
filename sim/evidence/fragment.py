"""Fitted hazards as a scenario fragment: TOML tables in the scenario file's own keys (``family``,
``unit`` and the family's parameters, docs/scenario-format.md), written atomically
(docs/methods.md, 'Survival fits from trial evidence').

Layout::

    [chosen]                 # the fit with the lowest AIC (or BIC) among converged scenario families
    family = "weibull"
    unit = "months"
    shape = 1.37
    scale = 123.7

    [fits.weibull]           # every converged scenario family, same keys
    ...
    [fits.weibull.compared_arm]  # two arms: the compared arm's hazard in the same family
    ...
    [fits.weibull.uncertainty]   # the fit as a multivariate normal for an [[uncertainty]] table
    ...
    [fits.weibull.statistics]  # not scenario keys: log-likelihood, AIC, BIC, covariance, effect

Two arms add, for the chosen fit and for each fit, what the compared arm's strategy takes
(:func:`compared_arm`) and the compared-arm covariance group (:func:`compared_arm_group`)::

    [chosen_strategy]            # keys for the compared arm's [[strategies]] table
    hazard_ratios = { death = 0.71 }     # proportional hazards: exp(fitted log hazard ratio)
    [chosen_uncertainty]         # one [[uncertainty]] table: the reference arm's parameters and the
    parameters = [...]           # log hazard ratio, jointly, on their estimation scales
    [two_arms.weibull.strategy]      # the same for every converged scenario-family fit
    [two_arms.weibull.uncertainty]

For an accelerated-failure-time family (log-logistic, log-normal, gamma) the effect is an
acceleration factor, for which the scenario format has no key: the strategy takes the compared arm's
own fitted hazard as a ``replacements`` entry instead, and the group holds the reference arm's
parameters and the replacement's (a linear map of the reference parameters and the log acceleration
factor, so its covariance is singular). The key paths name ``transitions[<transition>]`` and
``strategies[<strategy>]`` as given to :func:`fragment_text`.

The keys of ``[chosen]`` or of a ``[fits.<family>]`` table (without ``compared_arm`` and
``statistics``) go into a ``[[transitions]]`` table (with ``name``, ``from``, ``to``, ``clock``);
``compared_arm`` holds the second arm's hazard in the same family (equivalent to the hazard ratio or
acceleration factor), e.g. for a strategy's ``replacements``. Fits of families that are not scenario
families (generalized gamma, splines) and fits that did not converge are listed under
``[not_written]`` with the reason.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import tomlkit

from ..io.atomic import write_text_atomic
from ..io.scenario import uncertainty_entry
from ..problems import ValidationError, format_key
from ..uncertainty import MultivariateNormal, UncertainInput
from .families import ACCELERATION_FACTOR, HAZARD_RATIO
from .fitting import Fit

__all__ = ["fragment_text", "write_fragment", "choose_fit", "ComparedArm", "compared_arm", "compared_arm_group",
           "COMPARED_ARM_PLACES"]

#: Where each scenario family's compared arm goes: a strategy's ``hazard_ratios`` (proportional hazards)
#: or ``replacements`` (accelerated failure time: the format has no acceleration factor).
COMPARED_ARM_PLACES = {"exponential": "hazard_ratios", "weibull": "hazard_ratios", "gompertz": "hazard_ratios",
                       "piecewise": "hazard_ratios", "loglogistic": "replacements", "lognormal": "replacements",
                       "gamma": "replacements"}
_TIME_SCALE = {"loglogistic": "scale", "gamma": "scale", "lognormal": "mu"}
"""The AFT families' time-scale parameter: ``S_1(t) = S_0(t / AF)`` moves it by ``log AF`` on its
estimation scale (log scale, or ``mu`` itself), the other parameters stay (:meth:`Fit.compared_parameters`)."""


@dataclass(frozen=True)
class ComparedArm:
    """What the compared arm of a two-arm fit puts into its strategy.

    Attributes
    ----------
    strategy : index of the ``[[strategies]]`` table.
    transition : the transition's name (the key of the strategy's table).
    kind : ``"hazard_ratio"`` or ``"acceleration_factor"`` (the fit's effect).
    hazard_ratio : ``exp(fitted log hazard ratio)`` for proportional hazards, else None.
    replacement : the compared arm's hazard keys (``family``, ``unit``, parameters) for an
        accelerated-failure-time family, else None.
    effect : the fitted hazard ratio or acceleration factor.
    note : what was written and why, in words (for comments and messages).
    """

    strategy: int
    transition: str
    kind: str
    hazard_ratio: float | None
    replacement: dict[str, Any] | None
    effect: float
    note: str

    @property
    def place(self) -> str:
        """``"hazard_ratios"`` or ``"replacements"``: the strategy key written."""
        return "hazard_ratios" if self.hazard_ratio is not None else "replacements"

    def strategy_keys(self) -> dict[str, Any]:
        """The keys of the ``[[strategies]]`` table: ``{"hazard_ratios": {transition: HR}}`` or
        ``{"replacements": {transition: {family, unit, ...}}}``."""
        value = self.hazard_ratio if self.hazard_ratio is not None else dict(self.replacement or {})
        return {self.place: {self.transition: value}}


def _two_arm_fit(fit: Fit) -> None:
    if fit.effect is None:
        raise ValidationError(("arm",), "the fit has one arm: there is no compared arm to write", fit.label)
    if not fit.scenario or fit.family not in COMPARED_ARM_PLACES:
        raise ValidationError(("family",), "is not a scenario hazard family: its compared arm cannot be written",
                              fit.label)
    if not fit.converged:
        raise ValidationError(("family",), f"did not converge ({fit.message}): nothing is written", fit.label)


def compared_arm(fit: Fit, *, transition: str, strategy: int) -> ComparedArm:
    """The compared arm of a two-arm fit as a strategy's entry for ``transition``.

    Proportional-hazards families (exponential, Weibull, Gompertz, piecewise) give the hazard ratio
    :math:`e^{\\hat\\beta}` for the strategy's ``hazard_ratios`` (the model multiplies the transition's
    hazard by it: :math:`H_1 = e^{\\beta} H_0`). Accelerated-failure-time families (log-logistic,
    log-normal, gamma) have an acceleration factor :math:`AF = e^{\\hat\\beta}`,
    :math:`S_1(t) = S_0(t / AF)`, which is not a hazard ratio and has no key in the scenario format: the
    compared arm's own fitted hazard (:meth:`Fit.hazard_keys` ``("compared")``) is the strategy's
    ``replacements`` entry instead (docs/scenario-format.md, ``[[strategies]]``).

    Raises
    ------
    ValidationError
        A one-arm fit, a fit that did not converge or a family that is not a scenario family.
    """
    _two_arm_fit(fit)
    assert fit.effect is not None
    e = fit.effect
    strategy = int(strategy)
    if strategy < 0:
        raise ValidationError(("strategy",), "must be the index of a [[strategies]] table (>= 0)", strategy)
    if e.kind == HAZARD_RATIO:
        beta = float(fit.theta[-1]) if fit.theta is not None else float(np.log(e.estimate))
        hr = float(np.exp(beta))
        note = (f"{fit.label}: hazard ratio {hr:.4g} of arm {e.compared!r} against {e.reference!r}, written as "
                f"{format_key(('strategies', strategy, 'hazard_ratios', transition))}")
        return ComparedArm(strategy, transition, e.kind, hr, None, hr, note)
    note = (f"{fit.label} is an accelerated-failure-time family: the fitted effect of arm {e.compared!r} is an "
            f"acceleration factor {e.estimate:.4g} (S_1(t) = S_0(t / AF)), not a hazard ratio; the scenario "
            f"format has no acceleration factor, so the compared arm's own fitted hazard is written as "
            f"{format_key(('strategies', strategy, 'replacements', transition))}")
    return ComparedArm(strategy, transition, ACCELERATION_FACTOR, None, fit.hazard_keys("compared"), e.estimate, note)


def compared_arm_group(fit: Fit, *, transition: int, transition_name: str, strategy: int,
                       description: str | None = None) -> dict[str, Any] | None:
    """The compared-arm covariance group: one ``multivariate_normal`` ``[[uncertainty]]`` table holding
    the reference arm's hazard parameters in ``transitions[transition]`` and the compared arm's entry
    in ``strategies[strategy]`` (:func:`compared_arm`), jointly, on their estimation scales; None
    without a covariance.

    With :math:`\\hat\\theta = (\\hat\\theta_0, \\hat\\beta)` the fit's estimates on the optimiser's
    scale (positive parameters as logarithms, :math:`\\beta` the log effect) and :math:`\\Sigma` the
    inverse observed information there:

    - proportional hazards: parameters ``transitions[i].<p>...`` and
      ``strategies[k].hazard_ratios.<transition>``, mean :math:`\\hat\\theta`, covariance
      :math:`\\Sigma`, the hazard ratio with ``transform = "log"`` (a draw is :math:`e^{\\beta}`);
    - accelerated failure time: parameters ``transitions[i].<p>...`` and
      ``strategies[k].replacements.<transition>.<p>...``, mean :math:`M\\hat\\theta` and covariance
      :math:`M \\Sigma M^T` with :math:`M = [I_p, 0;\\ I_p, a]`, :math:`a` the indicator of the time-scale
      parameter (log ``scale``, or ``mu``), which :math:`\\beta` shifts (:math:`S_1(t) = S_0(t e^{-\\beta})`);
      the matrix is singular (rank :math:`p + 1`), which the format allows (positive semi-definite).

    A normal approximation of the maximum-likelihood estimates on this scale is the usual
    probabilistic-analysis distribution of a fit (Briggs, Claxton & Sculpher 2006, ch. 4; docs/methods.md,
    'Survival fits from trial evidence').
    """
    _two_arm_fit(fit)
    if fit.theta_covariance is None or fit.theta is None or fit.spec is None:
        return None
    arm = compared_arm(fit, transition=transition_name, strategy=strategy)
    p = len(fit.spec.names)
    theta = np.asarray(fit.theta, dtype=np.float64)
    sigma = np.asarray(fit.theta_covariance, dtype=np.float64)
    transforms = list(fit.transforms())
    keys = [format_key(path) for path in fit.parameter_paths(transition)]
    if arm.hazard_ratio is not None:
        m = np.eye(p + 1)
        keys.append(format_key(("strategies", strategy, "hazard_ratios", transition_name)))
    else:
        a = np.array([[1.0 if n == _TIME_SCALE[fit.family] else 0.0] for n in fit.spec.names])
        m = np.block([[np.eye(p), np.zeros((p, 1))], [np.eye(p), a]])
        keys += [format_key(("strategies", strategy, "replacements", transition_name, n)) for n in fit.spec.names]
        transforms = transforms[:p] * 2
    mean = m @ theta
    cov = m @ sigma @ m.T
    cov = 0.5 * (cov + cov.T)
    if description is None:
        e = fit.effect
        assert e is not None
        description = (f"{fit.label} fit of arms {e.reference!r} (reference) and {e.compared!r}: maximum likelihood, "
                       f"{fit.n} patients, {fit.n_events} events; joint covariance from the observed information")
    dist = MultivariateNormal(tuple(float(v) for v in mean), tuple(tuple(float(v) for v in row) for row in cov),
                              tuple(transforms))
    return uncertainty_entry(UncertainInput(tuple(keys), dist, description=description))


def choose_fit(fits: Sequence[Fit], criterion: str = "aic") -> Fit | None:
    """The converged scenario-family fit with the lowest AIC (``criterion="aic"``) or BIC."""
    usable = [f for f in fits if f.converged and f.scenario]
    if not usable:
        return None
    return min(usable, key=lambda f: f.aic if criterion == "aic" else f.bic)


def _hazard_table(fit: Fit, arm: str = "reference") -> tomlkit.items.Table:
    table = tomlkit.table()
    for key, value in fit.hazard_keys(arm).items():
        table.add(key, value)
    return table


def _statistics(fit: Fit) -> tomlkit.items.Table:
    stats = tomlkit.table()
    stats.add(tomlkit.comment("not scenario keys: the fit's statistics"))
    stats.add("loglik", fit.loglik)
    stats.add("aic", fit.aic)
    stats.add("bic", fit.bic)
    stats.add("patients", fit.n)
    stats.add("events", fit.n_events)
    stats.add("parameters", list(fit.names))
    stats.add("estimates", [float(v) for v in fit.estimates])
    if fit.covariance is not None:
        stats.add("covariance", [[float(v) for v in row] for row in fit.covariance])
    if fit.effect is not None:
        e = fit.effect
        stats.add("reference_arm", e.reference)
        stats.add("compared_arm", e.compared)
        stats.add(e.kind, e.estimate)
        stats.add(f"{e.kind}_ci95", [e.lower, e.upper])
    return stats


def _uncertainty(fit: Fit) -> tomlkit.items.Table | None:
    """The fit's multivariate normal on its estimation scale, in the keys of a scenario
    ``[[uncertainty]]`` table; the names are relative to the transition (and ``hazard_ratio`` to the
    strategy's ``hazard_ratios`` entry), to be completed by the user."""
    if fit.theta_covariance is None:
        return None
    assert fit.spec is not None
    names = list(fit.spec.names)
    keep = list(range(len(names)))
    if fit.effect is not None and fit.effect.kind == "hazard_ratio":
        names.append("hazard_ratio")
        keep.append(len(fit.theta) - 1)
    transforms = [fit.transforms()[i] for i in keep]
    cov = fit.theta_covariance[np.ix_(keep, keep)]
    table = tomlkit.table()
    table.add(tomlkit.comment("for [[uncertainty]]: prefix each name with its key path, e.g. transitions[0].shape;"))
    table.add(tomlkit.comment("hazard_ratio is strategies[k].hazard_ratios.<transition> (the compared arm)"))
    table.add("parameters", names)
    table.add("distribution", "multivariate_normal")
    table.add("mean", [float(fit.theta[i]) for i in keep])
    table.add("covariance", [[float(v) for v in row] for row in cov])
    table.add("transform", transforms)
    return table


def _strategy_table(arm: ComparedArm) -> tomlkit.items.Table:
    table = tomlkit.table()
    table.add(tomlkit.comment(arm.note))
    inner = tomlkit.inline_table()
    if arm.hazard_ratio is not None:
        inner.append(arm.transition, arm.hazard_ratio)
    else:
        hazard = tomlkit.inline_table()
        for key, value in (arm.replacement or {}).items():
            hazard.append(key, value)
        inner.append(arm.transition, hazard)
    table.add(arm.place, inner)
    return table


def _group_table(group: dict[str, Any], arm: ComparedArm) -> tomlkit.items.Table:
    table = tomlkit.table()
    what = ("the log hazard ratio" if arm.hazard_ratio is not None else
            "the compared arm's replacement parameters (reference parameters shifted by the log acceleration factor)")
    table.add(tomlkit.comment(f"one [[uncertainty]] table: the reference arm's parameters and {what}, jointly"))
    for key, value in group.items():
        table.add(key, value)
    return table


def _two_arm_tables(fit: Fit, transition: int, transition_name: str, strategy: int
                    ) -> tuple[tomlkit.items.Table, tomlkit.items.Table | None]:
    arm = compared_arm(fit, transition=transition_name, strategy=strategy)
    group = compared_arm_group(fit, transition=transition, transition_name=transition_name, strategy=strategy)
    return _strategy_table(arm), (_group_table(group, arm) if group is not None else None)


def fragment_text(fits: Sequence[Fit], *, source: str | None = None, criterion: str = "aic", transition: int = 0,
                  transition_name: str = "death", strategy: int = 1) -> str:
    """The fragment as TOML text (module docstring). Two arms: the strategy keys and the compared-arm
    covariance group name ``transitions[transition]`` (called ``transition_name``) and
    ``strategies[strategy]``."""
    doc = tomlkit.document()
    what = f" from {source}" if source else ""
    doc.add(tomlkit.comment(f"Survival fits written by 'hazardtrace fit'{what}. Copy the keys of [chosen] or of a"))
    doc.add(tomlkit.comment("[fits.<family>] table (not its statistics) into a [[transitions]] table."))
    if fits and fits[0].effect is not None:
        e = fits[0].effect
        doc.add(tomlkit.comment(f"Two arms: the hazards are those of the reference arm {e.reference!r}; the "
                                f"compared arm {e.compared!r} is each fit's compared_arm; the effect is in its statistics."))
    chosen = choose_fit(fits, criterion)
    if chosen is not None:
        doc.add(tomlkit.comment(f"chosen: lowest {criterion.upper()} among converged scenario families"))
        doc.add("chosen", _hazard_table(chosen))
        if chosen.effect is not None:
            doc.add(tomlkit.comment(f"Two arms: [chosen_strategy] goes into [[strategies]] table {strategy} (the "
                                    f"compared arm), [chosen_uncertainty] is one [[uncertainty]] table; key paths"))
            doc.add(tomlkit.comment(f"assume the fit goes into transitions[{transition}] named {transition_name!r} "
                                    f"(hazardtrace fit --transition, --transition-index, --strategy-index)."))
            strategy_table, group_table = _two_arm_tables(chosen, transition, transition_name, strategy)
            doc.add("chosen_strategy", strategy_table)
            if group_table is not None:
                doc.add("chosen_uncertainty", group_table)
    fits_table = tomlkit.table(is_super_table=True)
    skipped = tomlkit.table()
    two_arms = tomlkit.table(is_super_table=True)
    for fit in fits:
        name = fit.label
        if fit.converged and fit.scenario:
            table = _hazard_table(fit)
            if fit.effect is not None:  # the compared arm in the same family: a strategy's replacement
                table.add("compared_arm", _hazard_table(fit, "compared"))
            uncertainty = _uncertainty(fit)
            if uncertainty is not None:
                table.add("uncertainty", uncertainty)
            if fit.effect is not None:
                strategy_table, group_table = _two_arm_tables(fit, transition, transition_name, strategy)
                arm_table = tomlkit.table()
                arm_table.add("strategy", strategy_table)
                if group_table is not None:
                    arm_table.add("uncertainty", group_table)
                two_arms.add(name, arm_table)
            table.add("statistics", _statistics(fit))
            fits_table.add(name, table)
        else:
            skipped.add(name, fit.message if not fit.converged else
                        "not a scenario hazard family (statistics only): " +
                        ", ".join(f"{n} = {v:.6g}" for n, v in zip(fit.names, fit.estimates)))
    if len(fits_table):
        doc.add("fits", fits_table)
    if len(two_arms):
        doc.add("two_arms", two_arms)
    if len(skipped):
        doc.add("not_written", skipped)
    return tomlkit.dumps(doc)


def write_fragment(path: str | Path, fits: Sequence[Fit], *, source: str | None = None, criterion: str = "aic",
                   force: bool = True, transition: int = 0, transition_name: str = "death", strategy: int = 1) -> Path:
    """Write :func:`fragment_text` to ``path`` atomically (nothing half-written on failure)."""
    return write_text_atomic(path, fragment_text(fits, source=source, criterion=criterion, transition=transition,
                                                 transition_name=transition_name, strategy=strategy), force=force)
