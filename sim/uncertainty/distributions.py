"""Distributions for uncertain inputs: frozen data classes with a mean, a 95% interval, a density
(for a preview) and a vectorised quantile function through which every draw is made.

Univariate families (:class:`Beta`, :class:`Gamma`, :class:`LogNormal`, :class:`Normal` optionally
truncated, :class:`Uniform`, :class:`Triangular`) map uniforms ``u`` in (0, 1) to values by their
quantile function (inverse-CDF sampling), so that a draw depends only on its own uniform. The
groups map a row of uniforms to a vector: :class:`Dirichlet` (shares summing to 1: independent
gamma variates by their quantile function, normalised) and :class:`MultivariateNormal` (a
correlated group: standard normal quantiles times a Cholesky factor of the covariance, plus the
mean, then each element back from its estimation scale: identity, log or logit).

Parameterisations (the scenario keys of the same names; scipy's equivalent in brackets, used by the
tests as the independent reference):

======================  =============================================  ===============================
family                  density                                        scipy.stats
======================  =============================================  ===============================
Beta(alpha, beta)       x^(a-1) (1-x)^(b-1) / B(a, b) on (0, 1)        ``beta(a, b)``
Gamma(shape, scale)     x^(k-1) e^(-x/s) / (Gamma(k) s^k) on (0, inf)  ``gamma(k, scale=s)``
LogNormal(mu, sigma)    ln X ~ N(mu, sigma^2)                          ``lognorm(sigma, scale=e^mu)``
Normal(mean, sd, l, h)  N(mean, sd^2) restricted to [l, h]             ``truncnorm`` / ``norm``
Uniform(low, high)      1 / (high - low)                               ``uniform(low, high-low)``
Triangular(l, m, h)     rising on [l, m], falling on [m, h]            ``triang((m-l)/(h-l), l, h-l)``
Dirichlet(alpha)        prod x_k^(a_k - 1) / B(alpha) on the simplex   ``dirichlet(alpha)``
MultivariateNormal      N(mean, covariance) on the estimation scale    ``multivariate_normal``
======================  =============================================  ===============================

Parameters are checked once, at construction: a bad one raises
:class:`sim.problems.ValidationError` whose problem names the parameter (the key of the same name),
the value and the rule. See docs/methods.md, 'Parameter uncertainty'.

References
----------
.. [1] Briggs A, Claxton K, Sculpher M. Decision Modelling for Health Economic Evaluation. Oxford
   University Press; 2006. Chapter 4.
"""

from __future__ import annotations

import abc
import math
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from ..problems import NO_VALUE, Problem, ValidationError

__all__ = ["Distribution", "Univariate", "Beta", "Gamma", "LogNormal", "Normal", "Uniform", "Triangular",
           "DistributionError"]



class DistributionError(ValidationError):
    """A distribution's parameters are outside their domain (a :class:`sim.problems.ValidationError`
    whose problems name the parameter key, the value and the rule)."""


def _fail(key: Any, rule: str, value: Any = NO_VALUE) -> DistributionError:
    path = key if isinstance(key, tuple) else (key,)
    return DistributionError(problems=[Problem(path, rule, value)])


def _real(key: str, value: Any, *, positive: bool = False) -> float:
    """``value`` as a finite float (``> 0`` when ``positive``); bools and text are refused."""
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise _fail(key, "must be a number", value)
    v = float(value)
    if not math.isfinite(v):
        raise _fail(key, "must be finite", value)
    if positive and not v > 0:
        raise _fail(key, "must be > 0", value)
    return v


def _uniforms(u: ArrayLike) -> np.ndarray:
    arr = np.asarray(u, dtype=np.float64)
    if not np.all((arr > 0) & (arr < 1)):
        raise ValueError("uniforms must lie strictly between 0 and 1")
    return arr


class Distribution(abc.ABC):
    """What every distribution offers: its size (1 for a univariate one), the means of its elements
    and the 2.5% and 97.5% quantiles of each element, its native parameters (for reports), and the
    values for a block of uniforms (:meth:`transform`)."""

    family: ClassVar[str]

    @property
    @abc.abstractmethod
    def size(self) -> int:
        """Number of parameters the distribution gives values to."""

    @abc.abstractmethod
    def means(self) -> np.ndarray:
        """The mean of each element (shape ``(size,)``)."""

    @abc.abstractmethod
    def intervals(self, level: float = 0.95) -> np.ndarray:
        """Equal-tailed interval of each element (shape ``(size, 2)``)."""

    @abc.abstractmethod
    def transform(self, u: ArrayLike) -> np.ndarray:
        """Values for uniforms ``u`` of shape ``(n, size)`` in (0, 1): shape ``(n, size)``."""

    @abc.abstractmethod
    def parameters(self) -> dict[str, Any]:
        """The native parameters by key (as the scenario file writes them)."""

    def describe(self) -> str:
        """``beta(alpha=12.3, beta=2.1)``."""
        def fmt(v: Any) -> str:
            if isinstance(v, (tuple, list)):
                return "[" + ", ".join(fmt(x) for x in v) + "]"
            return f"{v:.6g}" if isinstance(v, float) else str(v)
        return f"{self.family}(" + ", ".join(f"{k}={fmt(v)}" for k, v in self.parameters().items()) + ")"


# ============================================================================== univariate
class Univariate(Distribution):
    """A distribution of one parameter. Subclasses give :meth:`ppf` (the quantile function),
    :meth:`pdf`, :attr:`mean`, :attr:`support` (``(low, high)``, inclusive when
    :attr:`closed` says so) and :meth:`parameters`."""

    closed: ClassVar[tuple[bool, bool]] = (False, False)
    """Whether a draw can take the lower and upper end of :attr:`support` (bounded families: yes;
    families whose density vanishes at a natural bound, e.g. a gamma at 0: no)."""

    @property
    def size(self) -> int:
        return 1

    @property
    @abc.abstractmethod
    def mean(self) -> float:
        """The mean."""

    @property
    @abc.abstractmethod
    def support(self) -> tuple[float, float]:
        """Smallest and largest value a draw can take (may be infinite)."""

    @abc.abstractmethod
    def ppf(self, u: ArrayLike) -> np.ndarray:
        """The quantile function at ``u`` in (0, 1), vectorised."""

    @abc.abstractmethod
    def pdf(self, x: ArrayLike) -> np.ndarray:
        """The density at ``x``, vectorised (0 outside the support)."""

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        """Equal-tailed interval: the ``(1 - level)/2`` and ``(1 + level)/2`` quantiles."""
        tail = (1.0 - level) / 2.0
        lo, hi = self.ppf(np.array([tail, 1.0 - tail]))
        return float(lo), float(hi)

    def sample(self, u: ArrayLike) -> np.ndarray:
        """Values for uniforms ``u`` (inverse-CDF sampling): the same as :meth:`ppf`."""
        return self.ppf(_uniforms(u))

    def means(self) -> np.ndarray:
        return np.array([self.mean])

    def intervals(self, level: float = 0.95) -> np.ndarray:
        return np.array([self.interval(level)])

    def transform(self, u: ArrayLike) -> np.ndarray:
        return self.ppf(_uniforms(u))


@dataclass(frozen=True)
class Beta(Univariate):
    """Beta(alpha, beta) on (0, 1): mean ``alpha / (alpha + beta)``. Utilities and probabilities."""

    alpha: float
    beta: float
    family: ClassVar[str] = "beta"

    def __post_init__(self) -> None:
        object.__setattr__(self, "alpha", _real("alpha", self.alpha, positive=True))
        object.__setattr__(self, "beta", _real("beta", self.beta, positive=True))

    @property
    def mean(self) -> float:
        return self.alpha / (self.alpha + self.beta)

    @property
    def support(self) -> tuple[float, float]:
        return 0.0, 1.0

    def ppf(self, u: ArrayLike) -> np.ndarray:
        return special.betaincinv(self.alpha, self.beta, np.asarray(u, dtype=np.float64))

    def pdf(self, x: ArrayLike) -> np.ndarray:
        x = np.asarray(x, dtype=np.float64)
        inside = (x > 0) & (x < 1)
        xc = np.where(inside, x, 0.5)
        with np.errstate(divide="ignore", over="ignore"):
            log = (special.xlogy(self.alpha - 1, xc) + special.xlog1py(self.beta - 1, -xc)
                   - special.betaln(self.alpha, self.beta))
            return np.where(inside, np.exp(log), 0.0)

    def parameters(self) -> dict[str, Any]:
        return {"alpha": self.alpha, "beta": self.beta}


@dataclass(frozen=True)
class Gamma(Univariate):
    """Gamma(shape, scale) on (0, inf): mean ``shape * scale``. Costs and rates."""

    shape: float
    scale: float
    family: ClassVar[str] = "gamma"

    def __post_init__(self) -> None:
        object.__setattr__(self, "shape", _real("shape", self.shape, positive=True))
        object.__setattr__(self, "scale", _real("scale", self.scale, positive=True))

    @property
    def mean(self) -> float:
        return self.shape * self.scale

    @property
    def support(self) -> tuple[float, float]:
        return 0.0, math.inf

    def ppf(self, u: ArrayLike) -> np.ndarray:
        with np.errstate(over="ignore"):
            return self.scale * special.gammaincinv(self.shape, np.asarray(u, dtype=np.float64))

    def pdf(self, x: ArrayLike) -> np.ndarray:
        x = np.asarray(x, dtype=np.float64) / self.scale
        inside = (x > 0) & (x < np.inf)
        xc = np.where(inside, x, 1.0)
        with np.errstate(divide="ignore", over="ignore"):
            log = special.xlogy(self.shape - 1, xc) - xc - special.gammaln(self.shape)
            return np.where(inside, np.exp(log), 0.0) / self.scale

    def parameters(self) -> dict[str, Any]:
        return {"shape": self.shape, "scale": self.scale}


@dataclass(frozen=True)
class LogNormal(Univariate):
    """Log-normal: ``ln X ~ N(mu, sigma^2)``, mean ``exp(mu + sigma^2 / 2)``. Hazard and rate ratios."""

    mu: float
    sigma: float
    family: ClassVar[str] = "lognormal"

    def __post_init__(self) -> None:
        object.__setattr__(self, "mu", _real("mu", self.mu))
        object.__setattr__(self, "sigma", _real("sigma", self.sigma, positive=True))

    @property
    def mean(self) -> float:
        try:
            return math.exp(self.mu + self.sigma ** 2 / 2.0)
        except OverflowError:
            return math.inf

    @property
    def support(self) -> tuple[float, float]:
        return 0.0, math.inf

    def ppf(self, u: ArrayLike) -> np.ndarray:
        with np.errstate(over="ignore"):
            return np.exp(self.mu + self.sigma * special.ndtri(np.asarray(u, dtype=np.float64)))

    def pdf(self, x: ArrayLike) -> np.ndarray:
        x = np.asarray(x, dtype=np.float64)
        inside = (x > 0) & (x < np.inf)
        xc = np.where(inside, x, 1.0)
        z = (np.log(xc) - self.mu) / self.sigma
        return np.where(inside, np.exp(-0.5 * z * z) / (xc * self.sigma * math.sqrt(2 * math.pi)), 0.0)

    def parameters(self) -> dict[str, Any]:
        return {"mu": self.mu, "sigma": self.sigma}


@dataclass(frozen=True)
class Normal(Univariate):
    """Normal N(mean, sd^2), optionally truncated to ``[low, high]`` (either may be infinite).

    With truncation, ``mean`` and ``sd`` are those of the normal before truncation; :attr:`mean` is
    the truncated distribution's: ``m + sd (phi(a) - phi(b)) / (Phi(b) - Phi(a))`` with
    ``a = (low - m)/sd``, ``b = (high - m)/sd``. Quantiles by ``m + sd Phi^-1(Phi(a) + u (Phi(b) -
    Phi(a)))``, evaluated on the reflected side when the interval lies above the mean so that the
    upper tail keeps its precision.
    """

    location: float
    sd: float
    low: float = -math.inf
    high: float = math.inf
    family: ClassVar[str] = "normal"

    def __post_init__(self) -> None:
        object.__setattr__(self, "location", _real("mean", self.location))
        object.__setattr__(self, "sd", _real("sd", self.sd, positive=True))
        for key in ("low", "high"):
            v = getattr(self, key)
            if isinstance(v, (bool, np.bool_)) or not isinstance(v, (int, float, np.integer, np.floating)) \
                    or math.isnan(v):
                raise _fail(key, "must be a number", v)
            object.__setattr__(self, key, float(v))
        if not self.low < self.high:
            raise _fail("high", f"must be > low ({self.low:g})", self.high)
        a, b = self._ab()
        if self._mass(a, b) <= 1e-300:
            raise _fail(("low",), f"[low, high] holds no probability of N({self.location:g}, {self.sd:g}^2) "
                                  f"(more than 37 standard deviations from the mean)", self.low)

    @property
    def truncated(self) -> bool:
        return math.isfinite(self.low) or math.isfinite(self.high)

    def _ab(self) -> tuple[float, float]:
        return (self.low - self.location) / self.sd, (self.high - self.location) / self.sd

    @staticmethod
    def _mass(a: float, b: float) -> float:
        if a > 0:  # the interval lies above the mean: upper tails
            return float(special.ndtr(-a) - special.ndtr(-b))
        return float(special.ndtr(b) - special.ndtr(a))

    @property
    def mean(self) -> float:
        if not self.truncated:
            return self.location
        a, b = self._ab()
        phi = lambda z: 0.0 if math.isinf(z) else math.exp(-0.5 * z * z) / math.sqrt(2 * math.pi)  # noqa: E731
        return self.location + self.sd * (phi(a) - phi(b)) / self._mass(a, b)

    @property
    def support(self) -> tuple[float, float]:
        return self.low, self.high

    @property
    def closed(self) -> tuple[bool, bool]:  # type: ignore[override]
        return math.isfinite(self.low), math.isfinite(self.high)

    def ppf(self, u: ArrayLike) -> np.ndarray:
        u = np.asarray(u, dtype=np.float64)
        if not self.truncated:
            with np.errstate(over="ignore", invalid="ignore"):
                return self.location + self.sd * special.ndtri(u)
        a, b = self._ab()
        if a > 0:  # reflect: quantile 1 - u of the interval [-b, -a]
            sa, sb = special.ndtr(-a), special.ndtr(-b)
            z = -special.ndtri(sa - u * (sa - sb))
        else:
            pa, pb = special.ndtr(a), special.ndtr(b)
            z = special.ndtri(pa + u * (pb - pa))
        with np.errstate(over="ignore", invalid="ignore"):
            return np.clip(self.location + self.sd * z, self.low, self.high)

    def pdf(self, x: ArrayLike) -> np.ndarray:
        x = np.asarray(x, dtype=np.float64)
        z = (x - self.location) / self.sd
        dens = np.exp(-0.5 * z * z) / (self.sd * math.sqrt(2 * math.pi))
        if not self.truncated:
            return dens
        a, b = self._ab()
        return np.where((x >= self.low) & (x <= self.high), dens / self._mass(a, b), 0.0)

    def parameters(self) -> dict[str, Any]:
        out: dict[str, Any] = {"mean": self.location, "sd": self.sd}
        if math.isfinite(self.low):
            out["low"] = self.low
        if math.isfinite(self.high):
            out["high"] = self.high
        return out


@dataclass(frozen=True)
class Uniform(Univariate):
    """Uniform on ``[low, high]``."""

    low: float
    high: float
    family: ClassVar[str] = "uniform"
    closed: ClassVar[tuple[bool, bool]] = (True, True)

    def __post_init__(self) -> None:
        object.__setattr__(self, "low", _real("low", self.low))
        object.__setattr__(self, "high", _real("high", self.high))
        if not self.high > self.low:
            raise _fail("high", f"must be > low ({self.low:g})", self.high)
        if not math.isfinite(self.high - self.low):
            raise _fail("high", "high - low must be a finite number", self.high)

    @property
    def mean(self) -> float:
        return (self.low + self.high) / 2.0

    @property
    def support(self) -> tuple[float, float]:
        return self.low, self.high

    def ppf(self, u: ArrayLike) -> np.ndarray:
        return self.low + (self.high - self.low) * np.asarray(u, dtype=np.float64)

    def pdf(self, x: ArrayLike) -> np.ndarray:
        x = np.asarray(x, dtype=np.float64)
        return np.where((x >= self.low) & (x <= self.high), 1.0 / (self.high - self.low), 0.0)

    def parameters(self) -> dict[str, Any]:
        return {"low": self.low, "high": self.high}


@dataclass(frozen=True)
class Triangular(Univariate):
    """Triangular on ``[low, high]`` with its peak at ``mode``: mean ``(low + mode + high) / 3``;
    quantile ``low + sqrt(u (high - low)(mode - low))`` for ``u < c``, else
    ``high - sqrt((1 - u)(high - low)(high - mode))``, with ``c = (mode - low)/(high - low)``."""

    low: float
    mode: float
    high: float
    family: ClassVar[str] = "triangular"
    closed: ClassVar[tuple[bool, bool]] = (True, True)

    def __post_init__(self) -> None:
        for key in ("low", "mode", "high"):
            object.__setattr__(self, key, _real(key, getattr(self, key)))
        if not self.high > self.low:
            raise _fail("high", f"must be > low ({self.low:g})", self.high)
        if not math.isfinite(self.high - self.low):
            raise _fail("high", "high - low must be a finite number", self.high)
        if not self.low <= self.mode <= self.high:
            raise _fail("mode", f"must lie between low ({self.low:g}) and high ({self.high:g})", self.mode)

    @property
    def mean(self) -> float:
        return (self.low + self.mode + self.high) / 3.0

    @property
    def support(self) -> tuple[float, float]:
        return self.low, self.high

    def ppf(self, u: ArrayLike) -> np.ndarray:
        u = np.asarray(u, dtype=np.float64)
        width = self.high - self.low
        c = (self.mode - self.low) / width
        left = self.low + np.sqrt(u * width * (self.mode - self.low))
        right = self.high - np.sqrt((1.0 - u) * width * (self.high - self.mode))
        return np.where(u < c, left, right)

    def pdf(self, x: ArrayLike) -> np.ndarray:
        x = np.asarray(x, dtype=np.float64)
        width = self.high - self.low
        with np.errstate(divide="ignore", invalid="ignore"):
            up = np.where(self.mode > self.low, 2 * (x - self.low) / (width * (self.mode - self.low)), 0.0)
            down = np.where(self.high > self.mode, 2 * (self.high - x) / (width * (self.high - self.mode)), 0.0)
        out = np.where(x < self.mode, up, down)
        if self.mode == self.low:
            out = np.where(x == self.low, 2.0 / width, out)
        return np.where((x >= self.low) & (x <= self.high), out, 0.0)

    def parameters(self) -> dict[str, Any]:
        return {"low": self.low, "mode": self.mode, "high": self.high}
