"""The gamma event time as a hazard: survival from the regularised incomplete gamma function, with
the far upper tail (where ``Q(a, z)`` underflows) from Legendre's continued fraction. The kernels
(:class:`GammaLanes`) take a shape and a scale per lane, so that a block of parameter draws is one
call (:mod:`sim.hazards.lanes`); every iteration stops lane by lane."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import ClassVar

import numpy as np
from scipy import special as sc

from ._lane_kernels import Lanes, _sub, invert_and_polish
from ._numerics import FloatArray
from .dimensions import Dimension
from .shape_scale import _ShapeScale

__all__ = ["Gamma", "GammaLanes"]


def _gammaincc_cf(a: FloatArray | float, z: FloatArray) -> tuple[FloatArray, FloatArray]:
    """``(log Q(a, z), z h_z)`` for z well above a (far upper tail), by a continued fraction.

    Modified Lentz evaluation of :math:`Q(a,z) = e^{-z} z^a / \\Gamma(a) \\cdot C` with
    :math:`C = 1/(z+1-a-\\,1(1-a)/(z+3-a-\\,2(2-a)/(z+5-a-\\dots)))` (Legendre's continued
    fraction, DLMF 8.9.2; the Lentz scheme as in Press et al., Numerical Recipes, section 6.2; both
    from memory). Since the density is :math:`e^{-z} z^{a-1}/\\Gamma(a)`, the hazard on the z clock
    is :math:`1/(z C)`, obtained without the cancellation of ``log f - log Q``. Vectorised over ``z``
    (and ``a``, a number or one value per lane); each lane stops at its own convergence.
    """
    tiny = 1e-300
    b = z + 1.0 - a
    c = np.full_like(z, 1.0 / tiny)
    d = 1.0 / b
    h = d.copy()
    active = np.ones(z.shape, dtype=bool)
    for i in range(1, 5000):
        an = -i * (i - a)
        b = b + 2.0
        d = an * d + b
        d = np.where(np.abs(d) < tiny, tiny, d)
        c = b + an / c
        c = np.where(np.abs(c) < tiny, tiny, c)
        d = 1.0 / d
        delta = d * c
        h = np.where(active, h * delta, h)
        active &= ~(np.abs(delta - 1.0) < 3e-16)
        if not np.any(active):
            break
    return -z + a * np.log(z) - sc.gammaln(a) + np.log(h), 1.0 / h


_BIG = float(np.finfo(np.float64).max)
_GAMMA_TAIL_H = 650.0  # H above which the gamma inverse uses Newton on log Q (exp(-H) ~ 1e-283)


class GammaLanes(Lanes):
    """The gamma kernels with ``shape`` (a) and ``scale`` (theta) numbers (one hazard) or per-lane
    arrays (:mod:`sim.hazards.lanes`); :class:`Gamma` evaluates its own through them."""

    _fields = ("shape", "scale")
    shape: FloatArray | float
    scale: FloatArray | float

    def _log_q(self, z: FloatArray) -> FloatArray:
        """log Q(a, z), finite wherever z is finite."""
        q = sc.gammaincc(self.shape, z)
        out = np.log(q)
        tail = (q < 1e-280) & np.isfinite(z)
        if np.any(tail):
            out = np.array(out, dtype=np.float64)
            out[tail] = _gammaincc_cf(_sub(self.shape, tail), z[tail])[0]
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
            h[tail] = _gammaincc_cf(_sub(a, tail), z[tail])[1] / z[tail]
        return h

    def _hazard(self, t: FloatArray) -> FloatArray:
        theta = self.scale
        z = t / theta
        with np.errstate(invalid="ignore"):  # t = inf lanes, replaced below
            h = self._h_z(z) / theta
        return np.where(np.isinf(t), 1.0 / theta, h)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        return self._cum_z(t / self.scale)

    def _cum_z(self, z: FloatArray) -> FloatArray:
        """Cumulative hazard on the z = t/scale clock."""
        p = sc.gammainc(self.shape, z)
        h = np.array(-np.log1p(-p), dtype=np.float64)
        upper = p >= 0.5
        if np.any(upper):
            h[upper] = -self.take(upper)._log_q(z[upper])
        return h

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return self.scale * self._inv_z(y)

    def _inv_z(self, y: FloatArray) -> FloatArray:
        """Inverse cumulative hazard on the z = t/scale clock."""
        a = self.shape
        z = np.full(y.shape, np.inf)
        low = y <= math.log(2.0)  # P <= 1/2: invert the lower function, accurate for tiny y
        z[low] = sc.gammaincinv(_sub(a, low), -np.expm1(-y[low]))
        mid = (y > math.log(2.0)) & (y <= _GAMMA_TAIL_H)
        z[mid] = sc.gammainccinv(_sub(a, mid), np.exp(-y[mid]))
        far = (y > _GAMMA_TAIL_H) & np.isfinite(y)
        if np.any(far):
            z[far] = self.take(far)._far_tail_z(y[far])
        return z

    @property
    def _z_flat(self) -> FloatArray | float:
        """z beyond which the hazard equals 1/scale in double precision: there
        ``scale h = 1 - (a - 1)/z + O(z^-2)`` (the continued fraction of ``_gammaincc_cf``),
        a relative deviation below 2^-60."""
        return 2.0 ** 60 * np.maximum(1.0, np.abs(self.shape - 1.0))

    def conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        """The smooth families' inversion (:func:`invert_and_polish`), except on a clock so late
        that the hazard is flat (there ``T = e * scale``; also where ``x / scale`` overflows) or
        where the inversion overflowed (``x + T`` beyond the largest double with ``T`` finite):
        there the event time is taken on the ``z = t/scale`` clock, in two legs if it crosses the
        flat region."""
        t = invert_and_polish(self, x, e)
        z = x / self.scale
        lost = (e < np.inf) & (~(t < np.inf) | (z > self._z_flat))
        if np.any(lost):
            t = np.array(t, dtype=np.float64)
            t[lost] = _sub(self.scale, lost) * self.take(lost)._late_z(z[lost], e[lost])
        return t

    def _late_z(self, z: FloatArray, e: FloatArray) -> FloatArray:
        """Time on the z clock from ``z`` to spend the hazard ``e`` (1-D, finite ``e``): ``e`` itself
        from the flat region on; before it, the inverse up to the flat region's start and ``e``
        less the hazard spent there beyond it."""
        out = np.array(e, dtype=np.float64)
        early = ~(z > self._z_flat)
        if np.any(early):
            k = self.take(early)
            zf = k._z_flat
            ze, ee = z[early], e[early]
            hz = k._cum_z(ze)
            gap = k._cum_z(np.atleast_1d(np.asarray(zf, dtype=np.float64))) - hz  # hazard left before the flat region
            inside = ee <= gap
            with np.errstate(invalid="ignore"):  # inf - inf (the root beyond the largest double)
                first = np.where(inside, k._inv_z(np.where(inside, hz + ee, 0.0)) - ze, 0.0)
                out[early] = np.where(inside, first, (zf - ze) + (ee - gap))
        return np.where(np.isnan(out), np.inf, out)

    def _far_tail_z(self, y: FloatArray) -> FloatArray:
        """Solve -log Q(a, z) = y for y > _GAMMA_TAIL_H by Newton with a bracket (1-D arrays)."""
        a = self.shape
        z_lo = sc.gammainccinv(a, math.exp(-_GAMMA_TAIL_H))
        zl = np.array(np.broadcast_to(z_lo, y.shape), dtype=np.float64)
        h_lo, hz_lo = -self._log_q(zl), self._h_z(zl)
        # Lower bound on the hazard beyond z_lo: hz(z_lo) if increasing (a >= 1), else 1 (its limit).
        convex = np.broadcast_to(np.asarray(a) >= 1.0, y.shape)
        slope = np.where(convex, hz_lo, 1.0)
        lo = zl.copy()
        hi = z_lo + (y - h_lo) / slope
        z = np.where(convex, hi, lo)  # monotone Newton: from the right if convex
        with np.errstate(invalid="ignore"):  # y near the largest double: z overflows (inf - inf)
            z = self._far_newton(y, z, lo, hi)
        return np.where(np.isnan(z), np.inf, z)

    def _far_newton(self, y: FloatArray, z: FloatArray, lo: FloatArray, hi: FloatArray) -> FloatArray:
        """The bracketed Newton iteration of ``_far_tail_z``; each lane stops on its own."""
        active = np.ones(z.shape, dtype=bool)
        for _ in range(100):
            r = -self._log_q(z) - y
            hi = np.where(r > 0.0, z, hi)
            lo = np.where(r <= 0.0, z, lo)
            new = z - r / self._h_z(z)
            bad = ~((new >= lo) & (new <= hi))  # outside the bracket (or NaN): bisect
            new = np.where(r == 0.0, z, np.where(bad, lo + 0.5 * (hi - lo), new))
            done = (~bad & (np.abs(new - z) <= 1e-10 * z)) | (hi - lo <= 4e-16 * hi) | (r == 0.0)
            z = np.where(active, new, z)
            active &= ~done
            if not np.any(active):
                break
        return z


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
    dimensions: ClassVar[Mapping[str, Dimension]] = MappingProxyType({"shape": Dimension.DIMENSIONLESS, "scale": Dimension.TIME})
    _lanes: GammaLanes = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        super().__post_init__()
        object.__setattr__(self, "_lanes", GammaLanes(self.shape, self.scale))

    def _lane_params(self) -> tuple[float, float]:
        """The numbers :class:`GammaLanes` takes: ``(shape, scale)``."""
        return self.shape, self.scale

    def _log_q(self, z: FloatArray) -> FloatArray:
        return self._lanes._log_q(z)

    def _h_z(self, z: FloatArray) -> FloatArray:
        return self._lanes._h_z(z)

    def _hazard(self, t: FloatArray) -> FloatArray:
        return self._lanes._hazard(t)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        return self._lanes._cumhazard(t)

    def _cum_z(self, z: FloatArray) -> FloatArray:
        return self._lanes._cum_z(z)

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return self._lanes._inv_cumhazard(y)

    def _inv_z(self, y: FloatArray) -> FloatArray:
        return self._lanes._inv_z(y)

    @property
    def _z_flat(self) -> float:
        return float(self._lanes._z_flat)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        return self._lanes.conditional_time(x, e)

    def _conditional_time_large_ratio(self, x: FloatArray, e: FloatArray, hr: float) -> FloatArray | None:
        """Conditional time under ``hr * H`` where ``e / hr`` overflows: the hazard to spend then
        exceeds the largest double, so the time lies far in the flat region, ``T = e scale / hr``
        (relative error below ``z_flat / (e / hr)``); ``None`` for a shape so large that the
        flat region starts beyond ``2^-60`` of the largest double."""
        if self._z_flat > 2.0 ** -60 * _BIG:
            return None
        ratio = self.scale / hr
        if ratio < np.inf:
            return e * ratio
        return (e * self.scale) / hr

    _log_forms: ClassVar[bool] = True

    def _log_cumhazard_lt(self, lt: FloatArray) -> FloatArray:
        """log H at t = exp(lt). Where ``H < 1e-280`` it equals ``P(a, z)`` to rounding, and
        ``log P = a log z - z + log M - log Gamma(a + 1)`` with
        ``M = sum_k z^k / ((a + 1) ... (a + k))`` (DLMF 8.7.1, from memory), summed until the terms
        fall below the rounding; elsewhere ``log`` of the cumulative hazard."""
        a = self.shape
        with np.errstate(divide="ignore", over="ignore", under="ignore", invalid="ignore"):
            lz = lt - math.log(self.scale)
            z = np.exp(lz)
            h = self._cum_z(z)
            out = np.log(h)
            small = ~(h >= 1e-280)
            if np.any(small):
                zs = z[small]
                term = np.ones_like(zs)
                total = np.ones_like(zs)
                for k in range(1, 20000):
                    term = term * zs / (a + k)
                    total = total + term
                    if np.all(term <= 1e-17 * total):
                        break
                out[small] = a * lz[small] - zs + np.log(total) - sc.gammaln(a + 1.0)
        return out

    def _log_hazard_lt(self, lt: FloatArray) -> FloatArray:
        """log h at t = exp(lt): ``log`` of the hazard where it is a normal double, else
        ``(a - 1) log z - z - log Gamma(a) - log Q(a, z) - log scale`` (density over survival)."""
        a = self.shape
        with np.errstate(divide="ignore", over="ignore", under="ignore", invalid="ignore"):
            lz = lt - math.log(self.scale)
            z = np.exp(lz)
            hz = self._h_z(np.where(z < np.inf, z, 1.0))
            direct = np.where(z < np.inf, np.log(hz), 0.0)
            formula = (a - 1.0) * lz - z - sc.gammaln(a) - np.log(sc.gammaincc(a, z))
            return np.where((hz > 1e-300) & (hz < np.inf) | (z == np.inf), direct, formula) - math.log(self.scale)
