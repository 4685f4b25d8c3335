"""Treatment-effect waning: a hazard ratio that holds until a time ``start``, moves to 1 by ``end``
and is 1 afterwards, applied to a base hazard on the same clock (docs/methods.md, 'Treatment-effect
waning').

The hazard is :math:`h(t) = R(t)\\,h_0(t)` with

.. math::

    R(t) = \\begin{cases} \\mathrm{hr} & t < t_1 \\\\
                          \\mathrm{hr}^{1 - w(t)} \\ \\text{(log scale)} \\text{ or }
                          \\mathrm{hr} + w(t)(1 - \\mathrm{hr}) \\ \\text{(HR scale)} & t_1 \\le t < t_2 \\\\
                          1 & t \\ge t_2 \\end{cases}, \\qquad w(t) = \\frac{t - t_1}{t_2 - t_1}.

On :math:`[0, t_1]` and :math:`[t_2, \\infty)` the cumulative hazard and the conditional event time
are those of proportional hazards (Bender, Augustin & Blettner 2005) and of the base itself, in
closed form where the base has one. On the window :math:`[t_1, t_2]` the cumulative hazard is
integrated numerically and inverted by a safeguarded Newton iteration (the approach of Crowther &
Lambert 2013), with stated tolerances (:data:`QUADRATURE_RTOL`, :data:`ROOT_RTOL`).

References
----------
.. [1] Bender R, Augustin T, Blettner M. Generating survival times to simulate Cox proportional
   hazards models. Stat Med 2005;24(11):1713-1723.
.. [2] Crowther MJ, Lambert PC. Simulating biologically plausible complex survival data.
   Stat Med 2013;32(23):4118-4134.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np

from ._numerics import FloatArray
from .base import Hazard, _invalid, _param
from .piecewise import PiecewiseConstant
from .proportional import ProportionalHazards

__all__ = ["WANING_SCALES", "QUADRATURE_RTOL", "ROOT_RTOL", "WaningHazardRatio", "waning_ratio", "rough_points"]

WANING_SCALES = ("log", "hr")
"""``"log"``: the log hazard ratio moves linearly to 0; ``"hr"``: the hazard ratio moves linearly to 1."""

QUADRATURE_RTOL = 1e-12
"""Relative tolerance of the cumulative hazard over the waning window: panels are halved until the
20-point Gauss-Legendre integral of a panel and the sum over its halves agree to
``QUADRATURE_RTOL / 10`` of the window's total (or a panel is narrower than the clock's rounding)."""

ROOT_RTOL = 4.0 * float(np.finfo(np.float64).eps)
"""Tolerance of the inverse on the window: the event time is found to within ``ROOT_RTOL`` times the
clock value (a few units in the last place): a Newton step or the bisection bracket that small."""

_GL_X, _GL_W = np.polynomial.legendre.leggauss(20)
_NODES = 0.5 * (_GL_X + 1.0)  # on [0, 1]
_WEIGHTS = 0.5 * _GL_W
_START_PANELS = 16
_MAX_PANELS = 4096
_MAX_ITER = 200


def _weighted(vals: FloatArray) -> FloatArray:
    """The Gauss-Legendre sum of each row, by an elementwise product and a row sum (not a BLAS
    matrix-vector product, whose rounding may depend on the number of rows: a lane's value must not
    depend on which other lanes share the call, so that runs are the same for any chunking)."""
    return (vals * _WEIGHTS).sum(axis=-1)


def rough_points(h: Hazard) -> tuple[float, ...]:
    """Clock values where ``h`` jumps or has a kink, as far as known: the band starts of a
    piecewise-constant hazard, a waning window's ends, the crossings of a hazard floor (wrappers
    report their base's too). Quadrature panels are split there; other hazards are smooth for
    clock > 0."""
    own = getattr(h, "_rough_points", None)
    if callable(own):
        return tuple(own())
    if isinstance(h, ProportionalHazards):
        return rough_points(h.base)
    if isinstance(h, PiecewiseConstant):
        return tuple(float(b) for b in h.breaks[1:])
    return ()


def waning_ratio(base: Hazard, hr: float, start: float, end: float, scale: str = "log") -> Hazard:
    """``base`` with a hazard ratio ``hr`` that wanes from ``start`` to ``end``: a
    :class:`WaningHazardRatio`, or the plain hazard (``hr == 1``, or ``end == 0``) or its
    proportional version where the ratio never changes within the clock's range."""
    w = WaningHazardRatio(base, hr, start, end, scale)  # checks every argument
    if w.hr == 1.0 or w.end == 0.0:
        return base
    return w


@dataclass(frozen=True)
class WaningHazardRatio(Hazard):
    """A base hazard times a hazard ratio that wanes linearly to 1 between two clock values.

    Parameters
    ----------
    base : Hazard
        The hazard without the effect, on the same clock.
    hr : float
        The hazard ratio until ``start``; ``> 0`` and finite on the log scale, ``>= 0`` and finite on
        the HR scale.
    start, end : float
        Clock values in years, ``0 <= start <= end`` and finite. ``start == end`` is an immediate
        return to the base hazard at ``start``.
    scale : {"log", "hr"}
        On which scale the ratio moves: ``"log"`` (``log R`` linear in time, the usual choice: a
        ratio and its inverse wane alike) or ``"hr"`` (``R`` linear in time).

    Notes
    -----
    With :math:`A = \\mathrm{hr}\\,H_0(t_1)` and :math:`W = \\int_{t_1}^{t_2} R h_0`:
    :math:`H(t) = \\mathrm{hr}\\,H_0(t)` for :math:`t \\le t_1`, :math:`A + \\int_{t_1}^t R h_0` on the
    window and :math:`A + W + H_0(t) - H_0(t_2)` after it. The window's integral is precomputed on
    adaptive panels (split at the base's jumps and kinks, :func:`rough_points`), each integrated by
    20-point Gauss-Legendre quadrature of :math:`R h_0`; a panel starting at clock 0, or closer to 0
    than its width (where :math:`h_0` may be infinite at 0: Weibull shape < 1), is integrated by
    parts, :math:`R(b)H_0(b) - R(a)H_0(a) - \\int_a^b R'(u) H_0(u)\\,du`, whose integrand is bounded.
    The conditional time walks the three pieces: closed forms before :math:`t_1` (the proportional
    hazards' conditional time with ``e / hr``) and after :math:`t_2` (the base's), and on the window
    a safeguarded Newton iteration on :math:`\\int_a^{a + \\tau} R h_0 = r` inside the panel that
    holds the answer (bisection when a step leaves the bracket). docs/methods.md,
    'Treatment-effect waning'.
    """

    base: Hazard
    hr: float
    start: float
    end: float
    scale: str = "log"
    family: ClassVar[str] = "waning_hazard_ratio"
    _before: Hazard = field(init=False, repr=False, compare=False)
    _edges: FloatArray = field(init=False, repr=False, compare=False)  # panel edges s_0 = t1 < ... < s_K = t2
    _cum: FloatArray = field(init=False, repr=False, compare=False)  # W_k = int_{t1}^{s_k} R h0
    _at_start: float = field(init=False, repr=False, compare=False)  # A = hr H0(t1)
    _h0_end: float = field(init=False, repr=False, compare=False)  # H0(t2)

    def __post_init__(self) -> None:
        fam = self.family
        if not isinstance(self.base, Hazard):
            raise _invalid(fam, ("base",), "must be a Hazard", self.base)
        if self.scale not in WANING_SCALES:
            raise _invalid(fam, ("scale",), f"must be one of {list(WANING_SCALES)}", self.scale)
        hr = _param(fam, "hr", self.hr, "positive" if self.scale == "log" else "nonnegative")
        start = _param(fam, "start", self.start, "nonnegative")
        end = _param(fam, "end", self.end, "nonnegative")
        if end < start:
            raise _invalid(fam, ("end",), f"must be >= start ({start!r})", end)
        for name, value in (("hr", hr), ("start", start), ("end", end)):
            object.__setattr__(self, name, value)
        object.__setattr__(self, "_before", self.base.scaled(hr))
        with np.errstate(divide="ignore", over="ignore", under="ignore", invalid="ignore"):
            a = float(self._before._cumhazard(np.array(start)))
            h0_end = float(self.base._cumhazard(np.array(end)))
            edges, cum = self._panels() if end > start else (np.array([start]), np.zeros(1))
        for name, value in (("_at_start", a), ("_h0_end", h0_end), ("_edges", edges), ("_cum", cum)):
            if isinstance(value, np.ndarray):
                value.setflags(write=False)
            object.__setattr__(self, name, value)

    # ---- the ratio -------------------------------------------------------------------------
    def ratio(self, t: FloatArray) -> FloatArray:
        """The hazard ratio :math:`R(t)` at clock values ``t`` (any ``t >= 0``, ``inf`` included)."""
        t = np.asarray(t, dtype=np.float64)
        t1, t2, hr = self.start, self.end, self.hr
        if t2 == t1:
            return np.where(t < t1, hr, 1.0)
        w = np.clip((t - t1) / (t2 - t1), 0.0, 1.0)
        if self.scale == "log":
            return np.exp((1.0 - w) * math.log(hr))
        return hr + w * (1.0 - hr)

    def _ratio_slope(self, t: FloatArray) -> FloatArray:
        """:math:`R'(t)` on the window (``t`` inside ``[start, end]``)."""
        span = np.float64(self.end - self.start)  # numpy division: a tiny span gives inf, not an exception
        if self.scale == "log":
            return -self.ratio(t) * (np.float64(math.log(self.hr)) / span)
        return np.full(np.shape(t), np.float64(1.0 - self.hr) / span)

    # ---- quadrature on the window ----------------------------------------------------------
    def _integral(self, a: FloatArray, b: FloatArray) -> FloatArray:
        """:math:`\\int_a^b R h_0` for ``start <= a <= b <= end`` (1-D arrays), by 20-point
        Gauss-Legendre quadrature of :math:`R h_0`, or by parts where ``a`` is closer to 0 than
        the interval is long (see the class notes)."""
        width = b - a
        s = a[:, None] + width[:, None] * _NODES
        by_parts = a < width
        out = np.zeros(a.shape)
        with np.errstate(invalid="ignore"):  # 0 * inf (a ratio of 0 where h0 overflowed): 0 below
            d = ~by_parts & (width > 0.0)
            if np.any(d):
                sd = s[d]
                vals = self.ratio(sd) * self.base._hazard(sd)
                vals = np.where(np.isnan(vals), 0.0, vals)
                out[d] = width[d] * _weighted(vals)
            if np.any(by_parts):
                ap, bp, sp = a[by_parts], b[by_parts], s[by_parts]
                ends = self.ratio(bp) * self.base._cumhazard(bp) - self.ratio(ap) * self.base._cumhazard(ap)
                corr = _weighted(self._ratio_slope(sp) * self.base._cumhazard(sp))
                got = ends - width[by_parts] * corr
                out[by_parts] = np.where(np.isnan(got), np.inf, got)  # inf - inf: H0 overflowed
        return np.maximum(out, 0.0)

    def _panels(self) -> tuple[FloatArray, FloatArray]:
        """Adaptive panel edges on [start, end] and the cumulative integral at each edge."""
        t1, t2 = self.start, self.end
        pts = {t1, t2, *np.linspace(t1, t2, _START_PANELS + 1)[1:-1].tolist()}
        pts.update(p for p in rough_points(self.base) if t1 < p < t2)
        edges = np.array(sorted(pts))
        whole = self._integral(edges[:-1], edges[1:])
        for _ in range(60):  # each round halves the panels whose two halves disagree with them
            mid = 0.5 * (edges[:-1] + edges[1:])
            halves = self._integral(edges[:-1], mid) + self._integral(mid, edges[1:])
            total = float(np.sum(halves))
            scale = total if math.isfinite(total) and total > 0.0 else 1.0
            with np.errstate(invalid="ignore"):
                bad = np.abs(halves - whole) > 0.1 * QUADRATURE_RTOL * scale
            bad &= (mid > edges[:-1]) & (mid < edges[1:]) & np.isfinite(halves)  # a panel that can be split
            if not np.any(bad) or edges.size + np.count_nonzero(bad) > _MAX_PANELS:
                break
            edges = np.sort(np.concatenate((edges, mid[bad])))
            whole = self._integral(edges[:-1], edges[1:])
        # the panels' single-rule values: the same rule as the queries within a panel, so H is
        # continuous at the panel edges (the halves agree with them to the tolerance)
        cum = np.concatenate(([0.0], np.cumsum(whole)))
        return edges, cum

    def _window(self, t: FloatArray) -> FloatArray:
        """:math:`\\int_{t_1}^t R h_0` for ``t`` in the window (1-D array)."""
        k = np.clip(np.searchsorted(self._edges, t, side="right") - 1, 0, self._edges.size - 2)
        return self._cum[k] + self._integral(self._edges[k], t)

    # ---- the Hazard interface --------------------------------------------------------------
    @property
    def cumhazard_limit(self) -> float:
        tail = self.base.cumhazard_limit - self._h0_end
        if math.isnan(tail):  # inf - inf: H0(t2) overflowed; the limit is infinite then
            tail = math.inf
        tail = max(tail, 0.0)  # an improper base already at its limit by t2 (rounding)
        return self._at_start + float(self._cum[-1]) + tail

    def params(self) -> dict[str, Any]:
        """``hr``, ``start``, ``end``, ``scale`` and the base's parameters as ``base.<name>``."""
        out: dict[str, Any] = {"hr": self.hr, "start": self.start, "end": self.end, "scale": self.scale,
                               "base.family": self.base.family}
        out.update({f"base.{k}": v for k, v in self.base.params().items()})
        return out

    def _rough_points(self) -> tuple[float, ...]:
        return (self.start, self.end, *rough_points(self.base))

    def _hazard(self, t: FloatArray) -> FloatArray:
        with np.errstate(invalid="ignore"):  # 0 * inf: a ratio of 0 where h0 is infinite (clock 0)
            out = self.ratio(t) * self.base._hazard(t)
        return np.where(np.isnan(out), 0.0, out)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        t = np.asarray(t, dtype=np.float64)
        t1, t2 = self.start, self.end
        out = np.empty(t.shape)
        before = t < t1
        after = ~before & (t >= t2)
        inside = ~before & ~after
        if np.any(before):
            out[before] = self._before._cumhazard(t[before])
        if np.any(inside):
            out[inside] = self._at_start + self._window(t[inside])
        if np.any(after):
            with np.errstate(invalid="ignore"):
                tail = self.base._cumhazard(t[after]) - self._h0_end
            tail = np.where(np.isnan(tail), np.inf, np.maximum(tail, 0.0))  # inf - inf: the base overflowed
            out[after] = self._at_start + self._cum[-1] + tail
        return out

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        y = np.asarray(y, dtype=np.float64)
        return self._conditional_time(np.zeros(y.shape), y)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        x, e = np.broadcast_arrays(np.asarray(x, dtype=np.float64), np.asarray(e, dtype=np.float64))
        shape = x.shape
        x, e = x.ravel(), e.ravel()
        t1, t2 = self.start, self.end
        out = np.full(x.shape, np.nan)
        at = x.copy()  # the clock where the remaining draw starts
        rem = e.copy()  # the part of the draw not yet used
        # piece 1: proportional hazards before t1
        m = np.flatnonzero(x < t1)
        if m.size:
            tm = self._before._conditional_time(x[m], e[m])
            with np.errstate(invalid="ignore"):  # inf - inf: H overflowed before t1; the event is there
                used = self._before._cumhazard(np.full(m.size, t1)) - self._before._cumhazard(x[m])
            inside = (x[m] + tm <= t1) | ~np.isfinite(used)
            out[m[inside]] = tm[inside]
            go = m[~inside]
            with np.errstate(invalid="ignore"):  # inf - inf: an infinite draw stays infinite
                left = e[go] - used[~inside]
            rem[go] = np.where(np.isnan(left), np.inf, np.maximum(left, 0.0))
            at[go] = t1
        # piece 2: the window
        if t2 > t1:
            m = np.flatnonzero(np.isnan(out) & (at >= t1) & (at < t2))
            if m.size:
                tw, left = self._in_window(at[m], rem[m])
                found = ~np.isnan(tw)
                out[m[found]] = (at[m[found]] - x[m[found]]) + tw[found]
                go = m[~found]
                rem[go] = left[~found]
                at[go] = t2
        # piece 3: the base after t2
        m = np.flatnonzero(np.isnan(out))
        if m.size:
            out[m] = (at[m] - x[m]) + self.base._conditional_time(at[m], rem[m])
        return out.reshape(shape)

    def _in_window(self, a: FloatArray, r: FloatArray) -> tuple[FloatArray, FloatArray]:
        """From clock ``a`` in the window with draw ``r`` left: the time to the event where it falls
        inside the window (NaN elsewhere) and, where it does not, the draw left at ``end``."""
        edges, cum = self._edges, self._cum
        last = edges.size - 2
        k = np.clip(np.searchsorted(edges, a, side="right") - 1, 0, last)
        nxt = edges[k + 1]
        with np.errstate(invalid="ignore"):  # inf - inf where the integral overflowed: +inf below
            in_panel = cum[k + 1] - cum[k]  # what is left of a's own panel: all of it from its start (t1)
            off = a != edges[k]
            if np.any(off):
                in_panel[off] = self._integral(a[off], nxt[off])
            rest = cum[-1] - cum[k + 1]  # the panels after it
            in_panel = np.where(np.isnan(in_panel), np.inf, in_panel)
            rest = np.where(k == last, 0.0, np.where(np.isnan(rest), np.inf, rest))
            left = r - in_panel - rest  # NaN only for an infinite draw: +inf
            left = np.where(np.isnan(left), np.inf, np.maximum(left, 0.0))
        tau = np.full(a.shape, np.nan)
        same = r < in_panel
        if np.any(same):
            tau[same] = self._solve(a[same], r[same], nxt[same] - a[same])
        with np.errstate(invalid="ignore"):  # inf - inf for an infinite draw: not later (NaN < x is False)
            later = ~same & (r - in_panel < rest)
        if np.any(later):
            y = cum[k[later] + 1] + (r[later] - in_panel[later])  # the target on the panels' scale
            j = np.clip(np.searchsorted(cum, y, side="right") - 1, k[later] + 1, last)
            s = edges[j]
            with np.errstate(invalid="ignore"):  # inf - inf: the integral overflowed there; the event is at once
                target = np.nan_to_num(np.maximum(y - cum[j], 0.0), nan=0.0, posinf=np.inf)
            tau[later] = (s - a[later]) + self._solve(s, target, edges[j + 1] - s)
        return tau, left

    def _solve(self, a: FloatArray, r: FloatArray, width: FloatArray) -> FloatArray:
        """``tau`` in ``[0, width]`` with ``int_a^{a + tau} R h0 = r`` (1-D arrays; ``r`` no more
        than the integral over the whole width): Newton steps kept inside a shrinking bracket,
        bisection otherwise, to :data:`ROOT_RTOL` of the clock value."""
        lo = np.zeros(a.shape)
        hi = width.copy()
        h_a = self._hazard(a)
        with np.errstate(divide="ignore", invalid="ignore"):
            first = r / h_a  # the first-order time
        ok = np.isfinite(first) & (first > 0.0) & (first < width)
        tau = np.where(r > 0.0, np.where(ok, first, 0.5 * width), 0.0)
        active = np.flatnonzero(r > 0.0)
        for _ in range(_MAX_ITER):
            if active.size == 0:
                break
            aa, ta, ra = a[active], tau[active], r[active]
            f = self._integral(aa, aa + ta) - ra
            lo[active] = np.where(f <= 0.0, ta, lo[active])
            hi[active] = np.where(f > 0.0, ta, hi[active])
            d = self._hazard(aa + ta)
            with np.errstate(divide="ignore", invalid="ignore"):
                step = f / d
            newton = ta - step
            la, ha = lo[active], hi[active]
            tol = ROOT_RTOL * (aa + ta) + 1e-300
            converged = np.abs(step) <= tol  # a final Newton step (quadratic convergence): take it
            inside = np.isfinite(newton) & (newton >= la) & (newton <= ha)
            new = np.where(inside | converged, np.clip(newton, la, ha), 0.5 * (la + ha))
            done = converged | (ha - la <= tol)
            tau[active] = new
            active = active[~done]
        return tau
