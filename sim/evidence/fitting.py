"""Maximum-likelihood fits of parametric hazards to right-censored, left-truncated survival data
(docs/methods.md, 'Survival fits from trial evidence').

The log-likelihood of patients observed from entry :math:`s_i` to exit :math:`t_i` with event
indicator :math:`d_i` is

.. math:: \\ell = \\sum_i d_i \\log h(t_i) - [H(t_i) - H(s_i)],

evaluated with the hazard classes of :mod:`sim.hazards` (so the parameters are those of the scenario
file). Two arms (indicator :math:`x`, the second arm in sorted order against the first): proportional
hazards :math:`h_1 = e^{\\beta} h_0` for exponential, Weibull, Gompertz and piecewise, accelerated
failure time :math:`S_1(t) = S_0(t e^{-\\beta})` for the others. The optimiser (BFGS on the
unconstrained scale, positive parameters as logarithms, then Newton steps on a finite-difference
Hessian) stops when the Newton decrement :math:`g^T H^{-1} g` falls below :data:`DECREMENT`; the
covariance is the inverse observed information on that scale, mapped by the delta method
:math:`J \\Sigma J^T` to the reported parameters. A fit that does not converge is reported as such
(:attr:`Fit.converged` false, :attr:`Fit.message`), never as silent NaN.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy import optimize

from ..hazards import make_hazard
from ..io.scenario import uncertainty_entry
from ..problems import KeyPath, ValidationError, format_key
from ..uncertainty import LogNormal, MultivariateNormal, Normal, UncertainInput
from .curves import SINGLE_ARM
from .data import SurvivalData
from .families import FAMILY_NAMES, HAZARD_RATIO, FamilySpec, family_spec

__all__ = ["Fit", "Effect", "fit_family", "fit_families", "fit_table", "DECREMENT"]

DECREMENT = 1e-8
"""Convergence: the Newton decrement g' H^-1 g (log-likelihood units) must be below this."""
LOG_LIMIT = 25.0
"""A positive parameter beyond exp(+-LOG_LIMIT) (about 1e-11 to 7e10) is taken as running off to 0 or infinity."""
_Z95 = 1.959963984540054  # the 97.5% standard normal quantile (scipy.stats.norm.ppf(0.975))


@dataclass(frozen=True)
class Effect:
    """The second arm against the first: a hazard ratio or an acceleration factor, with its 95% CI
    (Wald interval on the log scale)."""

    kind: str
    reference: str
    compared: str
    estimate: float
    lower: float
    upper: float
    log_se: float


@dataclass(frozen=True, eq=False)  # holds arrays: compared by identity
class Fit:
    """One fitted family.

    Attributes
    ----------
    family : family name.
    parameters : the reference arm's hazard in the scenario file's keys (``shape``, ``scale``, ...;
        piecewise ``breaks`` and ``rates``), in the data's time unit.
    names : flat parameter names of ``estimates`` and ``covariance`` (with ``log_hazard_ratio`` or
        ``log_acceleration_factor`` last for two arms).
    estimates, covariance, standard_errors : reported-scale estimates and their covariance (delta
        method); covariance is None when the observed information is not positive definite.
    loglik, aic, bic : log-likelihood, ``2k - 2 loglik``, ``k log(n) - 2 loglik`` (n patients).
    converged, message : convergence status in words.
    effect : the two-arm effect, or None for one arm.
    unit : time unit of the data (and of the parameters).
    scenario : whether the family is a scenario hazard family.
    """

    family: str
    parameters: dict[str, Any]
    names: tuple[str, ...]
    estimates: NDArray[np.float64]
    covariance: NDArray[np.float64] | None
    loglik: float
    aic: float
    bic: float
    n: int
    n_events: int
    converged: bool
    message: str
    unit: str
    scenario: bool
    effect: Effect | None = None
    spec: FamilySpec | None = field(default=None, repr=False, compare=False)
    theta: NDArray[np.float64] | None = field(default=None, repr=False)
    theta_covariance: NDArray[np.float64] | None = field(default=None, repr=False)
    """The estimates on the optimiser's scale (log for positive parameters and for the effect) and the
    inverse observed information there: a multivariate normal on this scale is the usual
    probabilistic-analysis distribution of the fit (:meth:`transforms`)."""

    def transforms(self) -> tuple[str, ...]:
        """Per entry of :attr:`theta`: ``"log"`` (value = e^theta) or ``"identity"``."""
        assert self.spec is not None
        out = tuple("log" if pos else "identity" for pos in self.spec.positive)
        return out + (("log",) if self.effect is not None else ())

    @property
    def label(self) -> str:
        """The family name; for splines with the number of interior knots (``spline_2``)."""
        return f"spline_{self.parameters['knots']}" if self.family == "spline" else self.family

    @property
    def k(self) -> int:
        return len(self.names)

    @property
    def standard_errors(self) -> NDArray[np.float64]:
        if self.covariance is None:
            return np.full(self.k, np.nan)
        return np.sqrt(np.diag(self.covariance))

    def hazard(self) -> Any:
        """The reference arm's fitted hazard (clock in the data's unit)."""
        assert self.spec is not None
        p = len(self.spec.names)
        return self.spec.build(self.estimates[:p])

    def compared_parameters(self) -> dict[str, Any] | None:
        """The compared arm's hazard in the same family's scenario keys (None for one arm).

        Proportional hazards with ratio ``HR``: exponential and Gompertz ``rate * HR``, piecewise
        ``rates * HR``, Weibull ``scale * HR^(-1/shape)`` (since ``HR (t/scale)^shape``); spline
        ``gamma0 + log HR``. Accelerated failure time with factor ``AF`` (``S_1(t) = S_0(t / AF)``):
        log-logistic and gamma ``scale * AF``, log-normal and generalized gamma ``mu + log AF``.
        """
        if self.effect is None:
            return None
        out = dict(self.parameters)
        beta = math.log(self.effect.estimate)
        if self.family in ("exponential", "gompertz"):
            out["rate"] = out["rate"] * self.effect.estimate
        elif self.family == "piecewise":
            out["rates"] = tuple(r * self.effect.estimate for r in out["rates"])
        elif self.family == "weibull":
            out["scale"] = out["scale"] * math.exp(-beta / out["shape"])
        elif self.family == "spline":
            out["gamma0"] = out["gamma0"] + beta
        elif self.family in ("loglogistic", "gamma"):
            out["scale"] = out["scale"] * self.effect.estimate
        else:  # lognormal, gengamma
            out["mu"] = out["mu"] + beta
        return out

    def arm_hazards(self) -> dict[str, Any]:
        """Per arm label, the fitted hazard object (clock in the data's unit): the reference arm's
        (:meth:`hazard`) and, for two arms, the compared arm's from :meth:`compared_parameters` (a
        family that is not a scenario family builds it by its own recipe); one arm is labelled
        :data:`SINGLE_ARM`."""
        if self.effect is None:
            return {SINGLE_ARM: self.hazard()}
        params = self.compared_parameters()
        assert params is not None and self.spec is not None
        if self.scenario:
            compared = make_hazard(self.family, **params)
        else:
            compared = self.spec.build(np.array([params[n] for n in self.spec.names], dtype=np.float64))
        return {self.effect.reference: self.hazard(), self.effect.compared: compared}

    def hazard_keys(self, arm: str = "reference") -> dict[str, Any]:
        """The keys of a ``[[transitions]]`` table for the fitted hazard: ``family``, ``unit`` and the
        family's parameters (piecewise ``breaks`` and ``rates`` as lists), of the reference arm or
        (``arm="compared"``) of the compared arm (:meth:`compared_parameters`)."""
        if arm not in ("reference", "compared"):
            raise ValidationError(("arm",), "must be 'reference' or 'compared'", arm)
        params = self.compared_parameters() if arm == "compared" else self.parameters
        if params is None:
            raise ValidationError(("arm",), "the fit has one arm: there is no compared arm", arm)
        out: dict[str, Any] = {"family": self.family, "unit": self.unit}
        for key, value in params.items():
            out[key] = [float(v) for v in value] if isinstance(value, (tuple, list)) else float(value)
        return out

    def parameter_paths(self, transition: int) -> list[KeyPath]:
        """Key paths of the reference arm's hazard parameters in ``[[transitions]]`` element
        ``transition`` (piecewise ``rates[i]`` as ``("transitions", k, "rates", i)``), in the order
        of :attr:`estimates`."""
        assert self.spec is not None
        paths: list[KeyPath] = []
        for name in self.spec.names:
            base, _, index = name.partition("[")
            paths.append(("transitions", transition, base, int(index[:-1])) if index
                         else ("transitions", transition, name))
        return paths

    def uncertainty_group(self, transition: int, description: str | None = None) -> dict[str, Any] | None:
        """The reference arm's hazard parameters as an ``[[uncertainty]]`` entry of the scenario file
        (:func:`sim.io.scenario.uncertainty_entry`), or None without a covariance (not converged, the
        observed information not positive definite) or for a family that is not a scenario family.

        The distribution is the fit's normal approximation on its estimation scale (positive
        parameters as logarithms, ``transform = "log"``), so every draw stays inside the family's
        domain: mean :math:`\\hat\\theta` and covariance :math:`\\Sigma_\\theta`, the inverse observed
        information there. The delta method maps it back to :attr:`covariance`:
        :math:`J \\Sigma_\\theta J^T` with :math:`J = \\partial\\,\\text{value} / \\partial\\theta`
        (:meth:`FamilySpec.jacobian`). Several parameters give a ``multivariate_normal`` group; one
        (exponential, single-band piecewise) gives its univariate marginal, ``lognormal`` (``mu``,
        ``sigma``) on a log scale or ``normal`` (``mean``, ``sd``).

        Parameters
        ----------
        transition : int
            Index of the ``[[transitions]]`` element the fitted hazard is written to.
        description : str, optional
            The entry's ``description`` (default: the fit, its patients and events).
        """
        if self.theta_covariance is None or self.theta is None or self.spec is None or not self.scenario:
            return None
        p = len(self.spec.names)
        mean = np.asarray(self.theta[:p], dtype=np.float64)
        cov = np.asarray(self.theta_covariance, dtype=np.float64)[:p, :p]
        cov = 0.5 * (cov + cov.T)
        transforms = self.transforms()[:p]
        keys = tuple(format_key(path) for path in self.parameter_paths(transition))
        if p == 1:
            sd = math.sqrt(float(cov[0, 0]))
            dist: Any = (LogNormal(float(mean[0]), sd) if transforms[0] == "log" else Normal(float(mean[0]), sd))
        else:
            dist = MultivariateNormal(tuple(float(v) for v in mean), tuple(tuple(float(v) for v in row) for row in cov),
                                      transforms)
        if description is None:
            description = (f"{self.label} fit: maximum likelihood, {self.n} patients, {self.n_events} events; "
                           f"covariance from the observed information")
        return uncertainty_entry(UncertainInput(keys, dist, description=description))


# --------------------------------------------------------------------------------------------
# Log-likelihood
# --------------------------------------------------------------------------------------------

def _log_h(hz: Any, t: NDArray[np.float64]) -> NDArray[np.float64]:
    if hasattr(hz, "log_hazard"):
        return hz.log_hazard(t)
    with np.errstate(divide="ignore"):
        return np.log(hz.hazard(t))


def _loglik_fn(spec: FamilySpec, data: SurvivalData, x: NDArray[np.float64] | None
               ) -> Callable[[NDArray[np.float64]], float]:
    """theta -> log-likelihood (``-inf`` where a parameter is outside its domain)."""
    t, d, s = data.time, data.event, data.entry
    delayed = s > 0.0
    p = len(spec.names)
    ph = spec.effect == HAZARD_RATIO

    def loglik(theta: NDArray[np.float64]) -> float:
        values = spec.to_values(theta[:p])
        if not np.all(np.isfinite(values)):
            return -math.inf
        try:
            hz = spec.build(values)
        except ValueError:  # a parameter outside the family's domain (e.g. an underflowed scale)
            return -math.inf
        if x is None:
            tt, ss, add, mult = t, s, 0.0, 1.0
        else:
            beta = theta[p]
            if ph:
                tt, ss, add, mult = t, s, beta * x, np.exp(beta * x)
            else:
                scale = np.exp(-beta * x)
                tt, ss, add, mult = t * scale, s * scale, -beta * x, 1.0
        with np.errstate(over="ignore", invalid="ignore"):
            cum = hz.cumhazard(tt)
            if np.any(delayed):
                cum = cum - np.where(delayed, hz.cumhazard(np.where(delayed, ss, 0.0)), 0.0)
            lh = _log_h(hz, tt[d]) + (add[d] if x is not None else 0.0)
            total = float(np.sum(lh) - np.sum(mult * cum))
        return total if math.isfinite(total) else -math.inf

    return loglik


# --------------------------------------------------------------------------------------------
# Optimisation, numerical derivatives
# --------------------------------------------------------------------------------------------

def _steps(theta: NDArray[np.float64], rel: float) -> NDArray[np.float64]:
    return rel * np.maximum(1.0, np.abs(theta))


def _gradient(f: Callable, theta: NDArray[np.float64]) -> NDArray[np.float64]:
    """Central differences."""
    h = _steps(theta, 1e-6)
    g = np.empty_like(theta)
    for i in range(theta.size):
        e = np.zeros_like(theta)
        e[i] = h[i]
        g[i] = (f(theta + e) - f(theta - e)) / (2.0 * h[i])
    return g


def _hessian(f: Callable, theta: NDArray[np.float64]) -> NDArray[np.float64]:
    """Central-difference Hessian of ``f`` at ``theta`` (step ``1e-4 max(1, |theta|)``)."""
    h = _steps(theta, 1e-4)
    n = theta.size
    out = np.empty((n, n))
    f0 = f(theta)
    for i in range(n):
        ei = np.zeros(n)
        ei[i] = h[i]
        out[i, i] = (f(theta + ei) - 2.0 * f0 + f(theta - ei)) / h[i] ** 2
        for j in range(i):
            ej = np.zeros(n)
            ej[j] = h[j]
            v = (f(theta + ei + ej) - f(theta + ei - ej) - f(theta - ei + ej) + f(theta - ei - ej)) / (4 * h[i] * h[j])
            out[i, j] = out[j, i] = v
    return out


def _maximise(loglik: Callable, theta0: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray | None, bool, str]:
    """Maximise ``loglik``: BFGS (Nelder-Mead first if BFGS cannot move), then Newton polishing.

    Returns theta, the Hessian of the negative log-likelihood (None if not finite), converged, message.
    """
    def neg(th: NDArray[np.float64]) -> float:
        v = loglik(th)
        return -v if math.isfinite(v) else 1e300

    theta = np.asarray(theta0, dtype=np.float64)
    if neg(theta) >= 1e300:
        return theta, None, False, "the log-likelihood is not finite at the starting values"
    res = optimize.minimize(neg, theta, jac=lambda th: _gradient(neg, th), method="BFGS",
                            options={"gtol": 1e-6, "maxiter": 2000})
    theta = res.x if neg(res.x) <= neg(theta) else theta
    if not res.success:  # e.g. a line search stopped by the domain edge: a derivative-free pass first
        nm = optimize.minimize(neg, theta, method="Nelder-Mead",
                               options={"xatol": 1e-9, "fatol": 1e-11, "maxfev": 400 * theta.size})
        if neg(nm.x) <= neg(theta):
            theta = nm.x
        res = optimize.minimize(neg, theta, jac=lambda th: _gradient(neg, th), method="BFGS",
                                options={"gtol": 1e-6, "maxiter": 2000})
        theta = res.x if neg(res.x) <= neg(theta) else theta
    hess = None
    decrement = math.inf
    for _ in range(8):  # Newton polishing on the finite-difference Hessian
        hess = _hessian(neg, theta)
        g = _gradient(neg, theta)
        if not (np.all(np.isfinite(hess)) and np.all(np.isfinite(g))):
            return theta, None, False, "the log-likelihood is not finite near the optimum"
        try:
            chol = np.linalg.cholesky(hess)
        except np.linalg.LinAlgError:
            return theta, hess, False, ("the observed information is not positive definite at the optimum "
                                        "(the parameters are not identified by these data)")
        step = np.linalg.solve(chol.T, np.linalg.solve(chol, g))
        decrement = float(g @ step)
        if decrement < DECREMENT:
            return theta, hess, True, "converged"
        new = theta - step
        if neg(new) <= neg(theta):
            theta = new
        else:
            break
    return theta, hess, False, f"did not converge (Newton decrement {decrement:.3g} > {DECREMENT:g})"


# --------------------------------------------------------------------------------------------
# Fits
# --------------------------------------------------------------------------------------------

def fit_family(data: SurvivalData, family: str | FamilySpec, *, breaks: Sequence[float] | None = None,
               knots: int | None = None, arms: bool | None = None, start: Sequence[float] | None = None) -> Fit:
    """Fit one family by maximum likelihood.

    Parameters
    ----------
    data : SurvivalData
        Exit times, events, entry times (left truncation) and optional arms.
    family : str or FamilySpec
        A name of :data:`sim.evidence.FAMILY_NAMES` or a recipe from :func:`family_spec`.
    breaks : sequence of float, optional
        Band starts of the ``piecewise`` family (data unit).
    knots : int, optional
        Interior knots of the ``spline`` family (1-3).
    arms : bool, optional
        Fit a two-arm effect (default: when the data have exactly two arms). More than two arms are
        refused; fit the arms one by one (:meth:`SurvivalData.arm`).
    start : sequence of float, optional
        Starting values on the reported scale (without the effect).

    Returns
    -------
    Fit
        See :class:`Fit`; ``converged`` is false (and ``message`` says why) when the optimiser did
        not reach a maximum with a positive definite observed information.

    Notes
    -----
    docs/methods.md, 'Survival fits from trial evidence'.
    """
    spec = family if isinstance(family, FamilySpec) else family_spec(family, breaks=breaks, knots=knots, data=data)
    groups = data.groups
    if arms is None:
        arms = len(groups) == 2
    if arms and len(groups) != 2:
        raise ValidationError(("group",), f"a two-arm effect needs exactly two arms, the data have {len(groups)}",
                              list(groups))
    x = (data.group == groups[1]).astype(np.float64) if arms else None
    ref = data.arm(groups[0]) if arms else data
    values0 = np.asarray(start, dtype=np.float64) if start is not None else spec.start(ref)
    theta0 = spec.to_theta(values0)
    if arms:
        theta0 = np.append(theta0, 0.0)
    loglik = _loglik_fn(spec, data, x)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
        theta, hess, converged, message = _maximise(loglik, theta0)
    p = len(spec.names)
    off = [n for n, th, pos in zip(spec.names, theta[:p], spec.positive) if abs(th) > (LOG_LIMIT if pos else 1e8)]
    if off:
        converged = False
        message = (f"did not converge: {', '.join(off)} ran off towards 0 or infinity (these data have no "
                   f"maximum of the likelihood inside the {spec.name} family)")
    values = spec.to_values(theta[:p])
    jac = spec.jacobian(theta[:p])
    names = spec.names
    estimates = values
    if arms:
        jac = np.block([[jac, np.zeros((p, 1))], [np.zeros((1, p)), np.ones((1, 1))]])
        names = names + (("log_hazard_ratio",) if spec.effect == HAZARD_RATIO else ("log_acceleration_factor",))
        estimates = np.append(values, theta[p])
    cov = theta_cov = None
    if hess is not None and converged:
        theta_cov = np.linalg.inv(hess)
        theta_cov = 0.5 * (theta_cov + theta_cov.T)
        cov = jac @ theta_cov @ jac.T
        cov = 0.5 * (cov + cov.T)
    ll = loglik(theta)
    k = theta.size
    effect = None
    if arms:
        se = math.sqrt(cov[-1, -1]) if cov is not None else math.nan
        beta = float(theta[p])
        effect = Effect(spec.effect, groups[0], groups[1], math.exp(beta), math.exp(beta - _Z95 * se),
                        math.exp(beta + _Z95 * se), se)
    return Fit(spec.name, spec.parameters(values), names, estimates, cov, ll, 2 * k - 2 * ll,
               k * math.log(data.n) - 2 * ll, data.n, data.n_events, converged, message, data.unit,
               spec.scenario, effect, spec, np.array(theta), theta_cov)


def fit_families(data: SurvivalData, families: Sequence[str] = ("exponential", "weibull", "gompertz", "loglogistic",
                                                                "lognormal", "gamma", "gengamma"),
                 *, breaks: Sequence[float] | None = None, knots: Sequence[int] = (), arms: bool | None = None
                 ) -> list[Fit]:
    """Fit several families (``spline`` once per number of knots in ``knots``); unknown names are
    refused before any fit."""
    unknown = [f for f in families if f not in FAMILY_NAMES]
    if unknown:
        raise ValidationError(("families",), f"must be among {', '.join(FAMILY_NAMES)}", unknown[0])
    fits = []
    for name in families:
        if name == "spline":
            for k in (knots or (1,)):
                fits.append(fit_family(data, family_spec("spline", knots=k, data=data), arms=arms))
        else:
            fits.append(fit_family(data, name, breaks=breaks, arms=arms))
    return fits


def fit_table(fits: Sequence[Fit]) -> pd.DataFrame:
    """One row per fit, by AIC: family, parameters, log-likelihood, AIC, BIC, the differences from the
    best converged AIC and BIC, the effect with its CI, and the convergence status."""
    rows = []
    for f in fits:
        row = {"family": f.label, "k": f.k, "loglik": f.loglik, "AIC": f.aic, "BIC": f.bic,
               "converged": "yes" if f.converged else f"no: {f.message}",
               "parameters": ", ".join(f"{n}={v:.5g}" for n, v in zip(f.names, f.estimates))}
        if f.effect is not None:
            e = f.effect
            label = "HR" if e.kind == HAZARD_RATIO else "AF"
            row["effect"] = f"{label} {e.estimate:.3f} ({e.lower:.3f}, {e.upper:.3f})"
        rows.append(row)
    table = pd.DataFrame(rows)
    ok = table["converged"] == "yes"
    for col in ("AIC", "BIC"):
        best = table.loc[ok, col].min() if ok.any() else np.nan
        table[f"d{col}"] = table[col] - best
    return table.sort_values("AIC", kind="stable").reset_index(drop=True)
