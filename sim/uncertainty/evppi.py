"""Expected value of partial perfect information by nonparametric regression of the incremental
costs and effects on a group of parameters (docs/methods.md, 'Expected value of partial perfect
information').
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd

from sim.problems import Problem, ValidationError
from sim.uncertainty._tables import COSTS, EFFECTS, draw_arrays, wtp_grid
from sim.uncertainty.regression_splines import SplineBasis, Structure
from sim.uncertainty.value_of_information import evpi_from_net_benefit

__all__ = ["IncrementalFits", "fit_incremental_means", "evppi", "evppi_from_fits"]


@dataclass(frozen=True)
class IncrementalFits:
    """Incremental costs and effects against a baseline strategy and their regressions on the
    parameters of interest.

    Attributes
    ----------
    group : the parameters regressed on.
    strategies : strategy names; column ``j`` of every array below is strategy ``j``.
    baseline : the strategy the increments are taken against (its columns are 0).
    delta_costs, delta_effects : (N, D) per-draw increments.
    fitted_costs, fitted_effects : (N, D) their fitted conditional means ``E[ΔC | φ_i]``,
        ``E[ΔE | φ_i]``.
    diagnostics : one row per strategy other than the baseline and outcome: ``strategy``,
        ``outcome``, ``edf``, ``r_squared``, ``residual_sd``, ``smoothing``.
    basis : the regression basis (for the standard error, :func:`evppi_from_fits`).
    smoothing : ``(strategy index, outcome) -> smoothing parameters`` of each fit.
    """

    group: tuple[str, ...]
    strategies: tuple[str, ...]
    baseline: str
    delta_costs: np.ndarray
    delta_effects: np.ndarray
    fitted_costs: np.ndarray
    fitted_effects: np.ndarray
    diagnostics: pd.DataFrame
    basis: SplineBasis
    smoothing: dict[tuple[int, str], tuple[float, ...]]

    def net_benefits(self, wtp: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(incremental net benefit, its fitted conditional mean), each (n_wtp, N, D)."""
        lam = np.asarray(wtp, dtype=float)[:, None, None]
        return (lam * self.delta_effects[None] - self.delta_costs[None],
                lam * self.fitted_effects[None] - self.fitted_costs[None])


def _parameter_matrix(parameters: pd.DataFrame, group: Sequence[str], draws: np.ndarray) -> np.ndarray:
    if not isinstance(parameters, pd.DataFrame):
        raise ValidationError(("parameters",), "must be a pandas DataFrame indexed by draw",
                              type(parameters).__name__)
    if isinstance(group, str) or len(group) == 0:
        raise ValidationError(("group",), "must be a non-empty list of parameter names", group)
    table = parameters.set_index("draw") if "draw" in parameters.columns else parameters
    missing = [g for g in group if g not in table.columns]
    if missing:
        raise ValidationError.of(Problem(("parameters", g), "is not a parameter column", g) for g in missing)
    if table.index.duplicated().any():
        raise ValidationError(("parameters", "draw"), "must have one row per draw",
                              table.index[table.index.duplicated()][0])
    absent = np.setdiff1d(draws, table.index.to_numpy())
    if absent.size:
        raise ValidationError(("parameters", "draw"), "must have a row for every draw of the results",
                              int(absent[0]))
    x = table.loc[draws, list(group)].to_numpy(dtype=float)
    if not np.isfinite(x).all():
        raise ValidationError(("parameters", list(group)), "must be finite in every draw", "NaN or infinite")
    return x


def fit_incremental_means(per_draw: pd.DataFrame, parameters: pd.DataFrame, group: Sequence[str], *,
                          baseline: str | None = None, costs: str = COSTS, effects: str = EFFECTS,
                          structure: Structure = "tensor", basis_size: int | None = None) -> IncrementalFits:
    """Regress each strategy's incremental costs and effects on the parameters in ``group``.

    Parameters
    ----------
    per_draw : per-draw table (one method).
    parameters : parameter values per draw, indexed by draw (or with a ``draw`` column), one column
        per parameter.
    group : the parameters whose value of information is wanted (1 to 4 for ``"tensor"``).
    baseline : strategy the increments are taken against (default the first listed; the EVPPI does
        not depend on it).
    structure, basis_size : see :class:`sim.uncertainty.SplineBasis`.

    Notes
    -----
    Net benefit is linear in costs and effects, ``NB = λ E - C``, and so is its conditional mean:
    ``E[ΔNB | φ] = λ E[ΔE | φ] - E[ΔC | φ]``. Regressing ``ΔC`` and ``ΔE`` once serves every
    willingness to pay (each with its own GCV smoothing), where Strong, Oakley & Brennan (2014) fit
    ``ΔNB`` at each ``λ``.
    """
    arrays = draw_arrays(per_draw, [costs, effects], min_draws=2)
    x = _parameter_matrix(parameters, group, arrays.draws)
    base = arrays.index_of(baseline, name="baseline") if baseline is not None else 0
    dc = arrays.values[costs] - arrays.values[costs][:, [base]]
    de = arrays.values[effects] - arrays.values[effects][:, [base]]
    basis = SplineBasis(x, structure=structure, basis_size=basis_size)
    fc, fe = np.zeros_like(dc), np.zeros_like(de)
    rows, smoothing = [], {}
    for j, strategy in enumerate(arrays.strategies):
        if j == base:
            continue
        for name, y, out in (("delta_costs", dc, fc), ("delta_effects", de, fe)):
            fit = basis.fit(y[:, j])
            out[:, j] = fit.fitted
            smoothing[(j, name)] = fit.smoothing
            rows.append((strategy, name, fit.edf, fit.r_squared, fit.residual_sd, fit.smoothing))
    diagnostics = pd.DataFrame(rows, columns=["strategy", "outcome", "edf", "r_squared", "residual_sd", "smoothing"])
    return IncrementalFits(tuple(group), arrays.strategies, arrays.strategies[base], dc, de, fc, fe, diagnostics,
                           basis, smoothing)


def _evppi_samples(fits: IncrementalFits, grid: np.ndarray, n_samples: int, seed: int) -> np.ndarray:
    """EVPPI (W, S) recomputed with the fitted values perturbed by their own regression error."""
    base = fits.strategies.index(fits.baseline)
    keys = [(j, o) for j in range(len(fits.strategies)) if j != base for o in ("delta_costs", "delta_effects")]
    if not keys:  # one strategy: nothing to decide, EVPPI is 0 in every sample
        return np.zeros((len(grid), n_samples))
    data = {"delta_costs": (fits.delta_costs, fits.fitted_costs), "delta_effects": (fits.delta_effects, fits.fitted_effects)}
    resid = np.column_stack([data[o][0][:, j] - data[o][1][:, j] for j, o in keys])
    n = resid.shape[0]
    edf = float(fits.diagnostics["edf"].max())
    cov = resid.T @ resid / max(n - edf, 1.0)
    w, v = np.linalg.eigh(cov)
    root = v * np.sqrt(np.clip(w, 0.0, None))  # cov = root root'
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    z = rng.standard_normal((fits.basis.n_columns, n_samples, len(keys))) @ root.T
    fc = np.repeat(fits.fitted_costs[None], n_samples, axis=0)
    fe = np.repeat(fits.fitted_effects[None], n_samples, axis=0)
    for k, (j, o) in enumerate(keys):
        target = fc if o == "delta_costs" else fe
        target[:, :, j] += fits.basis.smooth(fits.smoothing[(j, o)], z[:, :, k]).T
    return np.stack([evpi_from_net_benefit(lam * fe - fc)[0] for lam in grid])


def evppi_from_fits(fits: IncrementalFits, wtp: float | Sequence[float], *, se_samples: int = 200,
                    seed: int = 0) -> pd.DataFrame:
    """EVPPI and EVPI at each willingness to pay from fitted conditional means.

    Parameters
    ----------
    fits : the regressions (:func:`fit_incremental_means`).
    wtp : willingness to pay per QALY, one value or a grid (each >= 0).
    se_samples : samples for the standard error (0: none, the column is NaN).
    seed : entropy of the ``numpy.random.SeedSequence`` for those samples.

    Returns
    -------
    pandas.DataFrame
        Columns ``wtp``, ``parameters`` (the group joined by ``", "``), ``evppi``, ``evppi_se``,
        ``evpi``, ``evpi_mcse`` and ``clipped`` (True where the regression estimate exceeded the
        EVPI of the same draws and was set to it).

    Notes
    -----
    ``EVPPI(φ) = E_φ[max_d E(NB_d | φ)] - max_d E[NB_d]`` estimated by
    ``(1/N) Σ_i max_d ĝ_d(φ_i) - max_d (1/N) Σ_i ĝ_d(φ_i)``, ``ĝ_d`` the fitted incremental net
    benefit (Strong, Oakley & Brennan 2014, Med Decis Making 34:311-326). It is >= 0 by
    construction (a mean of maxima is at least the maximum of means); it is at most the EVPI in
    expectation, but with finite draws a fit may exceed it slightly, so it is capped at the EVPI.

    Standard error of the regression step, given the draws (in the spirit of Strong et al., who
    sample the fitted values from the regression's posterior): the residuals of all fits
    ``(ΔC_d, ΔE_d)`` are taken as independent over draws with the covariance ``Σ`` between fits
    estimated from them (divided by ``N - edf``); each sample adds to every fit its own error
    ``A_k ε_k`` with ``ε ~ N(0, Σ ⊗ I_N)`` (``A_k`` the fit's smoother matrix, see
    :meth:`sim.uncertainty.SplineBasis.smooth`) and recomputes the EVPPI; ``evppi_se`` is the
    standard deviation over the samples. It leaves out the smoothing bias and the sampling of the
    draws themselves.
    """
    grid = wtp_grid(wtp)
    if isinstance(se_samples, bool) or not isinstance(se_samples, (int, np.integer)) or se_samples < 0 \
            or se_samples == 1:
        raise ValidationError(("se_samples",), "must be 0 (no standard error) or an integer >= 2", se_samples)
    inb, fitted = fits.net_benefits(grid)
    value = np.maximum(evpi_from_net_benefit(fitted)[0], 0.0)
    full, mcse, _ = evpi_from_net_benefit(inb)
    se = (_evppi_samples(fits, grid, int(se_samples), seed).std(axis=1, ddof=1) if se_samples
          else np.full(len(grid), np.nan))
    return pd.DataFrame({"wtp": grid, "parameters": ", ".join(fits.group), "evppi": np.minimum(value, full),
                         "evppi_se": se, "evpi": full, "evpi_mcse": mcse, "clipped": value > full})


def evppi(per_draw: pd.DataFrame, parameters: pd.DataFrame, group: Sequence[str], wtp: float | Sequence[float],
          *, costs: str = COSTS, effects: str = EFFECTS, structure: Structure = "tensor",
          basis_size: int | None = None, se_samples: int = 200, seed: int = 0) -> pd.DataFrame:
    """Expected value of partial perfect information on a parameter group, per patient.

    Parameters
    ----------
    per_draw : per-draw table (one method).
    parameters : parameter values per draw, indexed by draw (or with a ``draw`` column).
    group : names of the parameters of interest.
    wtp : willingness to pay per QALY, one value or a grid (each >= 0).
    costs, effects : outcome columns.
    structure : ``"tensor"`` (default; 1-4 parameters, all interactions) or ``"additive"``
        (any number of parameters, no interactions: an underestimate when they interact).
    basis_size : basis functions per parameter (default: see :class:`sim.uncertainty.SplineBasis`).
    se_samples, seed : for the standard error (see :func:`evppi_from_fits`).

    Returns
    -------
    pandas.DataFrame
        As :func:`evppi_from_fits`.

    Notes
    -----
    Penalised cubic regression splines with smoothing chosen by GCV stand in for the GAM of Strong,
    Oakley & Brennan (2014), who use a GAM for up to about 4 parameters and a Gaussian process
    beyond; see :func:`fit_incremental_means` for the regression and :func:`evppi_from_fits` for
    the estimator.
    """
    fits = fit_incremental_means(per_draw, parameters, group, costs=costs, effects=effects,
                                 structure=structure, basis_size=basis_size)
    return evppi_from_fits(fits, wtp, se_samples=se_samples, seed=seed)
