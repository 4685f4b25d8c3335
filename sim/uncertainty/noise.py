"""How much of the spread of a simulated PSA is patient-level Monte Carlo noise, and how many patients
per draw would bring it to a target share (docs/methods.md, 'Patient-level noise in a simulated PSA').
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from sim.problems import Problem, ValidationError
from sim.uncertainty._tables import COSTS, EFFECTS, draw_arrays

__all__ = ["incremental_draws", "noise_share", "patients_for_noise_share"]


def incremental_draws(per_draw: pd.DataFrame, comparator: str,
                      outcomes: Sequence[str] = (COSTS, EFFECTS), *, patients: str = "patients") -> pd.DataFrame:
    """Per-draw increments of simulated outcomes against ``comparator``, with their MCSE.

    Parameters
    ----------
    per_draw : per-draw table of a simulated method with, for each outcome, ``<outcome>_mcse`` and
        the number of patients per draw in ``patients``. If it also has ``<outcome>_mcse_paired``
        (the MCSE of the strategy's increment over the comparator from per-patient differences,
        common random numbers), that is used.
    comparator : the strategy subtracted.
    outcomes : outcome columns.

    Returns
    -------
    pandas.DataFrame
        One row per draw and strategy other than the comparator: ``draw``, ``strategy``,
        ``comparator``, each outcome's increment (same column name), ``<outcome>_mcse``,
        ``patients`` (the strategy's) and ``mcse_kind`` (``"paired"`` or ``"unpaired"``).

    Notes
    -----
    Without paired standard errors the increment's MCSE is ``sqrt(se_d² + se_0²)``, the value for
    independent patients; with common random numbers the true one is smaller (Stout & Goldie 2008,
    Health Care Manag Sci 11:399-406), so the noise share computed from it is an upper bound.
    """
    paired = all(f"{o}_mcse_paired" in per_draw.columns for o in outcomes)
    extra = [f"{o}_mcse" for o in outcomes] + ([f"{o}_mcse_paired" for o in outcomes] if paired else [])
    arrays = draw_arrays(per_draw, [*outcomes, *extra, patients])
    base = arrays.index_of(comparator)
    parts = []
    for j, strategy in enumerate(arrays.strategies):
        if j == base:
            continue
        part = {"draw": arrays.draws, "strategy": strategy, "comparator": comparator}
        for o in outcomes:
            part[o] = arrays.values[o][:, j] - arrays.values[o][:, base]
            if paired:
                part[f"{o}_mcse"] = arrays.values[f"{o}_mcse_paired"][:, j]
            else:
                part[f"{o}_mcse"] = np.hypot(arrays.values[f"{o}_mcse"][:, j], arrays.values[f"{o}_mcse"][:, base])
        part["patients"] = arrays.values[patients][:, j]
        part["mcse_kind"] = "paired" if paired else "unpaired"
        parts.append(pd.DataFrame(part))
    return pd.concat(parts, ignore_index=True)


def patients_for_noise_share(within_variance: float | np.ndarray, parameter_variance: float | np.ndarray,
                             target_share: float | np.ndarray) -> np.ndarray:
    """Patients per draw needed for patient-level noise to be ``target_share`` of the PSA variance.

    Notes
    -----
    With ``N`` draws of ``n`` patients, ``Var(ȳ_j) = τ² + σ_w²/n``; the noise share
    ``(σ_w²/n) / (τ² + σ_w²/n)`` equals ``s`` at ``n = σ_w² (1 - s) / (s τ²)`` (O'Hagan, Stevenson &
    Madan 2007, Health Econ 16:1009-1023). Infinite when ``τ² <= 0`` (no parameter variance left
    to resolve).
    """
    s = np.asarray(target_share, dtype=float)
    if np.any(~(s > 0) | ~(s < 1)):
        raise ValidationError(("target_share",), "must be > 0 and < 1", target_share)
    tau2 = np.asarray(parameter_variance, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        n = np.asarray(within_variance, dtype=float) * (1 - s) / (s * tau2)
    return np.where(tau2 > 0, n, np.inf)


def noise_share(per_draw: pd.DataFrame, outcomes: str | Sequence[str], *, patients: str = "patients",
                target_share: float = 0.05) -> pd.DataFrame:
    """ANOVA split of the variance over draws of simulated outcomes into parameter uncertainty and
    patient-level Monte Carlo noise.

    Parameters
    ----------
    per_draw : one row per draw (and strategy, if a ``strategy`` column is present) with each
        outcome, its MCSE ``<outcome>_mcse`` and ``patients``; e.g. the per-draw table of a
        simulated method, or :func:`incremental_draws` for increments.
    outcomes : outcome column(s).
    target_share : the noise share for which the needed patients per draw are reported.

    Returns
    -------
    pandas.DataFrame
        One row per strategy (if any) and outcome: ``strategy``, ``outcome``, ``draws``,
        ``patients`` (mean per draw), ``total_variance`` (of the per-draw means) with
        ``total_variance_se``, ``noise_variance`` with ``noise_variance_se``,
        ``parameter_variance`` with ``parameter_variance_se``, ``within_variance`` (per patient)
        with ``within_variance_se``, ``noise_share``, ``target_share`` and
        ``patients_for_target``.

    Notes
    -----
    One-way random-effects ANOVA (O'Hagan, Stevenson & Madan 2007, Health Econ 16:1009-1023): draw
    ``j`` of ``N`` has mean ``ȳ_j = μ(θ_j) + ε̄_j`` over ``n_j`` patients with
    ``Var ε̄_j = σ_w²/n_j`` estimated by ``MCSE_j²``. Then

    - total variance ``V = s²(ȳ_j)`` (sample variance over draws);
    - noise variance ``W = (1/N) Σ_j MCSE_j²``;
    - parameter variance ``τ² = V - W`` (unbiased; may come out negative when noise dominates);
    - within-draw (patient) variance ``σ_w² = (1/N) Σ_j n_j MCSE_j²``;
    - noise share ``W / V``; patients for a target share: :func:`patients_for_noise_share`.

    Standard errors (first order, from memory): ``V`` by ``sqrt((m_4 - V²)/N)`` with ``m_4`` the
    fourth central moment of the ``ȳ_j``; ``W`` and ``σ_w²`` by the standard deviation of their
    terms over ``sqrt(N)``; ``τ²`` by combining the two as independent.
    """
    outcomes = [outcomes] if isinstance(outcomes, str) else list(outcomes)
    needed = [patients, *outcomes, *(f"{o}_mcse" for o in outcomes)]
    missing = [c for c in needed if c not in per_draw.columns]
    if missing:
        raise ValidationError.of(Problem(("per_draw", c), "is a required column") for c in missing)
    if "method" in per_draw.columns and per_draw["method"].nunique(dropna=False) > 1:
        raise ValidationError(("per_draw", "method"), "must hold one method (apply the statistic per method)",
                              sorted(map(str, per_draw["method"].unique())))
    s = float(target_share)
    if not 0 < s < 1:
        raise ValidationError(("target_share",), "must be > 0 and < 1", target_share)
    groups = per_draw.groupby("strategy", sort=False) if "strategy" in per_draw.columns else [("", per_draw)]
    rows = []
    for strategy, g in groups:
        n_pat = g[patients].to_numpy(dtype=float)
        if len(g) < 2 or not (np.isfinite(n_pat).all() and (n_pat >= 1).all()):
            raise ValidationError(("per_draw", patients), "must hold >= 2 draws, each with >= 1 patient",
                                  f"{len(g)} draws for strategy {strategy!r}")
        n = len(g)
        for o in outcomes:
            y = g[o].to_numpy(dtype=float)
            se2 = g[f"{o}_mcse"].to_numpy(dtype=float) ** 2
            if not (np.isfinite(y).all() and np.isfinite(se2).all()):
                raise ValidationError(("per_draw", o), "must be finite with a finite MCSE in every draw",
                                      "NaN or infinite")
            total = float(y.var(ddof=1))
            m4 = float(np.mean((y - y.mean()) ** 4))
            total_se = float(np.sqrt(max(m4 - (total * (n - 1) / n) ** 2, 0.0) / n))
            noise = float(se2.mean())
            noise_se = float(se2.std(ddof=1) / np.sqrt(n))
            within_terms = se2 * n_pat
            within = float(within_terms.mean())
            within_se = float(within_terms.std(ddof=1) / np.sqrt(n))
            tau2 = total - noise
            need = float(patients_for_noise_share(within, tau2, s))
            share = noise / total if total > 0 else np.nan
            rows.append((strategy, o, n, float(n_pat.mean()), total, total_se, noise, noise_se, tau2,
                         float(np.hypot(total_se, noise_se)), within, within_se, share, s, need))
    out = pd.DataFrame(rows, columns=[
        "strategy", "outcome", "draws", "patients", "total_variance", "total_variance_se", "noise_variance",
        "noise_variance_se", "parameter_variance", "parameter_variance_se", "within_variance",
        "within_variance_se", "noise_share", "target_share", "patients_for_target"])
    return out
