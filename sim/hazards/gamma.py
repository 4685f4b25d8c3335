"""The gamma event time as a hazard: survival from the regularised incomplete gamma function, with
the far upper tail (where ``Q(a, z)`` underflows) from Legendre's continued fraction."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import ClassVar

import numpy as np
from scipy import special as sc

from ._numerics import FloatArray
from .dimensions import Dimension
from .shape_scale import _ShapeScale

__all__ = ["Gamma"]


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
    dimensions: ClassVar[Mapping[str, Dimension]] = MappingProxyType({"shape": Dimension.DIMENSIONLESS, "scale": Dimension.TIME})

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
