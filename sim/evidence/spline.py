"""Royston-Parmar spline hazards: the log cumulative hazard as a restricted (natural) cubic spline in
log time with 1-3 interior knots (Royston & Parmar 2002, Stat Med 21:2175-2197;
docs/methods.md, 'Survival fits from trial evidence'). For fitting only: not a scenario hazard family.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..problems import ValidationError
from .data import SurvivalData
from .families import HAZARD_RATIO, FamilySpec

__all__ = ["RoystonParmar", "spline_spec", "spline_knots"]

_CENTILES = {1: (50.0,), 2: (100 / 3, 200 / 3), 3: (25.0, 50.0, 75.0)}


@dataclass(frozen=True)
class RoystonParmar:
    """Spline on the log cumulative hazard scale.

    Parameters
    ----------
    gammas : tuple of float
        :math:`\\gamma_0, \\gamma_1, \\dots, \\gamma_{m+1}` for ``m`` interior knots.
    knots : tuple of float
        Knots on the log-time scale: the lower boundary, the ``m`` interior knots, the upper boundary.

    Notes
    -----
    With :math:`x = \\log t`, :math:`s(x) = \\gamma_0 + \\gamma_1 x + \\sum_j \\gamma_{j+1} v_j(x)`,
    :math:`v_j(x) = (x - k_j)_+^3 - \\lambda_j (x - k_{\\min})_+^3 - (1 - \\lambda_j)(x - k_{\\max})_+^3`,
    :math:`\\lambda_j = (k_{\\max} - k_j)/(k_{\\max} - k_{\\min})`; :math:`H(t) = e^{s(x)}`,
    :math:`h(t) = e^{s(x)} s'(x) / t` (Royston & Parmar 2002). Beyond the boundary knots the spline
    is linear in log time (a Weibull tail). ``gammas = (-k log scale, k)`` without interior terms is the
    Weibull.
    """

    gammas: tuple[float, ...]
    knots: tuple[float, ...]
    family = "spline"

    def _basis(self, x: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """(s(x), s'(x))."""
        k = self.knots
        kmin, kmax = k[0], k[-1]
        g = self.gammas
        s = g[0] + g[1] * x
        ds = np.full_like(x, g[1])
        pos = lambda u: np.maximum(u, 0.0)  # noqa: E731
        for j, kj in enumerate(k[1:-1]):
            lam = (kmax - kj) / (kmax - kmin)
            s = s + g[j + 2] * (pos(x - kj) ** 3 - lam * pos(x - kmin) ** 3 - (1 - lam) * pos(x - kmax) ** 3)
            ds = ds + g[j + 2] * 3 * (pos(x - kj) ** 2 - lam * pos(x - kmin) ** 2 - (1 - lam) * pos(x - kmax) ** 2)
        return s, ds

    def log_hazard(self, t: ArrayLike) -> NDArray[np.float64]:
        t = np.asarray(t, dtype=np.float64)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            x = np.log(t)
            s, ds = self._basis(x)
            return np.where(ds > 0.0, s + np.log(np.where(ds > 0.0, ds, 1.0)) - x, -np.inf)

    def hazard(self, t: ArrayLike) -> NDArray[np.float64]:
        return np.exp(self.log_hazard(t))

    def cumhazard(self, t: ArrayLike) -> NDArray[np.float64]:
        t = np.asarray(t, dtype=np.float64)
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            s, _ = self._basis(np.log(t))
            return np.where(t > 0.0, np.exp(s), 0.0)

    def sf(self, t: ArrayLike) -> NDArray[np.float64]:
        return np.exp(-self.cumhazard(t))


def spline_knots(data: SurvivalData, interior: int) -> tuple[float, ...]:
    """Knots on log time: the smallest and largest log event time and the centiles of the log event
    times (50; 33, 67; 25, 50, 75) between them (Royston & Parmar 2002)."""
    if isinstance(interior, bool) or interior not in _CENTILES:
        raise ValidationError(("knots",), "must be 1, 2 or 3 interior knots", interior)
    x = np.log(data.time[data.event])
    if np.unique(x).size < interior + 2:
        raise ValidationError(("knots",), f"{interior} interior knot(s) need at least {interior + 2} distinct event "
                              f"times, the data have {np.unique(x).size}", interior)
    inner = np.percentile(x, _CENTILES[interior])
    return (float(x.min()), *map(float, inner), float(x.max()))


def spline_spec(data: SurvivalData, interior: int) -> FamilySpec:
    """The fitting recipe of a Royston-Parmar spline with ``interior`` knots (proportional hazards
    for two arms); starts from the Weibull fit."""
    knots = spline_knots(data, interior)
    m = len(knots) - 2

    def start(d: SurvivalData) -> NDArray[np.float64]:
        from .fitting import fit_family  # the Weibull fit gives the linear part

        w = fit_family(d, "weibull", arms=False)
        shape, scale = (w.estimates if w.converged else (1.0, 1.0 / (d.n_events / np.sum(d.time - d.entry))))
        return np.concatenate([[-shape * math.log(scale), shape], np.zeros(m)])

    names = tuple(f"gamma{i}" for i in range(m + 2))
    return FamilySpec("spline", names, (False,) * (m + 2), HAZARD_RATIO,
                      lambda v: RoystonParmar(tuple(float(a) for a in v), knots), start, scenario=False,
                      extra=(("knots", m), ("log_time_knots", knots)))
