"""The log-normal event time as a hazard, accurate in both tails (``log_ndtr``, ``erfcx``,
``ndtri_exp``)."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import ClassVar

import numpy as np
from scipy import special as sc

from ._lane_kernels import Lanes, invert_and_polish
from ._numerics import FloatArray
from .base import Hazard, _param
from .dimensions import Dimension

__all__ = ["LogNormal", "LogNormalLanes"]


def _w_inv(y: FloatArray) -> FloatArray:
    """w = (log t - mu) / sigma at which H = y (free of the parameters)."""
    w = -sc.ndtri_exp(-y)
    far = (y > 3000.0) & np.isfinite(y)
    if np.any(far):
        # ndtri_exp loses digits beyond H ~ 1e4 (1e-12 relative at 1e5, checked against 60-digit
        # arithmetic); one Newton step on log Phi(-w) = -y with the accurate log_ndtr restores them.
        wf, yf = w[far], y[far]
        log_sf = sc.log_ndtr(-wf)
        mills = np.exp(0.5 * wf * wf + 0.5 * math.log(2.0 * math.pi) + log_sf)  # Phi(-w) / phi(w)
        # The exponent above is w^2/2 + log Phi(-w) ~ -log w, formed from two terms of size y: its
        # rounding, eps * y, spoils the ratio beyond y ~ 1e12 (2e-4 relative there, a correction
        # to a correction), so larger y take the edge form. Chosen lane by lane, so that a lane's
        # step does not depend on the lanes that share the call.
        usual = np.isfinite(log_sf) & (mills > 0.0) & (mills < np.inf) & (yf <= 1e12)
        with np.errstate(invalid="ignore"):  # -inf * 0 where the usual form fails: edge step there
            step = (log_sf + yf) * mills
        if not np.all(usual):
            step = np.where(usual, step, _edge_step(wf, log_sf, yf))
        w = np.array(w, dtype=np.float64)
        w[far] = wf + step
    return w


def _edge_step(w: FloatArray, log_sf: FloatArray, y: FloatArray) -> FloatArray:
    """The Newton step of ``_inv_cumhazard`` where its usual form fails: ``y`` beyond ~1e16,
    where ``w^2 / 2`` and ``log Phi(-w)`` cancel to nothing (the Mills ratio
    ``Phi(-w) / phi(w)`` is taken as ``sqrt(pi/2) erfcx(w / sqrt 2)`` instead), and ``y`` near
    the largest double, where ``log Phi(-w)`` overflows to ``-inf`` (no step: ``ndtri_exp``'s
    ``w`` is kept). The step is then at the rounding level of ``w``; it only must not be NaN."""
    mills = math.sqrt(0.5 * math.pi) * sc.erfcx(w / math.sqrt(2.0))
    with np.errstate(invalid="ignore"):  # -inf * 0 lanes, replaced below
        step = (log_sf + y) * mills
    return np.where(np.isfinite(step), step, 0.0)


class LogNormalLanes(Lanes):
    """The log-normal kernels with ``mu`` and ``sigma`` numbers (one hazard) or per-lane arrays
    (:mod:`sim.hazards.lanes`); :class:`LogNormal` evaluates its own through them."""

    _fields = ("mu", "sigma")
    mu: FloatArray | float
    sigma: FloatArray | float

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
        return np.exp(self.mu + self.sigma * _w_inv(y))

    def conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        """The smooth families' inversion (:func:`invert_and_polish`), except where it overflowed
        (``x + T`` beyond the largest double, ``T`` finite): there ``T = x expm1(sigma (w_end - w_x))``
        on the w clock, with ``w_end`` from ``H(x) + e`` (see ``_late``)."""
        t = invert_and_polish(self, x, e)
        lost = (t == np.inf) & (e < np.inf)
        if np.any(lost):
            t = np.array(t, dtype=np.float64)
            xl, k = x[lost], self.take(lost)
            hx = k._cumhazard(xl)
            t[lost] = np.where(hx < np.inf, k._late(xl, _w_inv(hx + e[lost])), np.inf)
        return t

    def _late(self, x: FloatArray, w_end: FloatArray) -> FloatArray:
        """Time from clock ``x`` to the end at ``w_end``: ``x expm1(sigma (w_end - w_x))``, with no
        ``x + T`` formed (``exp(mu + sigma w_end)`` at ``x = 0``). An error ``d`` in ``w_end``
        moves ``H`` by ``h d``, about ``w^2 d``: within the rounding of ``H`` for ``|d| ~ eps w``."""
        with np.errstate(divide="ignore", invalid="ignore"):  # log 0 and 0 * inf at x = 0, replaced below
            w_x = self._w(x)
            return self._grown(x, self.sigma * (w_end - w_x), w_end)

    def _grown(self, x: FloatArray, d: FloatArray, w_end: FloatArray) -> FloatArray:
        """``x expm1(d)`` (``d = log((x + T)/x)``), as ``exp(log x + d)(1 - e^-d)`` where
        ``expm1(d)`` alone would overflow; ``exp(mu + sigma w_end)`` at ``x = 0``."""
        with np.errstate(divide="ignore", invalid="ignore"):  # x = 0 lanes, replaced below
            late = np.where(d > 700.0, np.exp(np.log(x) + d) * -np.expm1(-d), x * np.expm1(d))
        return np.where(x > 0.0, late, np.exp(self.mu + self.sigma * w_end))


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
    with Newton polishing; on the w clock where ``x + T`` overflows (:class:`LogNormalLanes`).
    """

    mu: float
    sigma: float
    family: ClassVar[str] = "lognormal"
    _lanes: LogNormalLanes = field(init=False, repr=False, compare=False)
    dimensions: ClassVar[Mapping[str, Dimension]] = MappingProxyType({"mu": Dimension.LOG_TIME, "sigma": Dimension.DIMENSIONLESS})

    def __post_init__(self) -> None:
        object.__setattr__(self, "mu", _param(self.family, "mu", self.mu, "finite"))
        object.__setattr__(self, "sigma", _param(self.family, "sigma", self.sigma, "positive"))
        object.__setattr__(self, "_lanes", LogNormalLanes(self.mu, self.sigma))

    @property
    def cumhazard_limit(self) -> float:
        return math.inf

    def params(self) -> dict[str, float]:
        return {"mu": self.mu, "sigma": self.sigma}

    def _w(self, t: FloatArray) -> FloatArray:
        return self._lanes._w(t)

    def _hazard(self, t: FloatArray) -> FloatArray:
        return self._lanes._hazard(t)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        return self._lanes._cumhazard(t)

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return self._lanes._inv_cumhazard(y)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        return self._lanes.conditional_time(x, e)

    def _lane_params(self) -> tuple[float, float]:
        """The numbers :class:`LogNormalLanes` takes: ``(mu, sigma)``."""
        return self.mu, self.sigma

    def _late(self, x: FloatArray, w_end: FloatArray) -> FloatArray:
        return self._lanes._late(x, w_end)

    def _grown(self, x: FloatArray, d: FloatArray, w_end: FloatArray) -> FloatArray:
        return self._lanes._grown(x, d, w_end)

    def _conditional_time_large_ratio(self, x: FloatArray, e: FloatArray, hr: float) -> FloatArray | None:
        """Conditional time under ``hr * H`` where ``y = e / hr`` overflows. There
        ``-log Phi(-w) = w^2/2 + log(w sqrt(2 pi)) + O(w^-2)`` (Mills ratio; DLMF 7.12.1) with
        ``w_end >= sqrt(2 y) > 1e154``, so ``w_end^2 = 2 (H(x) + y)`` to a relative ``1e-305``:
        ``w_end = sqrt(2) sqrt(y) sqrt(1 + H(x) / y)``, ``sqrt(y) = sqrt(e) / sqrt(hr)``. Where
        ``w_x > 1e9`` (``H(x)`` itself may overflow) the same expansion at ``x`` gives
        ``w_end^2 = w_x^2 + 2 y`` to rounding, and ``w_end - w_x = 2 y / (w_end + w_x)`` without
        cancellation. Finite only for a tiny sigma."""
        with np.errstate(divide="ignore", invalid="ignore"):  # log 0 at x = 0
            w_x = self._w(x)
        root2y = math.sqrt(2.0) * (np.sqrt(e) / math.sqrt(hr))  # sqrt(2 y)
        hx = self._cumhazard(x)
        far = w_x > 1e9
        w_end = root2y * np.sqrt(1.0 + np.where(far, 0.0, hx) * hr / e)
        with np.errstate(invalid="ignore"):  # x = 0 lanes (w_x = -inf: inf - inf) are not far
            step = root2y * (root2y / (np.hypot(w_x, root2y) + w_x))  # w_end - w_x where far
        t = np.where(far, self._grown(x, self.sigma * step, w_end), self._late(x, w_end))
        return np.where(root2y < np.inf, t, np.inf)  # sqrt(2 y) itself beyond the double range

    _log_forms: ClassVar[bool] = True

    def _log_cumhazard_lt(self, lt: FloatArray) -> FloatArray:
        """log H at t = exp(lt): ``log Phi(w)`` where ``Phi(w) < e^-40`` (there
        ``H = -log(1 - Phi(w)) = Phi(w)(1 + Phi(w)/2 + ...)``, the correction below the rounding),
        ``2 log w - log 2`` for ``w > 1e8`` (``H = w^2/2 + log(w sqrt(2 pi)) + O(w^-2)``, Mills
        ratio, DLMF 7.12.1; the second term below ``1e-14`` relative), else ``log(-log Phi(-w))``."""
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            w = (lt - self.mu) / self.sigma
            lower = sc.log_ndtr(w)
            mid = np.log(-sc.log_ndtr(-w))
            far = 2.0 * np.log(np.maximum(w, 1e8)) - math.log(2.0)
        return np.where(lower < -40.0, lower, np.where(w > 1e8, far, mid))

    def _log_hazard_lt(self, lt: FloatArray) -> FloatArray:
        """log h at t = exp(lt), the two forms of :meth:`_hazard` in log space."""
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            w = (lt - self.mu) / self.sigma
            lower = -0.5 * w * w - 0.5 * math.log(2.0 * math.pi) - sc.log_ndtr(-w)
            upper = 0.5 * math.log(2.0 / math.pi) - np.log(sc.erfcx(np.maximum(w, 0.0) / math.sqrt(2.0)))
            return np.where(w >= 0.0, upper, lower) - math.log(self.sigma) - lt
