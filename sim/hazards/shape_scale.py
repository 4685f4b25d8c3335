"""Two-parameter families with a shape and a time scale and closed-form inverses: Weibull and
log-logistic (the gamma family shares their parameters; see :mod:`.gamma`).

Both conditional times are evaluated in log space, free of the cancellation in
``H^{-1}(H(x) + e) - x`` (docs/methods.md, 'Hazards and survival'; Bender, Augustin & Blettner 2005, Stat Med
24(11):1713-1723).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import ClassVar

import numpy as np

from . import _fused
from ._numerics import FloatArray, _log_expm1, _power_or_log, _softplus
from .base import Hazard, _param
from .dimensions import Dimension

__all__ = ["Weibull", "LogLogistic", "weibull_times", "loglogistic_times"]


def _overflowed_end(t: FloatArray, log_end: FloatArray, z: FloatArray, e: FloatArray) -> FloatArray:
    """``T = (x + T)(1 - e^{-z})`` where ``x + T`` overflowed (a clock near the largest double):
    as ``exp(log(x + T) + log(1 - e^{-z}))``, finite when ``T`` is, instead of ``inf * 0 = NaN`` or
    ``+inf``. Other lanes are returned unchanged."""
    edge = ~(t < np.inf) & (e < np.inf)
    if not np.any(edge):
        return t
    with np.errstate(invalid="ignore", divide="ignore"):  # log(0) = -inf gives T = 0
        redo = np.exp(log_end + np.log(-np.expm1(-z)))
    return np.where(edge, np.where(np.isnan(redo), 0.0, redo), t)


def _late_end(log_end: FloatArray, la: FloatArray, x: FloatArray, z: FloatArray) -> FloatArray:
    """``log(x + T)`` as ``log x + z`` where ``log a(x) = k log(x / scale)`` overflowed (a huge
    shape on a late clock: ``H(x)`` beyond the double range, ``z = log((x + T)/x)`` still
    finite); other lanes unchanged."""
    edge = la == np.inf
    if not np.any(edge):
        return log_end
    return np.where(edge, np.log(x) + z, log_end)


Shape = FloatArray | float


def weibull_times(k: Shape, log_lam: Shape, x: FloatArray, e: FloatArray) -> FloatArray:
    """Conditional event times of Weibull hazards whose shape ``k`` and log-scale ``log_lam`` may
    differ from lane to lane (arrays aligned with ``x`` and ``e``, or numbers):
    :meth:`Weibull._conditional_time` is this function with its own numbers, so a lane gets the bits
    of its own hazard whichever lanes share the call (see :class:`Weibull`'s notes for the formula)."""
    if not x.any():
        # every clock at 0 (a first visit on the entry clock, any visit on the time-in-state
        # clock): T = lambda e^(1/k). The general form below reduces to exactly these
        # operations there (logaddexp(-inf, a) = a, expm1(-inf) = -1), so the bits agree.
        if _fused.fusable((k, log_lam), (e,)):
            t = np.log(e)
            _fused.affine_of_scaled(log_lam, k, t)  # the same bits as the line below
            return np.exp(t, out=t)
        return np.exp(log_lam + np.log(e) / k)
    if _fused.fusable((k, log_lam), (x, e)):
        t = _fused_weibull_times(k, log_lam, x, e)
        if t is not None:
            return t
    log_hx = k * (np.log(x) - log_lam)  # -inf at x = 0
    log_e = np.log(e)
    with np.errstate(invalid="ignore"):  # x = 0 and e = 0 together: fixed by the where below
        # softplus(d) and logaddexp(log H(x), log e) share log1p(exp(-|d|)), d = log e - log H(x):
        # one pass of numpy's SIMD exp and log1p instead of two ufuncs that call the scalar libm
        # functions per element (~11 ns each per lane here, most of this function's time; issue 16)
        d = log_e - log_hx
        tail = np.log1p(np.exp(-np.abs(d)))
        z = (np.maximum(d, 0.0) + tail) / k  # log((x + T) / x) = softplus(d) / k
        log_end = log_lam + (np.maximum(log_hx, log_e) + tail) / k  # log(x + T)
        t = np.exp(log_end) * -np.expm1(-z)
    t = _overflowed_end(t, log_end, z, e)
    return np.where(e > 0.0, t, 0.0)


def _fused_weibull_times(k: float, log_lam: float, x: FloatArray, e: FloatArray) -> FloatArray | None:
    """:func:`weibull_times`' general form with its arithmetic fused (:mod:`._fused`; the same bits:
    the same operations in the same order, numpy's exp, log, log1p and expm1 between them), or None
    where some lane needs the overflow form (the caller then takes the numpy path)."""
    log_hx, log_e = np.log(x), np.log(e)
    tail = np.empty(x.size)
    with np.errstate(invalid="ignore"):  # x = 0 and e = 0 together: the lane's time is 0 below
        _fused.weibull_gaps(k, log_lam, log_hx, log_e, tail)
        np.exp(tail, out=tail)
        np.log1p(tail, out=tail)  # log1p(exp(-|d|))
        neg_z, ends = log_e, np.empty(x.size)  # log e is not needed after this
        _fused.weibull_ends(k, log_lam, log_hx, log_e, tail, neg_z, ends)
        np.exp(ends, out=ends)
        np.expm1(neg_z, out=neg_z)
        return tail if _fused.weibull_times_from(ends, neg_z, e, tail) else None


def loglogistic_times(k: Shape, log_lam: Shape, x: FloatArray, e: FloatArray) -> FloatArray:
    """Conditional event times of log-logistic hazards whose shape ``k`` and log-scale ``log_lam``
    may differ from lane to lane (as :func:`weibull_times`; the formula in :class:`LogLogistic`'s
    notes)."""
    la = k * (np.log(x) - log_lam)  # log a(x), -inf at x = 0
    lem1 = _log_expm1(e)  # log(expm1(e)), -inf at e = 0
    with np.errstate(invalid="ignore"):  # e = 0 or e = inf lanes, replaced below
        z = _softplus(lem1 + _softplus(-la)) / k  # log((x + T) / x)
        log_end = log_lam + np.logaddexp(la + e, lem1) / k  # log(x + T)
        log_end = _late_end(log_end, la, x, z)
        t = np.exp(log_end) * -np.expm1(-z)
    t = _overflowed_end(t, log_end, z, e)
    return np.where(e > 0.0, np.where(e < np.inf, t, np.inf), 0.0)


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
    :math:`H^{-1}(y) = \\lambda y^{1/k}` (docs/methods.md, 'Hazards and survival'). Bender et al. (2005) write
    :math:`H(t) = \\lambda_B t^{\\nu}`, i.e. :math:`\\nu = k` and :math:`\\lambda_B = \\lambda^{-k}`.
    scipy: ``weibull_min(c=shape, scale=scale)``.

    Conditional time: with :math:`z = \\log(1 + e/H(x)) / k` (computed as a softplus of
    :math:`\\log e - \\log H(x)`), :math:`x + T = \\lambda (H(x) + e)^{1/k}` and
    :math:`T = (x + T)(1 - e^{-z})`, free of cancellation for any ``e / H(x)``.
    """

    family: ClassVar[str] = "weibull"
    dimensions: ClassVar[Mapping[str, Dimension]] = MappingProxyType({"shape": Dimension.DIMENSIONLESS, "scale": Dimension.TIME})

    def _hazard(self, t: FloatArray) -> FloatArray:
        k, lam = self.shape, self.scale
        return _power_or_log(k / lam, t / lam, k - 1.0, np.log(t) - math.log(lam))

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        k, lam = self.shape, self.scale
        return _power_or_log(1.0, t / lam, k, np.log(t) - math.log(lam))

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return _power_or_log(self.scale, y, 1.0 / self.shape, np.log(y))

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        return weibull_times(self.shape, math.log(self.scale), x, e)

    def _lane_params(self) -> tuple[float, float]:
        """The numbers :func:`weibull_times` takes: ``(shape, log(scale))``."""
        return self.shape, math.log(self.scale)



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
    dimensions: ClassVar[Mapping[str, Dimension]] = MappingProxyType({"shape": Dimension.DIMENSIONLESS, "scale": Dimension.TIME})

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
        return loglogistic_times(self.shape, math.log(self.scale), x, e)

    def _lane_params(self) -> tuple[float, float]:
        """The numbers :func:`loglogistic_times` takes: ``(shape, log(scale))``."""
        return self.shape, math.log(self.scale)

    _log_forms: ClassVar[bool] = True

    def _log_cumhazard_lt(self, lt: FloatArray) -> FloatArray:
        """log H at t = exp(lt): ``log log1p(a)`` with ``log a = k (lt - log scale)``, as ``log a``
        itself where ``a < e^-37`` (``log1p(a) = a (1 - a/2 + ...)``, the correction below the
        rounding)."""
        la = self.shape * (lt - math.log(self.scale))
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(la < -37.0, la, np.log(_softplus(la)))

    def _log_hazard_lt(self, lt: FloatArray) -> FloatArray:
        """log h at t = exp(lt): ``log k - lt - softplus(-log a)``."""
        la = self.shape * (lt - math.log(self.scale))
        return math.log(self.shape) - lt - _softplus(-la)

    def _conditional_time_large_ratio(self, x: FloatArray, e: FloatArray, hr: float) -> FloatArray:
        """Conditional time under ``hr * H`` where ``y = e / hr`` overflows: the formulas of
        ``_conditional_time`` with ``log(expm1(y)) = y`` (exact in double precision for
        ``y > 40``) and ``y / k`` formed as ``e / (hr k)``; finite only for a huge shape ``k``."""
        k, log_lam = self.shape, math.log(self.scale)
        q = e / (hr * k)  # y / k
        la = k * (np.log(x) - log_lam)
        with np.errstate(invalid="ignore"):  # q = inf lanes: T = inf, set below
            z = q + _softplus(-la) / k
            log_end = _late_end(log_lam + q + _softplus(la) / k, la, x, z)
            t = np.exp(log_end) * -np.expm1(-z)
        t = _overflowed_end(t, log_end, z, e)
        return np.where(q < np.inf, t, np.inf)
