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

The keys of ``[chosen]`` or of a ``[fits.<family>]`` table (without ``compared_arm`` and
``statistics``) go into a ``[[transitions]]`` table (with ``name``, ``from``, ``to``, ``clock``);
``compared_arm`` holds the second arm's hazard in the same family (equivalent to the hazard ratio or
acceleration factor), e.g. for a strategy's ``replacements``. Fits of families that are not scenario
families (generalized gamma, splines) and fits that did not converge are listed under
``[not_written]`` with the reason.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np
import tomlkit

from ..io.atomic import write_text_atomic
from .fitting import Fit

__all__ = ["fragment_text", "write_fragment", "choose_fit"]


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


def fragment_text(fits: Sequence[Fit], *, source: str | None = None, criterion: str = "aic") -> str:
    """The fragment as TOML text (module docstring)."""
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
    fits_table = tomlkit.table(is_super_table=True)
    skipped = tomlkit.table()
    for fit in fits:
        name = fit.label
        if fit.converged and fit.scenario:
            table = _hazard_table(fit)
            if fit.effect is not None:  # the compared arm in the same family: a strategy's replacement
                table.add("compared_arm", _hazard_table(fit, "compared"))
            uncertainty = _uncertainty(fit)
            if uncertainty is not None:
                table.add("uncertainty", uncertainty)
            table.add("statistics", _statistics(fit))
            fits_table.add(name, table)
        else:
            skipped.add(name, fit.message if not fit.converged else
                        "not a scenario hazard family (statistics only): " +
                        ", ".join(f"{n} = {v:.6g}" for n, v in zip(fit.names, fit.estimates)))
    if len(fits_table):
        doc.add("fits", fits_table)
    if len(skipped):
        doc.add("not_written", skipped)
    return tomlkit.dumps(doc)


def write_fragment(path: str | Path, fits: Sequence[Fit], *, source: str | None = None, criterion: str = "aic",
                   force: bool = True) -> Path:
    """Write :func:`fragment_text` to ``path`` atomically (nothing half-written on failure)."""
    return write_text_atomic(path, fragment_text(fits, source=source, criterion=criterion), force=force)
