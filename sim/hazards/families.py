"""Hazard families in continuous time: hazard, cumulative hazard, survival and exact sampling.

Every family describes a non-negative hazard :math:`h(t)` on a clock :math:`t \\ge 0` measured in
**years**, with cumulative hazard :math:`H(t) = \\int_0^t h(s)\\,ds` and survival
:math:`S(t) = \\exp(-H(t))` (METHODS.md section 2). All methods are vectorised: arguments broadcast
with numpy rules and results are float64 ndarrays (0-d for scalar input).

Sampling uses inverse cumulative hazard sampling (Bender, Augustin & Blettner 2005): with
:math:`E \\sim \\mathrm{Exp}(1)` the event time is :math:`T = H^{-1}(E)`, and given the clock already
reads :math:`x` (left truncation, e.g. current age) :math:`T = H^{-1}(H(x) + E) - x`.
:meth:`Hazard.conditional_time` evaluates the latter in a form free of the cancellation in
``H(x) + E`` and in ``... - x`` (closed forms per family; safeguarded Newton iterations where no
closed form exists).

Conventions
-----------
* Inverse cumulative hazard: :math:`H^{-1}(y) = \\inf\\{t \\ge 0 : H(t) > y\\}`, with
  :math:`\\inf \\emptyset = +\\infty`. So :math:`H^{-1}(y) = +\\infty` exactly when
  :math:`y \\ge H(\\infty)` (improper families, e.g. Gompertz with a negative shape, or a zero
  hazard), and a stretch of zero hazard is skipped rather than stopped at.
* Conditional time: :math:`\\inf\\{t \\ge 0 : H(x + t) - H(x) > e\\}`. It is ``0`` for ``e = 0``
  whenever the hazard is positive just after ``x`` and ``+inf`` when the event never happens. It is
  never NaN and never negative.
* Proportional hazards: ``h.scaled(hr)`` has cumulative hazard ``hr * H``, hence
  ``conditional_time(x, e / hr)`` of the base (Bender et al. 2005).
* Parameters are checked once, at construction, and raise :class:`HazardParameterError` naming the
  family, the parameter, the value received and the rule.

References
----------
.. [1] Bender R, Augustin T, Blettner M. Generating survival times to simulate Cox proportional
   hazards models. Stat Med 2005;24(11):1713-1723.
.. [2] Crowther MJ, Lambert PC. Simulating biologically plausible complex survival data.
   Stat Med 2013;32(23):4118-4134.
.. [3] Finch CE, Pike MC, Witten M. Slow mortality rate accelerations during aging in some animals
   approximate that of humans. Science 1990;249:902-905.
"""

from __future__ import annotations

import abc
import math
import numbers
from collections.abc import Mapping
from dataclasses import MISSING, dataclass, field, fields
from types import MappingProxyType
from typing import Any, ClassVar

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import special as sc

__all__ = [
    "FAMILIES",
    "Exponential",
    "Gamma",
    "Gompertz",
    "GompertzMakeham",
    "Hazard",
    "HazardParameterError",
    "LogLogistic",
    "LogNormal",
    "PiecewiseConstant",
    "ProportionalHazards",
    "Weibull",
    "make_hazard",
]

FloatArray = NDArray[np.float64]


class HazardParameterError(ValueError):
    """A hazard family received a parameter outside its domain, or an unknown family/parameter."""


# --------------------------------------------------------------------------------------------
# Parameter and argument checking
# --------------------------------------------------------------------------------------------

_RULES = {
    "positive": ("> 0 and finite", lambda v: v > 0.0 and math.isfinite(v)),
    "nonnegative": (">= 0 and finite", lambda v: v >= 0.0 and math.isfinite(v)),
    "finite": ("finite", math.isfinite),
}


def _param(family: str, name: str, value: Any, rule: str) -> float:
    """Return ``value`` as a float after checking it against ``rule`` (a key of ``_RULES``)."""
    text, ok = _RULES[rule]
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Real):
        raise HazardParameterError(f"{family}: {name} must be a real number ({text}), got {value!r}")
    v = float(value)
    if not ok(v):
        raise HazardParameterError(f"{family}: {name} must be {text}, got {v!r}")
    return v


def _nonnegative(method: str, name: str, a: ArrayLike, *, finite: bool = False) -> FloatArray:
    """Convert ``a`` to a float64 array and check ``a >= 0`` (and finite if asked); NaN is rejected."""
    arr = np.asarray(a, dtype=np.float64)
    ok = (arr >= 0.0) & (arr < np.inf) if finite else arr >= 0.0
    if not np.all(ok):
        bad = arr[~ok].flat[0]
        rule = "finite and >= 0" if finite else ">= 0 (inf allowed, NaN not)"
        raise ValueError(f"{method}: {name} must be {rule}, got {float(bad)!r}")
    return arr


# --------------------------------------------------------------------------------------------
# Stable elementary helpers (all vectorised, no warnings for valid input)
# --------------------------------------------------------------------------------------------

def _softplus(v: FloatArray) -> FloatArray:
    """log(1 + exp(v)), exact in both tails."""
    return np.logaddexp(0.0, v)


def _log1prel(v: FloatArray) -> FloatArray:
    """log1p(v) / v for v >= -1, equal to 1 at v = 0 and +inf at v = -1."""
    v = np.asarray(v, dtype=np.float64)
    out = np.ones_like(v)
    np.divide(np.log1p(v), v, out=out, where=v != 0.0)
    return out


def _log_expm1(y: FloatArray) -> FloatArray:
    """log(exp(y) - 1) for y >= 0 without overflow (-inf at y = 0)."""
    big = y > 1.0
    return np.where(big, y + np.log(-np.expm1(-np.maximum(y, 1.0))), np.log(np.expm1(np.minimum(y, 1.0))))


def _log_exprel(u: FloatArray) -> FloatArray:
    """log((exp(u) - 1) / u) for any real u, without overflow."""
    big = u > 1.0
    ub = np.maximum(u, 1.0)
    return np.where(big, ub + np.log(-np.expm1(-ub)) - np.log(ub), np.log(sc.exprel(np.minimum(u, 1.0))))


def _power_or_log(coef: float, u: FloatArray, p: float, log_u: FloatArray) -> FloatArray:
    """``coef * u**p``, falling back to ``exp(log(coef) + p * log_u)`` where ``u`` or ``u**p``
    over- or underflowed although the product may be finite and non-zero (``log_u`` is ``log u``
    computed without forming ``u``)."""
    out = coef * u**p
    redo = (np.isinf(out) | (out == 0.0)) & np.isfinite(log_u)
    if np.any(redo):
        out = np.where(redo, np.exp(math.log(coef) + p * log_u), out)
    return out


def _out(a: ArrayLike) -> FloatArray:
    """Final result as a float64 ndarray (0-d for scalar input); turns -0.0 into +0.0."""
    return np.asarray(np.asarray(a, dtype=np.float64) + 0.0)


# Gauss-Legendre rule on [0, 1] for increments of H over short intervals (nodes, weights).
_GL_X, _GL_W = np.polynomial.legendre.leggauss(12)
_GL_NODES = (0.5 * (_GL_X + 1.0))
_GL_WEIGHTS = 0.5 * _GL_W
_GL_NODES.setflags(write=False)
_GL_WEIGHTS.setflags(write=False)


# --------------------------------------------------------------------------------------------
# Base class
# --------------------------------------------------------------------------------------------

KERNEL_ERRSTATE = {"divide": "ignore", "over": "ignore", "under": "ignore"}
"""``np.errstate`` settings under which the public methods run the private kernels."""


class Hazard(abc.ABC):
    """Abstract hazard on a clock in years.

    Subclasses are frozen dataclasses whose fields are the named parameters. They implement the
    private ``_hazard``, ``_cumhazard`` and ``_inv_cumhazard`` (receiving validated float64 arrays)
    and the :attr:`cumhazard_limit` property; families with a closed-form conditional time override
    ``_conditional_time``. The public methods validate the arguments, silence the floating-point
    warnings that are part of the intended arithmetic (overflow to ``inf``, ``log(0) = -inf``) and
    return float64 ndarrays.

    Inside the package, hot loops (the engine's draws, the forward equations' right-hand side, the
    cohort traces' cycle rates) call the private kernels directly on float64 arrays that are valid by
    construction (clocks finite or +inf and >= 0), under :data:`KERNEL_ERRSTATE`: the values are
    those of the public methods, without their per-call checks and copies.
    """

    family: ClassVar[str]

    # ---- public API -----------------------------------------------------------------------
    def hazard(self, t: ArrayLike) -> FloatArray:
        """Hazard :math:`h(t)` for ``t >= 0`` (``+inf`` allowed); may be ``+inf`` at ``t = 0``."""
        t = _nonnegative(f"{self.family}.hazard", "t", t)
        with np.errstate(**KERNEL_ERRSTATE):
            return _out(self._hazard(t))

    def cumhazard(self, t: ArrayLike) -> FloatArray:
        """Cumulative hazard :math:`H(t)`; ``H(inf)`` equals :attr:`cumhazard_limit`."""
        t = _nonnegative(f"{self.family}.cumhazard", "t", t)
        with np.errstate(**KERNEL_ERRSTATE):
            return _out(self._cumhazard(t))

    def sf(self, t: ArrayLike) -> FloatArray:
        """Survival function :math:`S(t) = \\exp(-H(t))`."""
        t = _nonnegative(f"{self.family}.sf", "t", t)
        with np.errstate(**KERNEL_ERRSTATE):
            return _out(np.exp(-self._cumhazard(t)))

    def inv_cumhazard(self, y: ArrayLike) -> FloatArray:
        """Inverse cumulative hazard :math:`H^{-1}(y) = \\inf\\{t : H(t) > y\\}` for ``y >= 0``.

        ``+inf`` where ``y >= H(inf)`` (improper families or a zero hazard).
        """
        y = _nonnegative(f"{self.family}.inv_cumhazard", "y", y)
        with np.errstate(**KERNEL_ERRSTATE):
            return _out(self._inv_cumhazard(y))

    def conditional_time(self, x: ArrayLike, e: ArrayLike) -> FloatArray:
        """Time to the event given the clock reads ``x`` and a standard exponential draw ``e``.

        Parameters
        ----------
        x : array_like
            Current clock value(s), finite and ``>= 0``.
        e : array_like
            Standard exponential draw(s), ``>= 0`` (``+inf`` gives ``+inf``).

        Returns
        -------
        ndarray
            :math:`T = H^{-1}(H(x) + e) - x` in the broadcast shape of ``x`` and ``e``; ``>= 0``,
            ``+inf`` where the event never happens, never NaN.

        Notes
        -----
        Left-truncated inverse cumulative hazard sampling (METHODS.md section 2; Bender et al.
        2005). Each family evaluates it without forming ``H(x) + e`` or subtracting ``x`` where
        that would cancel.
        """
        x = _nonnegative(f"{self.family}.conditional_time", "x", x, finite=True)
        e = _nonnegative(f"{self.family}.conditional_time", "e", e)
        x, e = np.broadcast_arrays(x, e)
        with np.errstate(**KERNEL_ERRSTATE):
            return _out(self._conditional_time(x, e))

    def rvs(self, size: int | tuple[int, ...], rng: np.random.Generator) -> FloatArray:
        """Event times from clock 0: ``inv_cumhazard(E)`` with ``E`` standard exponential from ``rng``."""
        return self.inv_cumhazard(rng.standard_exponential(size))

    def scaled(self, hr: float) -> Hazard:
        """Proportional-hazards version with cumulative hazard ``hr * H``.

        Parameters
        ----------
        hr : float
            Hazard ratio, ``>= 0`` and finite. ``hr = 1`` returns ``self``; ``hr = 0`` gives a
            hazard whose event never happens.

        Returns
        -------
        Hazard
            A :class:`ProportionalHazards` wrapping ``self`` (or ``self`` when ``hr == 1``).
        """
        hr = _param(ProportionalHazards.family, "hr", hr, "nonnegative")
        if hr == 1.0:
            return self
        return ProportionalHazards(self, hr)

    @property
    @abc.abstractmethod
    def cumhazard_limit(self) -> float:
        """:math:`H(\\infty)`: ``inf`` for proper families, finite when the event may never happen."""

    @property
    def never_probability(self) -> float:
        """Probability that the event never happens from clock 0: :math:`\\exp(-H(\\infty))`."""
        return math.exp(-self.cumhazard_limit)

    @abc.abstractmethod
    def params(self) -> dict[str, Any]:
        """Named parameters (floats; tuples of floats for :class:`PiecewiseConstant`)."""

    # ---- family implementations ------------------------------------------------------------
    @abc.abstractmethod
    def _hazard(self, t: FloatArray) -> FloatArray: ...

    @abc.abstractmethod
    def _cumhazard(self, t: FloatArray) -> FloatArray: ...

    @abc.abstractmethod
    def _inv_cumhazard(self, y: FloatArray) -> FloatArray: ...

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        """Default for smooth families with ``h > 0`` on ``(0, inf)``: invert, then polish.

        ``T0 = H^{-1}(H(x) + e) - x`` is accurate in absolute terms. Where that loses relative
        accuracy (``T0`` or ``e`` small next to ``x`` or ``H(x)``) it is polished by Newton
        iterations on ``int_x^{x+T} h(s) ds = e``, the integral by 12-point Gauss-Legendre, which
        involves no cancellation (numerical integration and root finding as in Crowther & Lambert
        2013).
        """
        hx = self._cumhazard(x)
        t = self._inv_cumhazard(hx + e) - x
        t = np.where(e > 0.0, np.maximum(t, 0.0), 0.0)
        refine = (e > 0.0) & (t <= x) & ((t < 1e-3 * x) | (e < 1e-3 * hx))
        if np.any(refine):
            t = np.array(t, dtype=np.float64)
            t[refine] = self._polish(x[refine], e[refine], t[refine])
        return t

    def _increment(self, x: FloatArray, t: FloatArray) -> FloatArray:
        """H(x + t) - H(x) by Gauss-Legendre quadrature of h (for short intervals, t <= x)."""
        s = x[:, None] + t[:, None] * _GL_NODES
        return t * (self._hazard(s) @ _GL_WEIGHTS)

    def _polish(self, x: FloatArray, e: FloatArray, t0: FloatArray) -> FloatArray:
        """Newton on ``increment(x, T) = e`` from ``t0`` (1-D arrays); keeps ``t0`` if it fails."""
        first = e / self._hazard(x)  # first-order solution
        t = np.where((t0 > 0.5 * first) & (t0 < 2.0 * first), t0, first)
        for _ in range(30):
            with np.errstate(invalid="ignore"):
                step = (self._increment(x, t) - e) / self._hazard(x + t)
                new = np.clip(t - step, 0.5 * t, 2.0 * t)
            done = ~(np.abs(step) > 1e-10 * t)  # quadratic convergence: the next iterate is final
            t = np.where(np.isfinite(new), new, t)
            if np.all(done):
                break
        good = np.isfinite(t) & (t >= 0.0)
        return np.where(good, t, t0)


# --------------------------------------------------------------------------------------------
# Families
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Exponential(Hazard):
    """Constant hazard.

    Parameters
    ----------
    rate : float
        :math:`\\lambda \\ge 0` per year; ``0`` means the event never happens.

    Notes
    -----
    :math:`h(t) = \\lambda`, :math:`H(t) = \\lambda t`, :math:`H^{-1}(y) = y / \\lambda`,
    conditional time :math:`e / \\lambda` (memoryless). scipy: ``expon(scale=1/rate)``.
    """

    rate: float
    family: ClassVar[str] = "exponential"

    def __post_init__(self) -> None:
        object.__setattr__(self, "rate", _param(self.family, "rate", self.rate, "nonnegative"))

    @property
    def cumhazard_limit(self) -> float:
        return math.inf if self.rate > 0.0 else 0.0

    def params(self) -> dict[str, float]:
        return {"rate": self.rate}

    def _hazard(self, t: FloatArray) -> FloatArray:
        return np.full(t.shape, self.rate)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        return self.rate * t if self.rate > 0.0 else np.zeros(t.shape)

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return y / self.rate if self.rate > 0.0 else np.full(y.shape, np.inf)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        return e / self.rate if self.rate > 0.0 else np.full(e.shape, np.inf)


@dataclass(frozen=True)
class _ShapeScale(Hazard):
    """Shared parameters of the proper two-parameter families with a shape and a time scale
    (Weibull, log-logistic, gamma): both must be positive and finite."""

    shape: float
    scale: float

    def __post_init__(self) -> None:
        object.__setattr__(self, "shape", _param(self.family, "shape", self.shape, "positive"))
        object.__setattr__(self, "scale", _param(self.family, "scale", self.scale, "positive"))

    @property
    def cumhazard_limit(self) -> float:
        return math.inf

    def params(self) -> dict[str, float]:
        return {"shape": self.shape, "scale": self.scale}


@dataclass(frozen=True)
class Weibull(_ShapeScale):
    """Weibull hazard in the scale parameterisation.

    Parameters
    ----------
    shape : float
        :math:`k > 0`; ``k > 1`` rising hazard, ``k < 1`` falling (infinite at 0), ``k = 1`` constant.
    scale : float
        :math:`\\lambda > 0` in years (the time by which :math:`H = 1`, i.e. 63.2 % have the event).

    Notes
    -----
    :math:`H(t) = (t/\\lambda)^k`, :math:`h(t) = (k/\\lambda)(t/\\lambda)^{k-1}`,
    :math:`H^{-1}(y) = \\lambda y^{1/k}` (METHODS.md section 2). Bender et al. (2005) write
    :math:`H(t) = \\lambda_B t^{\\nu}`, i.e. :math:`\\nu = k` and :math:`\\lambda_B = \\lambda^{-k}`.
    scipy: ``weibull_min(c=shape, scale=scale)``.

    Conditional time: with :math:`z = \\log(1 + e/H(x)) / k` (computed as a softplus of
    :math:`\\log e - \\log H(x)`), :math:`x + T = \\lambda (H(x) + e)^{1/k}` and
    :math:`T = (x + T)(1 - e^{-z})`, free of cancellation for any ``e / H(x)``.
    """

    family: ClassVar[str] = "weibull"

    def _hazard(self, t: FloatArray) -> FloatArray:
        k, lam = self.shape, self.scale
        return _power_or_log(k / lam, t / lam, k - 1.0, np.log(t) - math.log(lam))

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        k, lam = self.shape, self.scale
        return _power_or_log(1.0, t / lam, k, np.log(t) - math.log(lam))

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return _power_or_log(self.scale, y, 1.0 / self.shape, np.log(y))

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        k, log_lam = self.shape, math.log(self.scale)
        if not x.any():
            # every clock at 0 (a first visit on the entry clock, any visit on the time-in-state
            # clock): T = lambda e^(1/k). The general form below reduces to exactly these
            # operations there (logaddexp(-inf, a) = a, expm1(-inf) = -1), so the bits agree.
            return np.exp(log_lam + np.log(e) / k)
        log_hx = k * (np.log(x) - log_lam)  # -inf at x = 0
        log_e = np.log(e)
        with np.errstate(invalid="ignore"):  # x = 0 and e = 0 together: fixed by the where below
            z = _softplus(log_e - log_hx) / k  # log((x + T) / x)
            log_end = log_lam + np.logaddexp(log_hx, log_e) / k  # log(x + T)
            t = np.exp(log_end) * -np.expm1(-z)
        return np.where(e > 0.0, t, 0.0)


def _gompertz_cumhazard(b: float, g: float, t: FloatArray) -> FloatArray:
    """(b/g)(exp(g t) - 1) as b t exprel(g t); log form where exp(g t) would overflow."""
    if g == 0.0:
        return b * t
    u = g * t
    with np.errstate(invalid="ignore"):  # t = inf lanes, replaced below
        h = b * t * sc.exprel(u)
        big = u > 700.0
        if np.any(big):
            h = np.where(big, np.exp(math.log(b) + np.log(t) + _log_exprel(u)), h)
    limit = math.inf if g > 0.0 else b / -g
    return np.where(np.isinf(t), limit, h)


def _gompertz_time(log_b: FloatArray | float, g: float, e: FloatArray) -> FloatArray:
    """Solve (B/g)(exp(g T) - 1) = e for T with B = exp(log_b): T = log1p(g e / B) / g.

    Written as ``(e/B) * log1p(v)/v`` with ``v = g e / B`` when ``|v| <= 1`` and as
    ``softplus(log v) / g`` when ``v > 1``; ``+inf`` when ``v <= -1`` (improper, g < 0).
    Exact in the limit g -> 0 (gives e / B) and free of overflow for huge ``e / B``.
    """
    if g == 0.0:
        return e * np.exp(-np.asarray(log_b, dtype=np.float64))
    if g > 0.0:
        # Short form T = log1p(v) / g with v = e g / B formed directly (one exp, one log1p instead
        # of about six transcendental passes): as accurate as the forms below (relative error a few
        # ulp, log1p being accurate for small v) wherever v is a normal, finite number.
        with np.errstate(over="ignore", under="ignore", invalid="ignore"):
            v = e * np.exp(math.log(g) - np.asarray(log_b, dtype=np.float64))
        if v.size and np.all((v >= 1e-300) & (v < 1e300)):
            return np.log1p(v) / g
    log_e = np.log(e)
    lv = math.log(abs(g)) + log_e - log_b  # log |v|
    with np.errstate(invalid="ignore"):  # e = inf lanes (inf - inf) are masked by the where
        ratio = np.exp(log_e - log_b)  # e / B
        if g > 0.0:
            small = ratio * _log1prel(np.exp(np.minimum(lv, 0.0)))
            return np.where(lv > 0.0, _softplus(lv) / g, small)
        # g < 0: v in [-1, 0]; log1p(-1) = -inf gives +inf (never) exactly when |v| >= 1.
        t = ratio * _log1prel(-np.exp(np.minimum(lv, 0.0)))
    return np.where(e > 0.0, np.where(lv >= 0.0, np.inf, t), 0.0)


@dataclass(frozen=True)
class Gompertz(Hazard):
    """Gompertz hazard, exponential in the clock (human adult mortality on attained age).

    Parameters
    ----------
    rate : float
        :math:`b > 0`, the hazard per year at clock 0.
    shape : float
        :math:`g`, any finite real: the log-hazard slope per year (about 0.085 for adult human
        mortality, i.e. doubling every ~8 years; Finch, Pike & Witten 1990). ``g = 0`` is the
        exponential; ``g < 0`` is improper.

    Notes
    -----
    :math:`h(t) = b e^{g t}`, :math:`H(t) = (b/g)(e^{g t} - 1) = b t\\,\\mathrm{exprel}(g t)`,
    :math:`H^{-1}(y) = \\log(1 + g y / b) / g` (METHODS.md section 2; Bender et al. 2005).
    For :math:`g < 0`, :math:`H(\\infty) = b/|g|` and the event never happens with probability
    :math:`e^{b/g}`; :math:`H^{-1}(y) = +\\infty` for :math:`y \\ge b/|g|`.
    Conditional time: :math:`T = \\log(1 + g e / (b e^{g x})) / g`, evaluated with ``log1p``
    and in log space (see ``_gompertz_time``), continuous through ``g = 0``.
    scipy (``g > 0``): ``gompertz(c=b/g, scale=1/g)``.
    """

    rate: float
    shape: float
    family: ClassVar[str] = "gompertz"

    def __post_init__(self) -> None:
        object.__setattr__(self, "rate", _param(self.family, "rate", self.rate, "positive"))
        object.__setattr__(self, "shape", _param(self.family, "shape", self.shape, "finite"))

    @property
    def cumhazard_limit(self) -> float:
        return math.inf if self.shape >= 0.0 else self.rate / -self.shape

    def params(self) -> dict[str, float]:
        return {"rate": self.rate, "shape": self.shape}

    def _hazard(self, t: FloatArray) -> FloatArray:
        if self.shape == 0.0:
            return np.full(t.shape, self.rate)
        return self.rate * np.exp(self.shape * t)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        return _gompertz_cumhazard(self.rate, self.shape, t)

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return _gompertz_time(math.log(self.rate), self.shape, y)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        return _gompertz_time(math.log(self.rate) + self.shape * x, self.shape, e)


@dataclass(frozen=True)
class GompertzMakeham(Hazard):
    """Gompertz-Makeham hazard: a Gompertz term plus a constant (age-independent) term.

    Parameters
    ----------
    rate : float
        :math:`b > 0`, the Gompertz hazard per year at clock 0.
    shape : float
        :math:`g`, any finite real (log-hazard slope per year).
    constant : float
        :math:`c \\ge 0`, the Makeham term per year. ``c = 0`` is :class:`Gompertz`.

    Notes
    -----
    :math:`h(t) = c + b e^{g t}`, :math:`H(t) = c t + (b/g)(e^{g t} - 1)` (METHODS.md section 2).
    Proper whenever ``c > 0``.

    Conditional time from clock ``x`` solves :math:`F(T) = c T + B T\\,\\mathrm{exprel}(g T) = e`
    with :math:`B = b e^{g x}`. ``F`` is a sum of positive terms, so it is evaluated without
    cancellation, and it is increasing. The root is bracketed (see ``_newton``) and found by
    Halley's method safeguarded by bisection (relative accuracy ~1e-15). Where
    ``|g| e / (c + B) < 1e-17`` the linear solution ``e / (c + B)`` is already exact in double
    precision. (A Lambert-W closed form exists,
    :math:`T = (K/c - W_0((B/c) e^{K/c}))/g` with :math:`K = g e + B`, derived here, but it
    cancels badly as ``c -> 0`` or ``g -> 0``; it is not used.)
    """

    rate: float
    shape: float
    constant: float
    family: ClassVar[str] = "gompertz_makeham"

    def __post_init__(self) -> None:
        object.__setattr__(self, "rate", _param(self.family, "rate", self.rate, "positive"))
        object.__setattr__(self, "shape", _param(self.family, "shape", self.shape, "finite"))
        object.__setattr__(self, "constant", _param(self.family, "constant", self.constant, "nonnegative"))

    @property
    def cumhazard_limit(self) -> float:
        if self.constant > 0.0 or self.shape >= 0.0:
            return math.inf
        return self.rate / -self.shape

    def params(self) -> dict[str, float]:
        return {"rate": self.rate, "shape": self.shape, "constant": self.constant}

    def _hazard(self, t: FloatArray) -> FloatArray:
        g = self.shape
        gomp = np.full(t.shape, self.rate) if g == 0.0 else self.rate * np.exp(g * t)
        return self.constant + gomp

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        gomp = _gompertz_cumhazard(self.rate, self.shape, t)
        return gomp + self.constant * t if self.constant > 0.0 else gomp

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return self._solve(np.full(y.shape, math.log(self.rate)), y)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        return self._solve(math.log(self.rate) + self.shape * x, e)

    def _solve(self, log_b: FloatArray, e: FloatArray) -> FloatArray:
        """T with c T + (B/g)(exp(g T) - 1) = e, B = exp(log_b); arrays of equal shape."""
        b, g, c = self.rate, self.shape, self.constant
        if c == 0.0:
            return _gompertz_time(log_b, g, e)
        if g == 0.0:
            return e / (b + c)
        t = e / (c + np.exp(log_b))  # linear solution; exact when |g| t is negligible
        hard = (abs(g) * t > 1e-17) & (e < np.inf)
        if np.any(hard):
            t = np.array(t, dtype=np.float64)
            t[hard] = self._newton(log_b[hard], e[hard])
        return t

    def _newton(self, log_b: FloatArray, e: FloatArray) -> FloatArray:
        """Safeguarded Halley iteration on F(T) = e for 1-D arrays with 0 < e < inf.

        ``f = F(T) - e = c T + (B/g) expm1(g T) - e``, ``F' = c + B (1 + expm1(g T))`` and
        ``F'' = g B (1 + expm1(g T))`` cost one ``expm1`` per step. Bracket: the hazard from ``x``
        on is ``>= c + B`` if ``g > 0`` (so ``T <= e/(c + B)``) and ``<= c + B`` if ``g < 0`` (so
        ``T >= e/(c + B)``); ``T <= min(e/c, T_G(e))`` always, and for ``g > 0`` also
        ``T >= min(e/c, T_G(e)) / 2`` (``T_G`` is concave in ``e``). A step leaving the shrinking
        bracket is replaced by bisection. Converged once a step is below 1e-8 of ``T`` (cubic
        convergence: the step then taken leaves a relative error at rounding level).
        """
        g, c = self.shape, self.constant
        big_b = np.exp(log_b)
        t_c = e / c
        t_g = _gompertz_time(log_b, g, e)
        t_lin = e / (c + big_b)
        if g > 0.0:
            lo, hi = 0.5 * np.minimum(t_c, t_g), np.minimum(t_lin, t_g)
        else:
            lo, hi = t_lin, np.minimum(t_c, t_g)
        hi = np.minimum(hi, np.finfo(np.float64).max)  # e/c may overflow for a subnormal c
        t = np.clip(1.0 / (1.0 / t_c + 1.0 / t_g), lo, hi)  # harmonic guess, exact for small e
        out = np.empty_like(e)
        idx = np.arange(e.size)
        for _ in range(200):
            with np.errstate(invalid="ignore"):  # inf/inf steps near the top of the range: NaN -> bisect
                em1 = np.expm1(g * t)
                f = c * t + big_b * em1 / g - e  # > 0: t too large
                hi = np.where(f > 0.0, t, hi)
                lo = np.where(f <= 0.0, t, lo)
                gomp = big_b * (1.0 + em1)  # Gompertz hazard at x + t
                fp = c + gomp
                step = f * fp / (fp * fp - 0.5 * f * g * gomp)
                new = t - step
            bad = ~((new >= lo) & (new <= hi))  # outside the bracket (or NaN): bisect
            mid = np.where(hi > 4.0 * lo, np.sqrt(lo) * np.sqrt(hi), lo + 0.5 * (hi - lo))  # geometric if wide
            new = np.where(f == 0.0, t, np.where(bad, mid, new))
            done = (~bad & (np.abs(step) <= 1e-8 * t)) | (hi - lo <= 4e-16 * hi) | (f == 0.0)
            out[idx[done]] = new[done]
            keep = ~done
            if not np.any(keep):
                break
            idx, t, lo, hi, big_b, e = idx[keep], new[keep], lo[keep], hi[keep], big_b[keep], e[keep]
        else:  # pragma: no cover - bisection guarantees convergence well within 200 steps
            out[idx] = t
        return out


@dataclass(frozen=True)
class LogLogistic(_ShapeScale):
    """Log-logistic hazard (unimodal for shape > 1, decreasing for shape <= 1).

    Parameters
    ----------
    shape : float
        :math:`k > 0`.
    scale : float
        :math:`\\lambda > 0` in years (the median).

    Notes
    -----
    :math:`S(t) = 1 / (1 + (t/\\lambda)^k)`, :math:`H(t) = \\log(1 + (t/\\lambda)^k)`,
    :math:`h(t) = (k/t)\\,a/(1 + a)` with :math:`a = (t/\\lambda)^k`,
    :math:`H^{-1}(y) = \\lambda (e^{y} - 1)^{1/k}`. scipy: ``fisk(c=shape, scale=scale)``.
    Conditional time: :math:`a' = (1 + a) e^{e} - 1`, so
    :math:`\\log((x+T)/x) = \\log(1 + \\mathrm{expm1}(e)(1 + 1/a)) / k` (a softplus in log space)
    and :math:`T = (x + T)(1 - (x/(x+T)))` without cancellation.
    """

    family: ClassVar[str] = "loglogistic"

    def _hazard(self, t: FloatArray) -> FloatArray:
        k = self.shape
        h0 = math.inf if k < 1.0 else (1.0 / self.scale if k == 1.0 else 0.0)
        log_t = np.log(t)
        with np.errstate(invalid="ignore"):  # t = 0 and t = inf lanes, replaced below
            # h = (k/t) a/(1 + a) = exp(log k - log t - softplus(-log a)), free of over/underflow
            h = np.exp(math.log(k) - log_t - _softplus(-k * (log_t - math.log(self.scale))))
        return np.where(t > 0.0, np.where(t < np.inf, h, 0.0), h0)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        k = self.shape
        log_u = np.log(t) - math.log(self.scale)
        a = _power_or_log(1.0, t / self.scale, k, log_u)
        return np.where(np.isinf(a), k * log_u, np.log1p(a))

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        k, lam = self.shape, self.scale
        return _power_or_log(lam, np.expm1(y), 1.0 / k, _log_expm1(y))

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        k, log_lam = self.shape, math.log(self.scale)
        la = k * (np.log(x) - log_lam)  # log a(x), -inf at x = 0
        lem1 = _log_expm1(e)  # log(expm1(e)), -inf at e = 0
        with np.errstate(invalid="ignore"):  # e = 0 or e = inf lanes, replaced below
            z = _softplus(lem1 + _softplus(-la)) / k  # log((x + T) / x)
            log_end = log_lam + np.logaddexp(la + e, lem1) / k  # log(x + T)
            t = np.exp(log_end) * -np.expm1(-z)
        return np.where(e > 0.0, np.where(e < np.inf, t, np.inf), 0.0)


@dataclass(frozen=True)
class LogNormal(Hazard):
    """Log-normal event time: :math:`\\log T \\sim N(\\mu, \\sigma^2)`.

    Parameters
    ----------
    mu : float
        Mean of log time (log years), finite.
    sigma : float
        Standard deviation of log time, ``> 0``.

    Notes
    -----
    With :math:`w = (\\log t - \\mu)/\\sigma`: :math:`S(t) = \\Phi(-w)`,
    :math:`H(t) = -\\log\\Phi(-w)` via ``scipy.special.log_ndtr`` (accurate in both tails),
    :math:`h(t) = \\varphi(w) / (\\sigma t \\Phi(-w))` (in log space for ``w < 0``, as
    :math:`\\sqrt{2/\\pi} / (\\sigma t\\,\\mathrm{erfcx}(w/\\sqrt 2))` for ``w >= 0``), and
    :math:`H^{-1}(y) = \\exp(\\mu - \\sigma\\,\\Phi^{-1}(e^{-y}))` via ``ndtri_exp``.
    scipy: ``lognorm(s=sigma, scale=exp(mu))``. Conditional time: the base-class inversion
    with Newton polishing.
    """

    mu: float
    sigma: float
    family: ClassVar[str] = "lognormal"

    def __post_init__(self) -> None:
        object.__setattr__(self, "mu", _param(self.family, "mu", self.mu, "finite"))
        object.__setattr__(self, "sigma", _param(self.family, "sigma", self.sigma, "positive"))

    @property
    def cumhazard_limit(self) -> float:
        return math.inf

    def params(self) -> dict[str, float]:
        return {"mu": self.mu, "sigma": self.sigma}

    def _w(self, t: FloatArray) -> FloatArray:
        return (np.log(t) - self.mu) / self.sigma

    def _hazard(self, t: FloatArray) -> FloatArray:
        w = self._w(t)
        with np.errstate(invalid="ignore"):  # t = 0 and t = inf lanes, replaced below
            # w < 0: log phi(w) - log Phi(-w) with log Phi(-w) ~ 0 (no cancellation);
            # w >= 0: phi(w) / Phi(-w) = sqrt(2/pi) / erfcx(w / sqrt 2), free of the cancellation
            # between -w^2/2 and log Phi(-w) in the upper tail.
            log_h = -0.5 * w * w - 0.5 * math.log(2.0 * math.pi) - sc.log_ndtr(-w) - np.log(self.sigma * t)
            upper = math.sqrt(2.0 / math.pi) / (self.sigma * t * sc.erfcx(np.maximum(w, 0.0) / math.sqrt(2.0)))
            h = np.where(w >= 0.0, upper, np.exp(log_h))
        return np.where((t > 0.0) & (t < np.inf), h, 0.0)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        return -sc.log_ndtr(-self._w(t))

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        w = -sc.ndtri_exp(-y)
        far = (y > 3000.0) & np.isfinite(y)
        if np.any(far):
            # ndtri_exp loses digits beyond H ~ 1e4 (1e-12 relative at 1e5, checked against 60-digit
            # arithmetic); one Newton step on log Phi(-w) = -y with the accurate log_ndtr restores them.
            wf = w[far]
            log_sf = sc.log_ndtr(-wf)
            w = np.array(w, dtype=np.float64)
            w[far] = wf + (log_sf + y[far]) * np.exp(0.5 * wf * wf + 0.5 * math.log(2.0 * math.pi) + log_sf)
        return np.exp(self.mu + self.sigma * w)


def _gammaincc_cf(a: float, z: FloatArray) -> tuple[FloatArray, FloatArray]:
    """``(log Q(a, z), z h_z)`` for z well above a (far upper tail), by a continued fraction.

    Modified Lentz evaluation of :math:`Q(a,z) = e^{-z} z^a / \\Gamma(a) \\cdot C` with
    :math:`C = 1/(z+1-a-\\,1(1-a)/(z+3-a-\\,2(2-a)/(z+5-a-\\dots)))` (Legendre's continued
    fraction, DLMF 8.9.2; the Lentz scheme as in Press et al., Numerical Recipes, section 6.2; both
    from memory). Since the density is :math:`e^{-z} z^{a-1}/\\Gamma(a)`, the hazard on the z clock
    is :math:`1/(z C)`, obtained without the cancellation of ``log f - log Q``. Vectorised over ``z``.
    """
    tiny = 1e-300
    b = z + 1.0 - a
    c = np.full_like(z, 1.0 / tiny)
    d = 1.0 / b
    h = d.copy()
    for i in range(1, 5000):
        an = -i * (i - a)
        b = b + 2.0
        d = an * d + b
        d = np.where(np.abs(d) < tiny, tiny, d)
        c = b + an / c
        c = np.where(np.abs(c) < tiny, tiny, c)
        d = 1.0 / d
        delta = d * c
        h = h * delta
        if np.all(np.abs(delta - 1.0) < 3e-16):
            break
    return -z + a * np.log(z) - sc.gammaln(a) + np.log(h), 1.0 / h


_GAMMA_TAIL_H = 650.0  # H above which the gamma inverse uses Newton on log Q (exp(-H) ~ 1e-283)


@dataclass(frozen=True)
class Gamma(_ShapeScale):
    """Gamma event time.

    Parameters
    ----------
    shape : float
        :math:`a > 0`; hazard rises to :math:`1/\\theta` for ``a > 1``, falls to it for ``a < 1``.
    scale : float
        :math:`\\theta > 0` in years.

    Notes
    -----
    With :math:`z = t/\\theta`: :math:`S(t) = Q(a, z)` (regularised upper incomplete gamma,
    ``scipy.special.gammaincc``), :math:`H = -\\log(1 - P(a, z))` via ``log1p`` while
    :math:`P < 1/2`, else :math:`-\\log Q`; where :math:`Q < 10^{-280}` (underflow region)
    :math:`\\log Q` comes from its continued fraction. :math:`h = f/S` in log space, and in the
    far tail :math:`1/(z C)` from the same continued fraction (no cancellation).
    :math:`H^{-1}` uses ``gammaincinv``/``gammainccinv`` and, beyond :math:`H = 650`, a Newton
    iteration on :math:`-\\log Q(a, z) = y` (monotone: ``H`` is convex for ``a >= 1``, concave
    for ``a < 1``). scipy: ``gamma(a=shape, scale=scale)``.
    """

    family: ClassVar[str] = "gamma"

    def _log_q(self, z: FloatArray) -> FloatArray:
        """log Q(a, z), finite wherever z is finite."""
        q = sc.gammaincc(self.shape, z)
        out = np.log(q)
        tail = (q < 1e-280) & np.isfinite(z)
        if np.any(tail):
            out = np.array(out, dtype=np.float64)
            out[tail] = _gammaincc_cf(self.shape, z[tail])[0]
        return out

    def _h_z(self, z: FloatArray) -> FloatArray:
        """Hazard on the z = t/scale clock (finite z >= 0): f/Q, from the continued fraction in the
        far tail."""
        a = self.shape
        q = sc.gammaincc(a, z)
        h = np.exp(sc.xlogy(a - 1.0, z) - z - sc.gammaln(a) - np.log(q))
        tail = (q < 1e-280) & np.isfinite(z)
        if np.any(tail):
            h = np.array(h, dtype=np.float64)
            h[tail] = _gammaincc_cf(a, z[tail])[1] / z[tail]
        return h

    def _hazard(self, t: FloatArray) -> FloatArray:
        theta = self.scale
        z = t / theta
        with np.errstate(invalid="ignore"):  # t = inf lanes, replaced below
            h = self._h_z(z) / theta
        return np.where(np.isinf(t), 1.0 / theta, h)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        z = t / self.scale
        p = sc.gammainc(self.shape, z)
        h = np.array(-np.log1p(-p), dtype=np.float64)
        upper = p >= 0.5
        if np.any(upper):
            h[upper] = -self._log_q(z[upper])
        return h

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        a = self.shape
        z = np.full(y.shape, np.inf)
        low = y <= math.log(2.0)  # P <= 1/2: invert the lower function, accurate for tiny y
        z[low] = sc.gammaincinv(a, -np.expm1(-y[low]))
        mid = (y > math.log(2.0)) & (y <= _GAMMA_TAIL_H)
        z[mid] = sc.gammainccinv(a, np.exp(-y[mid]))
        far = (y > _GAMMA_TAIL_H) & np.isfinite(y)
        if np.any(far):
            z[far] = self._far_tail_z(y[far])
        return self.scale * z

    def _far_tail_z(self, y: FloatArray) -> FloatArray:
        """Solve -log Q(a, z) = y for y > _GAMMA_TAIL_H by Newton with a bracket (1-D arrays)."""
        a = self.shape
        z_lo = float(sc.gammainccinv(a, math.exp(-_GAMMA_TAIL_H)))
        zl = np.array([z_lo])
        h_lo, hz_lo = float(-self._log_q(zl)[0]), float(self._h_z(zl)[0])
        # Lower bound on the hazard beyond z_lo: hz(z_lo) if increasing (a >= 1), else 1 (its limit).
        slope = hz_lo if a >= 1.0 else 1.0
        lo = np.full_like(y, z_lo)
        hi = z_lo + (y - h_lo) / slope
        z = hi.copy() if a >= 1.0 else lo.copy()  # monotone Newton: from the right if convex
        for _ in range(100):
            r = -self._log_q(z) - y
            hi = np.where(r > 0.0, z, hi)
            lo = np.where(r <= 0.0, z, lo)
            new = z - r / self._h_z(z)
            bad = ~((new >= lo) & (new <= hi))  # outside the bracket (or NaN): bisect
            new = np.where(r == 0.0, z, np.where(bad, lo + 0.5 * (hi - lo), new))
            done = np.all((~bad & (np.abs(new - z) <= 1e-10 * z)) | (hi - lo <= 4e-16 * hi) | (r == 0.0))
            z = new
            if done:
                break
        return z


# --------------------------------------------------------------------------------------------
# Piecewise-constant (life tables) and proportional hazards
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class PiecewiseConstant(Hazard):
    """Piecewise-constant hazard, e.g. a life table by age band.

    Parameters
    ----------
    breaks : sequence of float
        Band starts in years, strictly increasing, starting at exactly 0 (e.g. ages
        0, 1, 5, 10, ...). The last band extends to infinity.
    rates : sequence of float
        Hazard per year in each band, ``>= 0`` and finite; same length as ``breaks``.
        A last rate of 0 makes the distribution improper.

    Notes
    -----
    With :math:`H_j = \\sum_{i<j} r_i (b_{i+1} - b_i)` the cumulative hazard at band starts,
    :math:`H(t) = H_j + r_j (t - b_j)` for :math:`b_j \\le t < b_{j+1}`, and the inverse is exact:
    find :math:`j` with :math:`H_j \\le y < H_{j+1}` by ``np.searchsorted`` and return
    :math:`b_j + (y - H_j)/r_j` (METHODS.md section 2). Zero-rate bands are stepped over.
    Conditional time: if ``e`` is below the hazard left in the current band, ``T = e / r`` exactly;
    otherwise the time to the band end plus the inversion of the remainder from the next band.
    Life-table probabilities ``q`` over ``n`` years convert to band rates ``-log(1 - q)/n`` (constant
    force; see :func:`sim.units.rate_from_risk`).
    """

    breaks: tuple[float, ...]
    rates: tuple[float, ...]
    family: ClassVar[str] = "piecewise"
    _b: FloatArray = field(init=False, repr=False, compare=False)
    _r: FloatArray = field(init=False, repr=False, compare=False)
    _end: FloatArray = field(init=False, repr=False, compare=False)
    _cum: FloatArray = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        fam = self.family
        breaks = tuple(_param(fam, f"breaks[{i}]", v, "nonnegative")
                       for i, v in enumerate(_seq(fam, "breaks", self.breaks)))
        rates = tuple(_param(fam, f"rates[{i}]", v, "nonnegative")
                      for i, v in enumerate(_seq(fam, "rates", self.rates)))
        if not breaks:
            raise HazardParameterError(f"{fam}: breaks must have at least one band start, got ()")
        if len(breaks) != len(rates):
            raise HazardParameterError(f"{fam}: breaks and rates must have the same length, "
                                       f"got {len(breaks)} breaks and {len(rates)} rates")
        if breaks[0] != 0.0:
            raise HazardParameterError(f"{fam}: breaks[0] must be 0 (the first band starts at clock 0), "
                                       f"got {breaks[0]!r}")
        for i in range(1, len(breaks)):
            if not breaks[i] > breaks[i - 1]:
                raise HazardParameterError(f"{fam}: breaks must be strictly increasing, got breaks[{i}] = "
                                           f"{breaks[i]!r} after breaks[{i - 1}] = {breaks[i - 1]!r}")
        b = np.array(breaks)
        r = np.array(rates)
        end = np.append(b[1:], np.inf)
        cum = np.concatenate(([0.0], np.cumsum(r[:-1] * np.diff(b))))
        for name, arr in (("breaks", breaks), ("rates", rates)):
            object.__setattr__(self, name, arr)
        for name, arr in (("_b", b), ("_r", r), ("_end", end), ("_cum", cum)):
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)

    @property
    def cumhazard_limit(self) -> float:
        return math.inf if self._r[-1] > 0.0 else float(self._cum[-1])

    def params(self) -> dict[str, tuple[float, ...]]:
        return {"breaks": self.breaks, "rates": self.rates}

    def _band(self, t: FloatArray) -> NDArray[np.intp]:
        return np.searchsorted(self._b, t, side="right") - 1

    def _hazard(self, t: FloatArray) -> FloatArray:
        return self._r[self._band(t)]

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        j = self._band(t)
        r = self._r[j]
        with np.errstate(invalid="ignore"):  # 0 * inf in a last band of rate 0, replaced below
            inc = np.where(r > 0.0, r * (t - self._b[j]), 0.0)
        return self._cum[j] + inc

    def _from_cum(self, y: FloatArray) -> tuple[NDArray[np.intp], FloatArray]:
        """Band j with cum[j] <= y < cum[j+1] (last such) and the time since its start."""
        j = np.searchsorted(self._cum, y, side="right") - 1
        r = self._r[j]
        with np.errstate(invalid="ignore", divide="ignore"):
            dt = np.where(r > 0.0, (y - self._cum[j]) / r, np.inf)
        return j, dt

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        j, dt = self._from_cum(y)
        return self._b[j] + dt

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        n = self._b.size
        i = self._band(x)
        r = self._r[i]
        end = self._end[i]
        room = end - x  # > 0; inf in the last band
        with np.errstate(invalid="ignore", divide="ignore"):
            left = np.where(r > 0.0, r * room, 0.0)  # hazard left in the current band
            within = e < left
            t_within = e / r
            nxt = np.minimum(i + 1, n - 1)
            y = self._cum[nxt] + (e - left)  # target cumulative hazard, from the next band start
            j, dt = self._from_cum(y)
            t_cross = room + (self._b[j] - self._b[nxt]) + dt
        last = i == n - 1
        return np.where(within, t_within, np.where(last, np.inf, t_cross))


def _seq(family: str, name: str, value: Any) -> tuple[Any, ...]:
    if isinstance(value, (str, bytes)) or np.ndim(value) != 1:
        raise HazardParameterError(f"{family}: {name} must be a 1-D sequence of numbers, got {value!r}")
    return tuple(np.asarray(value, dtype=object).tolist())


@dataclass(frozen=True)
class ProportionalHazards(Hazard):
    """A base hazard multiplied by a hazard ratio.

    Parameters
    ----------
    base : Hazard
        The baseline hazard.
    hr : float
        Hazard ratio, ``>= 0`` and finite; ``0`` means the event never happens.

    Notes
    -----
    :math:`h = \\mathrm{hr}\\,h_0`, :math:`H = \\mathrm{hr}\\,H_0`,
    :math:`H^{-1}(y) = H_0^{-1}(y/\\mathrm{hr})` and conditional time with draw ``e`` equals the
    base's with ``e / hr`` (Bender, Augustin & Blettner 2005). Nested wrappers are flattened by
    :meth:`scaled`.
    """

    base: Hazard
    hr: float
    family: ClassVar[str] = "proportional_hazards"

    def __post_init__(self) -> None:
        if not isinstance(self.base, Hazard):
            raise HazardParameterError(f"{self.family}: base must be a Hazard, got {self.base!r}")
        object.__setattr__(self, "hr", _param(self.family, "hr", self.hr, "nonnegative"))

    @property
    def cumhazard_limit(self) -> float:
        return 0.0 if self.hr == 0.0 else self.hr * self.base.cumhazard_limit

    def params(self) -> dict[str, Any]:
        """``{"hr": hr, "base.<name>": value, ...}`` plus ``"base.family"`` naming the base family."""
        out: dict[str, Any] = {"hr": self.hr, "base.family": self.base.family}
        out.update({f"base.{k}": v for k, v in self.base.params().items()})
        return out

    def scaled(self, hr: float) -> Hazard:
        hr = _param(self.family, "hr", hr, "nonnegative")
        if hr == 1.0:
            return self
        return ProportionalHazards(self.base, _param(self.family, "hr", self.hr * hr, "nonnegative"))

    def _hazard(self, t: FloatArray) -> FloatArray:
        return self.hr * self.base._hazard(t) if self.hr > 0.0 else np.zeros(t.shape)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        return self.hr * self.base._cumhazard(t) if self.hr > 0.0 else np.zeros(t.shape)

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return self.base._inv_cumhazard(y / self.hr) if self.hr > 0.0 else np.full(y.shape, np.inf)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        if self.hr == 0.0:
            return np.full(e.shape, np.inf)
        return self.base._conditional_time(x, e / self.hr)


# --------------------------------------------------------------------------------------------
# Registry
# --------------------------------------------------------------------------------------------

FAMILIES: Mapping[str, type[Hazard]] = MappingProxyType({
    cls.family: cls
    for cls in (Exponential, Weibull, Gompertz, GompertzMakeham, LogLogistic, LogNormal, Gamma,
                PiecewiseConstant)
})
"""Read-only map from family name to class (``ProportionalHazards`` is made by ``.scaled``)."""


def make_hazard(family: str, **params: Any) -> Hazard:
    """Build a hazard from its family name and named parameters.

    Parameters
    ----------
    family : str
        A key of :data:`FAMILIES`, e.g. ``"weibull"``.
    **params
        The family's parameters by name, e.g. ``shape=1.3, scale=30.0``.

    Returns
    -------
    Hazard

    Raises
    ------
    HazardParameterError
        Unknown family (the message lists the known ones), unknown or missing parameter names, or
        a parameter outside its domain.
    """
    cls = FAMILIES.get(family)
    if cls is None:
        raise HazardParameterError(f"unknown hazard family {family!r}; known families: {', '.join(sorted(FAMILIES))}")
    expected = [f.name for f in fields(cls) if f.init]
    unknown = sorted(set(params) - set(expected))
    missing = [n for n in expected if n not in params and _field_default(cls, n) is MISSING]
    if unknown or missing:
        parts = []
        if unknown:
            parts.append(f"unknown parameter(s) {', '.join(map(repr, unknown))}")
        if missing:
            parts.append(f"missing parameter(s) {', '.join(map(repr, missing))}")
        raise HazardParameterError(f"{family}: {'; '.join(parts)}; expected parameters: {', '.join(expected)}")
    return cls(**params)


def _field_default(cls: type, name: str) -> Any:
    """Default of dataclass field ``name`` (``MISSING`` when required)."""
    f = next(f for f in fields(cls) if f.name == name)
    return f.default if f.default_factory is MISSING else f.default_factory
