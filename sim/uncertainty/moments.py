"""Method-of-moments fits: the parameters of a distribution with a stated mean and standard error
(Briggs, Claxton & Sculpher 2006, Decision Modelling for Health Economic Evaluation, ch. 4).

=============  =====================================================================================
family         parameters from mean ``m`` and standard error ``s``
=============  =====================================================================================
beta           ``alpha = m (m (1 - m) / s^2 - 1)``, ``beta = (1 - m)(m (1 - m) / s^2 - 1)``;
               needs ``0 < m < 1`` and ``s^2 < m (1 - m)``
gamma          ``shape = m^2 / s^2``, ``scale = s^2 / m``; needs ``m > 0``
log-normal     ``sigma^2 = ln(1 + s^2 / m^2)``, ``mu = ln m - sigma^2 / 2``; needs ``m > 0``; or from a 95%
               interval ``[l, h]``: ``mu = (ln l + ln h) / 2``, ``sigma = (ln h - ln l) / (2 z_0.975)``
normal         ``mean = m``, ``sd = s``
Dirichlet      ``alpha_k = m_k n`` from mean shares ``m_k`` (summing to 1) and a sample size ``n``
=============  =====================================================================================

Each fit returns the distribution (whose :meth:`~.distributions.Distribution.parameters` report
the result); its mean and standard deviation are ``m`` and ``s`` exactly, up to rounding. A mean or
standard error the family cannot have raises :class:`~.distributions.DistributionError` naming
``mean`` or ``se``, the value and the rule. See docs/methods.md, 'Parameter uncertainty'.

References
----------
.. [1] Briggs A, Claxton K, Sculpher M. Decision Modelling for Health Economic Evaluation. Oxford
   University Press; 2006. Chapter 4.
"""

from __future__ import annotations

import math
from typing import Any, Sequence

import numpy as np
from scipy.special import ndtri as _ndtri

from .distributions import Beta, DistributionError, Gamma, LogNormal, Normal, _fail, _real
from .groups import Dirichlet, MultivariateNormal

__all__ = ["beta_from_mean_se", "gamma_from_mean_se", "lognormal_from_mean_se", "normal_from_mean_se",
           "dirichlet_from_shares", "lognormal_from_interval", "mvn_from_correlation", "MOMENT_FITS"]


def _finite(family: str, build, se: float):
    """``build()``, or the error at ``se`` when the fit's parameters leave the range of a double."""
    try:
        return build()
    except (DistributionError, OverflowError, ZeroDivisionError, ValueError):
        raise _fail("se", f"gives {family} parameters beyond the range of floating point numbers; "
                          f"state the mean and standard error in other units", se) from None


def beta_from_mean_se(mean: float, se: float) -> Beta:
    """Beta with mean ``mean`` and standard deviation ``se``.

    ``alpha + beta = m (1 - m) / s^2 - 1`` (the variance of a beta is ``m (1 - m) / (alpha + beta +
    1)``), so ``s`` must be below ``sqrt(m (1 - m))``.
    """
    m = _real("mean", mean)
    s = _real("se", se, positive=True)
    if not 0.0 < m < 1.0:
        raise _fail("mean", "must lie strictly between 0 and 1 for a beta distribution", mean)
    limit = math.sqrt(m * (1.0 - m))
    if not s < limit:
        raise _fail("se", f"must be < sqrt(mean (1 - mean)) = {limit:.4g} for a beta distribution with mean "
                          f"{m:g} (the largest spread a beta with this mean can have)", se)
    total = math.exp(math.log(m * (1.0 - m)) - 2.0 * math.log(s)) - 1.0 if s < 1e-100 else \
        m * (1.0 - m) / (s * s) - 1.0
    return _finite("beta", lambda: Beta(m * total, (1.0 - m) * total), se)


def gamma_from_mean_se(mean: float, se: float) -> Gamma:
    """Gamma with mean ``mean`` and standard deviation ``se``: shape ``m^2/s^2``, scale ``s^2/m``."""
    m = _real("mean", mean)
    s = _real("se", se, positive=True)
    if not m > 0:
        raise _fail("mean", "must be > 0 for a gamma distribution", mean)
    log_ratio = math.log(m) - math.log(s)  # shape = (m/s)^2, scale = s (s/m), in logs: no overflow
    return _finite("gamma", lambda: Gamma(math.exp(2.0 * log_ratio), s * math.exp(-log_ratio)), se)


def lognormal_from_mean_se(mean: float, se: float) -> LogNormal:
    """Log-normal with mean ``mean`` and standard deviation ``se`` (of the value, not of its log):
    ``sigma^2 = ln(1 + s^2/m^2)``, ``mu = ln m - sigma^2/2``."""
    m = _real("mean", mean)
    s = _real("se", se, positive=True)
    if not m > 0:
        raise _fail("mean", "must be > 0 for a log-normal distribution", mean)
    log_ratio = math.log(s) - math.log(m)
    var_log = math.log1p(math.exp(2.0 * log_ratio)) if log_ratio < 300 else 2.0 * log_ratio  # ln(1 + r^2)
    return _finite("lognormal", lambda: LogNormal(math.log(m) - var_log / 2.0, math.sqrt(var_log)), se)


def normal_from_mean_se(mean: float, se: float) -> Normal:
    """Normal with mean ``mean`` and standard deviation ``se`` (no truncation)."""
    return Normal(_real("mean", mean), _real("se", se, positive=True))


def dirichlet_from_shares(mean: Sequence[float], sample_size: float) -> Dirichlet:
    """Dirichlet with mean shares ``mean`` (summing to 1 within 1e-9) and concentration
    ``sample_size`` (``alpha_k = m_k n``: the shares as counts out of ``n`` observations)."""
    if isinstance(mean, (str, bytes)) or np.ndim(mean) != 1 or len(mean) < 2:
        raise _fail("mean", "must be a list of at least 2 shares", mean)
    shares = [_real(("mean", i), v, positive=True) for i, v in enumerate(mean)]
    total = math.fsum(shares)
    if abs(total - 1.0) > 1e-9:
        raise _fail("mean", f"shares must sum to 1 (they sum to {total:.12g})", list(mean))
    n = _real("sample_size", sample_size, positive=True)
    return Dirichlet(tuple(m * n for m in shares))


def lognormal_from_interval(interval: Sequence[float], level: float = 0.95) -> LogNormal:
    """Log-normal whose equal-tailed ``level`` interval is ``[low, high]`` (a hazard ratio reported
    with its 95% confidence interval, read as symmetric on the log scale; common practice, no
    source): ``mu = (ln low + ln high) / 2``, ``sigma = (ln high - ln low) / (2 z)``, ``z`` the
    ``(1 + level)/2`` normal quantile. Its median is ``sqrt(low high)``."""
    if isinstance(interval, (str, bytes)) or np.ndim(interval) != 1 or len(interval) != 2:
        raise _fail("interval", "must be a list of 2 numbers [low, high]", interval)
    low = _real(("interval", 0), interval[0], positive=True)
    high = _real(("interval", 1), interval[1], positive=True)
    if not high > low:
        raise _fail(("interval", 1), f"must be > the interval's low end ({low:g})", interval[1])
    z = float(_ndtri((1.0 + level) / 2.0))
    log_low, log_high = math.log(low), math.log(high)
    return LogNormal((log_low + log_high) / 2.0, (log_high - log_low) / (2.0 * z))


def mvn_from_correlation(mean: Sequence[float], se: Sequence[float], correlation: Any,
                         transforms: Sequence[str] = ()) -> MultivariateNormal:
    """Multivariate normal from standard errors ``s`` and a correlation matrix ``R`` (both on the
    estimation scale): covariance ``diag(s) R diag(s)``. ``R`` must be symmetric with a unit
    diagonal, entries in [-1, 1], and positive semi-definite (reported at ``correlation``)."""
    n = len(mean) if not isinstance(mean, (str, bytes)) and np.ndim(mean) == 1 else 0
    if isinstance(se, (str, bytes)) or np.ndim(se) != 1 or len(se) != n:
        raise _fail("se", f"must be a list of {n} standard errors, one per parameter", se)
    s = np.array([_real(("se", i), v, positive=True) for i, v in enumerate(se)])
    try:
        r = np.array(correlation, dtype=np.float64)
    except (TypeError, ValueError):
        r = np.zeros((0, 0))
    if r.shape != (n, n) or not np.all(np.isfinite(r)):
        raise _fail("correlation", f"must be a {n} x {n} table of numbers (a list of {n} lists)", correlation)
    if not np.array_equal(np.diag(r), np.ones(n)):
        i = int(np.argmax(np.diag(r) != 1.0))
        raise _fail(("correlation", i, i), "must be 1 (a correlation matrix has a unit diagonal)", float(r[i, i]))
    if np.any(np.abs(r) > 1):
        i, j = np.argwhere(np.abs(r) > 1)[0]
        raise _fail(("correlation", int(i), int(j)), "must lie between -1 and 1", float(r[i, j]))
    if not np.array_equal(r, r.T):
        i, j = np.argwhere(r != r.T)[0]
        raise _fail(("correlation", int(i), int(j)), f"must equal correlation[{j}][{i}] (symmetric)", float(r[i, j]))
    w = np.linalg.eigvalsh(r)
    if w[0] < -1e-10:
        raise _fail("correlation", f"must be positive semi-definite (its smallest eigenvalue is {w[0]:.4g})",
                    [list(map(float, row)) for row in r])
    with np.errstate(over="ignore"):
        cov = r * np.outer(s, s)
    if not np.all(np.isfinite(cov)):
        raise _fail("se", "gives covariances beyond the range of floating point numbers", list(se))
    return MultivariateNormal(tuple(mean), tuple(map(tuple, cov)), tuple(transforms))


MOMENT_FITS: dict[str, Any] = {"beta": beta_from_mean_se, "gamma": gamma_from_mean_se,
                               "lognormal": lognormal_from_mean_se, "normal": normal_from_mean_se}
"""The families that take ``mean`` and ``se``, with their fit."""
