"""The generalized gamma distribution of Cox, Chu, Schneider & Muñoz (2007) as a hazard (hazard,
cumulative hazard, survival), for fitting only: it is not a scenario family
(docs/methods.md, 'Survival fits from trial evidence')."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import special as sc

__all__ = ["GeneralizedGamma"]

_Q_LOGNORMAL = 1e-6  # |Q| below this: the log-normal limit (Q -> 0)


@dataclass(frozen=True)
class GeneralizedGamma:
    """Generalized gamma event time (Cox et al. 2007 parameterisation).

    Parameters
    ----------
    mu : float
        Location of log time.
    sigma : float
        Scale of log time, ``> 0``.
    q : float
        Shape ``Q``: ``Q = 1`` Weibull (shape ``1/sigma``, scale ``exp(mu)``), ``Q = sigma`` gamma,
        ``Q = 0`` log-normal.

    Notes
    -----
    With :math:`w = (\\log t - \\mu)/\\sigma`, :math:`a = Q^{-2}` and :math:`u = a e^{Q w}`:
    :math:`f(t) = |Q| u^{a} e^{-u} / (\\sigma t \\Gamma(a))`; :math:`S(t) = Q(a, u)` (upper
    regularised incomplete gamma) for :math:`Q > 0` and :math:`P(a, u)` for :math:`Q < 0`; the
    log-normal :math:`S = \\Phi(-w)` at :math:`Q = 0`. Cox C, Chu H, Schneider MF, Muñoz A.
    Parametric survival analysis and taxonomy of hazard functions for the generalized gamma
    distribution. Stat Med 2007;26:4352-4374. The same parameterisation as lifelines'
    ``GeneralizedGammaFitter`` (``mu_``, ``exp(ln_sigma_)``, ``lambda_``).
    """

    mu: float
    sigma: float
    q: float
    family = "gengamma"

    def params(self) -> dict[str, float]:
        return {"mu": self.mu, "sigma": self.sigma, "q": self.q}

    def _w(self, t: NDArray[np.float64]) -> NDArray[np.float64]:
        with np.errstate(divide="ignore"):
            return (np.log(t) - self.mu) / self.sigma

    def log_sf(self, t: ArrayLike) -> NDArray[np.float64]:
        """:math:`\\log S(t)`."""
        w = self._w(np.asarray(t, dtype=np.float64))
        q = self.q
        if abs(q) < _Q_LOGNORMAL:
            return sc.log_ndtr(-w)
        a = 1.0 / (q * q)
        with np.errstate(over="ignore", divide="ignore"):
            u = a * np.exp(q * w)
            s = sc.gammaincc(a, u) if q > 0 else sc.gammainc(a, u)
            return np.log(s)

    def log_hazard(self, t: ArrayLike) -> NDArray[np.float64]:
        """:math:`\\log h(t) = \\log f(t) - \\log S(t)`."""
        t = np.asarray(t, dtype=np.float64)
        w = self._w(t)
        q = self.q
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            if abs(q) < _Q_LOGNORMAL:
                log_f = -0.5 * w * w - 0.5 * math.log(2.0 * math.pi) - math.log(self.sigma) - np.log(t)
            else:
                a = 1.0 / (q * q)
                log_u = math.log(a) + q * w
                log_f = (math.log(abs(q)) - math.log(self.sigma) - np.log(t) - sc.gammaln(a)
                         + a * log_u - np.exp(log_u))
            return log_f - self.log_sf(t)

    def hazard(self, t: ArrayLike) -> NDArray[np.float64]:
        return np.exp(self.log_hazard(t))

    def cumhazard(self, t: ArrayLike) -> NDArray[np.float64]:
        return -self.log_sf(t)

    def sf(self, t: ArrayLike) -> NDArray[np.float64]:
        return np.exp(self.log_sf(t))
