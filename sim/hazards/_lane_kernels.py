"""Hazard kernels whose parameters may differ from lane to lane (private to :mod:`sim.hazards`).

A *lane* is one element of the arrays a kernel receives (in the engine: one patient). A
:class:`Lanes` object holds one family's parameters, each either a number (one hazard: every lane
the same) or an array with one value per lane. The family's formulas are written once, as methods
of its :class:`Lanes` subclass; the family's own hazard evaluates them with its numbers, and
:mod:`sim.hazards.lanes` with per-lane arrays gathered from many hazards (a block of parameter
draws). Every operation is elementwise, and every iteration stops lane by lane, so a lane's result
is the same bits whichever lanes share the call.

:func:`invert_and_polish` is the smooth families' conditional time (log-normal, gamma): the inverse
cumulative hazard, polished by Newton iterations on the increment of ``H`` where it loses relative
accuracy (Crowther & Lambert 2013, Stat Med 32(23):4118-4134), with the parameters carried along
with the lanes; ``Hazard._conditional_time`` runs it on the hazard itself (:class:`WholeHazard`).
"""

from __future__ import annotations

from typing import Any, ClassVar, TypeVar

import numpy as np
from numpy.typing import NDArray

from ._numerics import _EPS, _GL_NODES, _GL_WEIGHTS, _TINY, FloatArray

L = TypeVar("L", bound="Lanes")


def _sub(value: Any, mask: NDArray[np.bool_]) -> Any:
    """``value`` at the lanes ``mask`` selects: a number as it is; an array broadcast to the mask's
    shape first (a column of per-lane values against a 2-D mask of quadrature nodes)."""
    if np.ndim(value) == 0:
        return value
    return np.broadcast_to(value, mask.shape)[mask]


class Lanes:
    """One family's parameters, each a number or an array aligned with the lanes (``_fields``
    names them in order)."""

    _fields: ClassVar[tuple[str, ...]]

    def __init__(self, *values: Any) -> None:
        for name, value in zip(self._fields, values, strict=True):
            setattr(self, name, value)

    def take(self: L, mask: NDArray[np.bool_]) -> L:
        """The parameters of the lanes ``mask`` selects (numbers stay numbers)."""
        return type(self)(*(_sub(getattr(self, f), mask) for f in self._fields))

    def column(self: L) -> L:
        """Per-lane arrays as columns, to broadcast against ``(lanes, nodes)`` arrays."""
        return type(self)(*(v if np.ndim(v) == 0 else v[:, None] for v in (getattr(self, f) for f in self._fields)))

    # the family's kernels on float64 arrays aligned with the parameters
    def _hazard(self, t: FloatArray) -> FloatArray:
        raise NotImplementedError

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        raise NotImplementedError

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        raise NotImplementedError


class WholeHazard(Lanes):
    """One hazard seen as lanes that all share its parameters (the default conditional time of
    :class:`~sim.hazards.base.Hazard` runs :func:`invert_and_polish` on it)."""

    _fields = ("hazard",)

    def take(self, mask: NDArray[np.bool_]) -> "WholeHazard":
        return self

    def column(self) -> "WholeHazard":
        return self

    def _hazard(self, t: FloatArray) -> FloatArray:
        return self.hazard._hazard(t)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        return self.hazard._cumhazard(t)

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return self.hazard._inv_cumhazard(y)


def invert_and_polish(k: Lanes, x: FloatArray, e: FloatArray) -> FloatArray:
    """Conditional time ``T`` with ``H(x + T) - H(x) = e`` for smooth families with ``h > 0`` on
    ``(0, inf)``: invert, then polish.

    ``T0 = H^{-1}(H(x) + e) - x`` is accurate in absolute terms. Where that loses relative accuracy
    (``T0`` or ``e`` small next to ``x`` or ``H(x)``) it is polished by Newton iterations on
    ``int_x^{x+T} h(s) ds = e``, the integral by 12-point Gauss-Legendre, which involves no
    cancellation (numerical integration and root finding as in Crowther & Lambert 2013).
    """
    hx = k._cumhazard(x)
    t = k._inv_cumhazard(hx + e) - x
    t = np.where(e > 0.0, np.maximum(t, 0.0), 0.0)
    refine = (e > 0.0) & (t <= x) & ((t < 1e-3 * x) | (e < 1e-3 * hx))
    lost = (hx == np.inf) & (e > 0.0) & (e < np.inf) & (x < np.inf)  # H(x) overflowed at a finite x
    if np.any(lost):  # the hazard there is huge: start from the first-order time, never +inf
        with np.errstate(invalid="ignore"):
            t = np.where(lost, np.nan_to_num(e / k._hazard(x), nan=0.0), t)
        refine = refine | lost
    if np.any(refine):
        t = np.array(t, dtype=np.float64)
        t[refine] = _polish(k.take(refine), x[refine], e[refine], t[refine])
    return t


def _increment(k: Lanes, x: FloatArray, t: FloatArray) -> FloatArray:
    """H(x + t) - H(x) by Gauss-Legendre quadrature of h (for short intervals, t <= x)."""
    s = x[:, None] + t[:, None] * _GL_NODES
    # an elementwise product and a row sum, not a matrix-vector product: BLAS may round a lane
    # differently depending on how many lanes share the call (bit-identity across chunkings)
    return t * (k.column()._hazard(s) * _GL_WEIGHTS).sum(axis=1)


def _polish(k: Lanes, x: FloatArray, e: FloatArray, t0: FloatArray) -> FloatArray:
    """Newton on ``increment(x, T) = e`` from ``t0`` (1-D arrays); keeps ``t0`` where it fails
    (a non-finite or negative iterate, no convergence within 30 steps, or a result whose
    ``H(x + T) - H(x)`` misses ``e`` by more than the rounding of ``H``: a hazard so steep over
    ``[x, x + T]``, e.g. a log-normal with a tiny sigma, that the quadrature cannot follow)."""
    first = e / k._hazard(x)  # first-order solution
    t = np.where((t0 > 0.5 * first) & (t0 < 2.0 * first), t0, first)
    # Each lane stops on its own: its iterations (hence its bits) never depend on which other
    # lanes share the call, so results are the same for any chunking or block of draws.
    done = np.zeros(t.shape, dtype=bool)
    for _ in range(30):
        with np.errstate(invalid="ignore"):
            step = (_increment(k, x, t) - e) / k._hazard(x + t)
            new = np.clip(t - step, 0.5 * t, 2.0 * t)
        converged = ~(np.abs(step) > 1e-10 * t)  # quadratic convergence: the next iterate is final
        t = np.where(~done & np.isfinite(new), new, t)
        done |= converged
        if np.all(done):
            break
    good = np.isfinite(t) & (t >= 0.0) & done
    if np.any(good):  # the cumulative hazard must agree too, within its own rounding
        with np.errstate(invalid="ignore"):  # inf - inf where H overflowed: not agreed
            end = x + t
            h_end = k._cumhazard(end)
            slack = 16.0 * _EPS * (h_end + k._hazard(end) * end) + _TINY * k._hazard(end)
            good &= (np.abs((h_end - k._cumhazard(x)) - e) <= slack) & (slack < np.inf)
    return np.where(good, t, t0)
