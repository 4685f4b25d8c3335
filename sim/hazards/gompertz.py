"""Hazards exponential in the clock: Gompertz and Gompertz-Makeham (adult human mortality on
attained age).

References
----------
Bender R, Augustin T, Blettner M. Generating survival times to simulate Cox proportional hazards
models. Stat Med 2005;24(11):1713-1723.
Finch CE, Pike MC, Witten M. Slow mortality rate accelerations during aging in some animals
approximate that of humans. Science 1990;249:902-905.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import ClassVar

import numpy as np
from scipy import special as sc

from . import _fused
from ._lane_kernels import Lanes, _sub
from ._numerics import FloatArray, _log1prel, _log_expm1, _log_exprel, _softplus
from .base import Hazard, _param
from .dimensions import Dimension

__all__ = ["Gompertz", "GompertzMakeham", "MakehamLanes", "gompertz_times"]


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


_TINY_NORMAL = float(np.finfo(np.float64).tiny)  # smallest normal double, 2.2e-308
_BIG = float(np.finfo(np.float64).max)

Num = FloatArray | float


def _log_abs(v: float) -> float:
    """``log |v|`` by ``math.log`` (``-inf`` at 0): a slope's or a constant's log as the kernels take
    it, computed once per hazard by the same scalar function whichever call the hazard joins."""
    return math.log(abs(v)) if v != 0.0 else -math.inf


def _flat_time(log_b: Num, g: Num, log_g: Num, e: FloatArray) -> FloatArray:
    """``g = 0``: ``T = e / B``, in log space where ``1/B`` overflowed (``B`` subnormal)."""
    with np.errstate(invalid="ignore"):  # 0 * inf where 1/B overflowed: replaced below
        t = e * np.exp(-np.asarray(log_b, dtype=np.float64))
    edge = ~np.isfinite(t) & (e < np.inf)
    if np.any(edge):
        with np.errstate(invalid="ignore"):  # e = 0 lanes (0 * inf) are replaced here
            t = np.where(edge, np.where(e > 0.0, np.exp(np.log(e) - log_b), 0.0), t)
    return t


def _rising_time(log_b: Num, g: Num, log_g: Num, e: FloatArray) -> FloatArray:
    """``g > 0``: the short form ``T = log1p(v) / g`` with ``v = e g / B`` formed directly (one exp,
    one log1p instead of about six transcendental passes), as accurate as the log-space form (a few
    ulp, log1p being accurate for small v) wherever ``v`` and ``g / B`` are normal, finite numbers (a
    subnormal ``g / B``, e.g. ``g = 5e-324``, has lost digits even when ``v`` is normal); the
    log-space form (:func:`_log_rising`) on the other lanes, chosen lane by lane."""
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        g_over_b = np.exp(log_g - np.asarray(log_b, dtype=np.float64))
        v = e * g_over_b
    short = (v >= 1e-300) & (v < 1e300) & (g_over_b >= _TINY_NORMAL)
    if v.size and np.all(short):
        return np.log1p(v) / g
    if not np.any(short):
        return _log_rising(log_b, g, log_g, e)
    long = _log_rising(log_b, g, log_g, np.where(short, np.inf, e))
    with np.errstate(invalid="ignore"):  # NaN v in the long form's lanes, not used
        return np.where(short, np.log1p(v) / g, long)


def _log_rising(log_b: Num, g: Num, log_g: Num, e: FloatArray) -> FloatArray:
    """``g > 0`` in log space: ``softplus(log v) / g`` for ``v > 1``, ``(e/B) log1p(v)/v`` else."""
    log_e = np.log(e)
    # Lanes where log B is infinite (g x overflowed: B = inf) together with e = 0 or e = inf make
    # inf - inf here; the where below gives them T = 0 (e = 0) and T = inf (e = inf).
    with np.errstate(invalid="ignore"):
        lv = log_g + log_e - log_b  # log |v|
        ratio = np.exp(log_e - log_b)  # e / B
        small = ratio * _log1prel(np.exp(np.minimum(lv, 0.0)))
        t = np.where(lv > 0.0, _softplus(lv) / g, small)
        edge = ~(t >= 0.0) | (e == np.inf)  # NaN (inf - inf) or an infinite draw
        return np.where(edge, np.where(e > 0.0, np.where(e < np.inf, 0.0, np.inf), 0.0), t) \
            if np.any(edge) else t


def _falling_time(log_b: Num, g: Num, log_g: Num, e: FloatArray) -> FloatArray:
    """``g < 0`` (improper): ``v`` in ``[-1, 0]``; ``log1p(-1) = -inf`` gives ``+inf`` (never) exactly
    when ``|v| >= 1``. Lanes with ``log B = -inf`` (``B = 0``) and ``e = 0`` or ``inf``: the where."""
    log_e = np.log(e)
    with np.errstate(invalid="ignore"):
        lv = log_g + log_e - log_b  # log |v|
        ratio = np.exp(log_e - log_b)  # e / B
        t = ratio * _log1prel(-np.exp(np.minimum(lv, 0.0)))
    return np.where(e > 0.0, np.where(lv >= 0.0, np.inf, t), 0.0)


def _gompertz_time(log_b: Num, g: Num, log_g: Num, e: FloatArray) -> FloatArray:
    """Solve (B/g)(exp(g T) - 1) = e for T with B = exp(log_b): T = log1p(g e / B) / g.

    ``log_b``, the slope ``g`` and ``log_g = log |g|`` (:func:`_log_abs`) are numbers (one hazard)
    or arrays aligned with ``e`` (one value per lane). Written as ``(e/B) * log1p(v)/v`` with
    ``v = g e / B`` when ``|v| <= 1`` and as ``softplus(log v) / g`` when ``v > 1``; ``+inf`` when
    ``v <= -1`` (improper, g < 0); ``e / B`` where ``g = 0``. Exact in the limit g -> 0 (gives
    e / B) and free of overflow for huge ``e / B``. The form is chosen lane by lane from the lane's
    slope (its sign) and numbers; lanes of one sign go through their form together, so a lane gets
    the same bits whichever lanes share the call.
    """
    rising, falling = np.asarray(g) > 0.0, np.asarray(g) < 0.0
    forms = ((rising, _rising_time), (falling, _falling_time), (~(rising | falling), _flat_time))
    for lanes, form in forms:
        if np.all(lanes):
            return form(log_b, g, log_g, e)
    t = np.empty(e.shape)  # slopes of more than one sign: each sign's lanes through its form
    for lanes, form in forms:
        if np.any(lanes):
            t[lanes] = form(_sub(log_b, lanes), _sub(g, lanes), _sub(log_g, lanes), e[lanes])
    return t


def _log_form(log_b: FloatArray, g: Num, t: FloatArray, edge: FloatArray, bem1: FloatArray,
              gomp: FloatArray) -> tuple[FloatArray, FloatArray]:
    """``B expm1(g t)`` and ``B exp(g t)`` from ``log B`` on the lanes ``edge`` (the others kept):
    ``sign(g) exp(log B + log|expm1(g t)|)`` and ``exp(log B + g t)``, finite wherever the
    products are, whatever the size of ``exp(g t)`` or the precision of a subnormal ``B``."""
    gt = g * t
    with np.errstate(divide="ignore"):  # t = 0: log 0 = -inf, exp(-inf) = 0
        log_abs = np.where(gt > 0.0, _log_expm1(np.maximum(gt, 0.0)), np.log(-np.expm1(np.minimum(gt, 0.0))))
    lb = np.where(edge, log_b, 0.0)
    return (np.where(edge, np.copysign(1.0, g) * np.exp(lb + np.where(edge, log_abs, 0.0)), bem1),
            np.where(edge, np.exp(lb + np.where(edge, gt, 0.0)), gomp))


def gompertz_times(log_rate: Num, shape: Num, log_shape: Num, x: FloatArray, e: FloatArray) -> FloatArray:
    """Conditional event times of Gompertz hazards whose log-rate, slope ``shape`` (g, any sign) and
    ``log_shape = log |g|`` may differ from lane to lane (numbers, or arrays with one value per
    patient: the numbers of each lane's hazard, :meth:`Gompertz._lane_params`):
    :math:`T = \\log(1 + g e / (b e^{g x})) / g` through ``_gompertz_time`` with
    :math:`\\log B = \\log b + g x`. :meth:`Gompertz._conditional_time` is this function with its own
    numbers, so a lane gets the bits of its own hazard (the engine evaluates a block of parameter
    draws in one call with it: :func:`sim.engine.simulate_draws`)."""
    if _fused.fusable((log_rate, shape, log_shape), (x, e)) and shape > 0.0:
        # _rising_time's short form with its arithmetic fused (sim.hazards._fused): the same bits
        t = np.empty(x.size)
        _fused.minus_affine(log_shape, log_rate, shape, x, t)  # log(g / B), B = b exp(g x)
        with np.errstate(over="ignore", under="ignore", invalid="ignore"):
            np.exp(t, out=t)
            if _fused.scale_within(e, t, 1e-300, 1e300, _TINY_NORMAL):  # v = e g / B, all normal
                np.log1p(t, out=t)
                return np.divide(t, shape, out=t)
    return _gompertz_time(log_rate + shape * x, shape, log_shape, e)


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
    :math:`H^{-1}(y) = \\log(1 + g y / b) / g` (docs/methods.md, 'Hazards and survival'; Bender et al. 2005).
    For :math:`g < 0`, :math:`H(\\infty) = b/|g|` and the event never happens with probability
    :math:`e^{b/g}`; :math:`H^{-1}(y) = +\\infty` for :math:`y \\ge b/|g|`.
    Conditional time: :math:`T = \\log(1 + g e / (b e^{g x})) / g`, evaluated with ``log1p``
    and in log space (see ``_gompertz_time``), continuous through ``g = 0``.
    scipy (``g > 0``): ``gompertz(c=b/g, scale=1/g)``.
    """

    rate: float
    shape: float
    family: ClassVar[str] = "gompertz"
    dimensions: ClassVar[Mapping[str, Dimension]] = MappingProxyType({"rate": Dimension.RATE, "shape": Dimension.RATE})

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

    def _lane_params(self) -> tuple[float, float, float]:
        """The numbers :func:`gompertz_times` takes: ``(log rate, shape, log |shape|)``."""
        return math.log(self.rate), self.shape, _log_abs(self.shape)

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return _gompertz_time(math.log(self.rate), self.shape, _log_abs(self.shape), y)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        return gompertz_times(*self._lane_params(), x, e)

    def _conditional_time_large_ratio(self, x: FloatArray, e: FloatArray, hr: float) -> FloatArray:
        """Under ``hr * H``: the Gompertz time with ``log B = log hr + log b + g x`` (no ``b hr``
        formed, which may underflow, and no ``e / hr``, which overflowed)."""
        g = self.shape
        return _gompertz_time(math.log(hr) + math.log(self.rate) + g * x, g, _log_abs(g), e)


class MakehamLanes(Lanes):
    """The Gompertz-Makeham conditional time with ``rate`` b, ``log_rate``, ``shape`` g,
    ``log_shape`` (``log |g|``), ``constant`` c and ``log_constant`` as numbers (one hazard,
    :meth:`GompertzMakeham._lane_params`) or arrays with one value per lane (a block of parameter
    draws, :mod:`sim.hazards.lanes`). :class:`GompertzMakeham` evaluates its own through it, so a
    lane gets the bits of its own hazard whichever lanes share the call.

    The form is chosen lane by lane: the Gompertz time where ``c = 0``, the exponential time
    ``e / (b + c)`` where ``g = 0``, otherwise the linear solution ``e / (c + B)`` where it is
    exact and Halley's method (``_newton``) where it is not (see :class:`GompertzMakeham`). Every
    iteration stops lane by lane.
    """

    _fields = ("rate", "log_rate", "shape", "log_shape", "constant", "log_constant")
    rate: Num
    log_rate: Num
    shape: Num
    log_shape: Num
    constant: Num
    log_constant: Num

    def conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        """``T`` from clocks ``x``: :meth:`solve` with ``log B = log b + g x``."""
        return self.solve(self.log_rate + self.shape * x, e)

    def solve(self, log_b: FloatArray, e: FloatArray) -> FloatArray:
        """T with c T + (B/g)(exp(g T) - 1) = e, B = exp(log_b); arrays of equal shape."""
        g, c = np.asarray(self.shape), np.asarray(self.constant)
        pure, flat = c == 0.0, g == 0.0
        forms = ((pure, MakehamLanes._gompertz), (~pure & flat, MakehamLanes._flat),
                 (~pure & ~flat, MakehamLanes._general))
        for lanes, form in forms:
            if np.all(lanes):
                return form(self, log_b, e)
        t = np.empty(e.shape)  # lanes of more than one form: each form on its own lanes
        for lanes, form in forms:
            if np.any(lanes):
                t[lanes] = form(self.take(lanes), log_b[lanes], e[lanes])
        return t

    def _gompertz(self, log_b: FloatArray, e: FloatArray) -> FloatArray:
        """``c = 0``: the Gompertz time."""
        return _gompertz_time(log_b, self.shape, self.log_shape, e)

    def _flat(self, log_b: FloatArray, e: FloatArray) -> FloatArray:
        """``g = 0``: ``e / (b + c)``, all halved where ``b + c`` overflows (both near the largest
        double)."""
        b, c = self.rate, self.constant
        with np.errstate(invalid="ignore"):  # inf / inf where b + c overflowed: replaced below
            t = e / (b + c)
        wide = np.asarray(b + c) == math.inf
        if np.any(wide):
            t = np.where(wide, (0.5 * e) / (0.5 * b + 0.5 * c), t)
        return t

    def _general(self, log_b: FloatArray, e: FloatArray) -> FloatArray:
        """``c > 0``, ``g != 0``: the linear solution where exact, Halley's method elsewhere."""
        with np.errstate(invalid="ignore"):  # inf / inf (an infinite draw where B overflowed)
            t = e / (self.constant + np.exp(log_b))  # linear solution; exact when |g| t is negligible
        t = np.where(e == np.inf, np.inf, t) if np.any(e == np.inf) else t
        hard = (np.abs(self.shape) * t > 1e-17) & (e < np.inf)
        if np.any(hard):
            t = np.array(t, dtype=np.float64)
            t[hard] = self.take(hard)._newton(log_b[hard], e[hard])
        return t

    def _far_gompertz(self, log_b: FloatArray, e: FloatArray) -> FloatArray:
        """Root of F(T) = e for g > 0 where g T > 700 (``exp(g T)`` would overflow): there the
        Gompertz term dwarfs the Makeham one (its hazard exceeds ``e^700 B``), so the fixed point
        ``T = T_G(e - c T)`` (``T_G`` the pure Gompertz time, in log space) contracts by a factor
        ``c / (B e^{g T}) < 1/20`` per step; ten steps reach rounding level."""
        c, g, log_g = self.constant, self.shape, self.log_shape
        t = _gompertz_time(log_b, g, log_g, e)
        for _ in range(10):
            t = _gompertz_time(log_b, g, log_g, np.maximum(e - c * t, 0.0))
        return t

    def _newton(self, log_b: FloatArray, e: FloatArray) -> FloatArray:
        """Safeguarded Halley iteration on F(T) = e for 1-D arrays with 0 < e < inf.

        ``f = F(T) - e = c T + (B/g) expm1(g T) - e``, ``F' = c + B (1 + expm1(g T))`` and
        ``F'' = g B (1 + expm1(g T))`` cost one ``expm1`` per step. Bracket: the hazard from ``x``
        on is ``>= c + B`` if ``g > 0`` (so ``T <= e/(c + B)``) and ``<= c + B`` if ``g < 0`` (so
        ``T >= e/(c + B)``); ``T <= min(e/c, T_G(e))`` always, and for ``g > 0`` also
        ``T >= min(e/c, T_G(e)) / 2`` (``T_G`` is concave in ``e``). A step leaving the shrinking
        bracket is replaced by bisection. Converged once a step is below 1e-8 of ``T`` (cubic
        convergence: the step then taken leaves a relative error at rounding level). The bracket's
        side, the rescaling of tiny numbers and every stop are decided lane by lane.
        """
        g = self.shape
        big_b = np.exp(log_b)
        big_b0, e0 = big_b, e
        c = self.constant
        top_size = np.maximum(np.maximum(big_b, c), e)
        # B subnormal (few significant bits) or exp(g T) near overflow: the Gompertz terms in log
        # form there, from log B (scaled like B below), never from the rounded B
        sub = big_b < _TINY_NORMAL
        deep = top_size < 2.0 ** -800  # c, B and e all tiny: subnormal arithmetic would lose digits
        if np.any(deep):  # F(T) = e is unchanged when c, B and e are scaled by one power of two
            power = np.minimum(-np.floor(np.log2(np.where(deep, top_size, 1.0))), 1000.0)  # 2**1000 finite
            scale = np.where(deep, np.exp2(power), 1.0)
            log_bs = log_b + power * math.log(2.0)
            # a subnormal B scaled from log B (its bracket and first terms), not from its few bits
            big_b = np.where(deep & sub, np.exp(log_bs), big_b * scale)
            c, e = c * scale, e * scale
        else:
            log_bs = log_b
            c = np.array(np.broadcast_to(c, e.shape), dtype=np.float64)
        t_c = e / c
        t_g = _gompertz_time(log_bs, g, self.log_shape, e)  # with B and e scaled alike (T unchanged)
        t_lin = e / (c + big_b)
        rising = np.asarray(g) > 0.0
        lo = np.where(rising, 0.5 * np.minimum(t_c, t_g), t_lin)
        hi = np.where(rising, np.minimum(t_lin, t_g), np.minimum(t_c, t_g))
        hi = np.minimum(hi, _BIG)  # e/c may overflow for a subnormal c (+inf restored at the end)
        t = np.clip(1.0 / (1.0 / t_c + 1.0 / t_g), lo, hi)  # harmonic guess, exact for small e
        # a lower end that overflowed (e/c and T_G, or e/(c + B), beyond the largest double): the root
        # is at least half the largest double (the bisection's midpoints stay finite)
        lo = np.where(lo == np.inf, np.minimum(0.5 * _BIG, hi), lo)
        out = np.empty_like(e)
        idx = np.arange(e.size)
        for _ in range(200):
            with np.errstate(invalid="ignore"):  # inf/inf steps near the top of the range: NaN -> bisect
                em1 = np.expm1(g * t)
                bem1 = big_b * em1  # B expm1(g t)
                gomp = big_b * (1.0 + em1)  # Gompertz hazard at x + t
                edge = sub | (g * t > 700.0)
                if np.any(edge):
                    bem1, gomp = _log_form(log_bs, g, t, edge, bem1, gomp)
                f = c * t + bem1 / g - e  # > 0: t too large
                hi = np.where(f > 0.0, t, hi)
                lo = np.where(f <= 0.0, t, lo)
                fp = c + gomp
                step = f * fp / (fp * fp - 0.5 * f * g * gomp)
                new = t - step
            bad = ~((new >= lo) & (new <= hi))  # outside the bracket (or NaN): bisect
            with np.errstate(invalid="ignore"):  # inf - inf (a bracket at +inf): that lane's f decides
                mid = np.where(hi > 4.0 * lo, np.sqrt(lo) * np.sqrt(hi), lo + 0.5 * (hi - lo))  # geometric if wide
            new = np.where(f == 0.0, t, np.where(bad, mid, new))
            done = (~bad & (np.abs(step) <= 1e-8 * t)) | (hi - lo <= 4e-16 * hi) | (f == 0.0)
            out[idx[done]] = new[done]
            keep = ~done
            if not np.any(keep):
                break
            idx, t, lo, hi, big_b, e, c = idx[keep], new[keep], lo[keep], hi[keep], big_b[keep], e[keep], c[keep]
            log_bs, sub, g = log_bs[keep], sub[keep], _sub(g, keep)
        else:  # pragma: no cover - bisection guarantees convergence well within 200 steps
            out[idx] = t
        # g > 0: exp(g T) overflows near the root, where F cannot be evaluated, and the Gompertz
        # hazard there exceeds 20 c (so that the fixed point below contracts)
        g = self.shape
        far = (np.asarray(g) > 0.0) & (g * out > 700.0) & (log_b + g * out > self.log_constant + 3.0)
        if np.any(far):
            out[far] = self.take(far)._far_gompertz(log_b[far], e0[far])
        top = out >= _BIG  # the bracket was capped at the largest double: is the root beyond it?
        if np.any(top):
            k = self.take(top)
            n = int(np.count_nonzero(top))
            with np.errstate(invalid="ignore"):  # inf - inf: the root is not beyond (F(top) = inf)
                gb = np.array(np.broadcast_to(np.asarray(k.shape) * _BIG, (n,)))  # expm1 of lanes, never of a scalar
                f_top = k.constant * _BIG + big_b0[top] * np.expm1(gb) / k.shape - e0[top]
            out[top] = np.where(f_top < 0.0, np.inf, out[top])
        return out


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
    :math:`h(t) = c + b e^{g t}`, :math:`H(t) = c t + (b/g)(e^{g t} - 1)` (docs/methods.md, 'Hazards and survival').
    Proper whenever ``c > 0``.

    Conditional time from clock ``x`` solves :math:`F(T) = c T + B T\\,\\mathrm{exprel}(g T) = e`
    with :math:`B = b e^{g x}`. ``F`` is a sum of positive terms, so it is evaluated without
    cancellation, and it is increasing. The root is bracketed (see ``MakehamLanes._newton``) and found by
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
    dimensions: ClassVar[Mapping[str, Dimension]] = MappingProxyType({"rate": Dimension.RATE, "shape": Dimension.RATE, "constant": Dimension.RATE})
    _lanes: MakehamLanes = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "rate", _param(self.family, "rate", self.rate, "positive"))
        object.__setattr__(self, "shape", _param(self.family, "shape", self.shape, "finite"))
        object.__setattr__(self, "constant", _param(self.family, "constant", self.constant, "nonnegative"))
        object.__setattr__(self, "_lanes", MakehamLanes(*self._lane_params()))

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

    def _lane_params(self) -> tuple[float, float, float, float, float, float]:
        """The numbers :class:`MakehamLanes` takes: ``(rate, log rate, shape, log |shape|, constant,
        log constant)``."""
        return (self.rate, math.log(self.rate), self.shape, _log_abs(self.shape), self.constant,
                _log_abs(self.constant))

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return self._solve(np.full(y.shape, math.log(self.rate)), y)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        return self._lanes.conditional_time(x, e)

    def _conditional_time_large_ratio(self, x: FloatArray, e: FloatArray, hr: float) -> FloatArray | None:
        """Under ``hr * H`` where ``y = e / hr`` overflows (``y`` above the largest double), one term
        of ``c T + (B/g) expm1(g T) = y`` is negligible to rounding: for ``g > 0`` the Makeham term
        (``c T <= 2^-60 y`` is checked), giving the Gompertz time with ``log B = log hr + log b + g x``;
        for ``g < 0`` the bounded Gompertz term (``B/|g| <= 2^-60 y``), giving ``(e / c) / hr``;
        for ``g = 0``, ``(e / (b + c)) / hr``. ``None`` where the neglected term is not negligible."""
        b, g, c = self.rate, self.shape, self.constant
        if g == 0.0:
            return (e / (b + c)) / hr
        if g > 0.0:
            t = _gompertz_time(math.log(hr) + math.log(b) + g * x, g, _log_abs(g), e)
            with np.errstate(invalid="ignore"):  # 0 * inf (c = 0, T = inf): not negligible, as before
                return t if np.all(c * t <= 2.0 ** -60 * _BIG) else None
        if c == 0.0:
            return _gompertz_time(math.log(hr) + math.log(b) + g * x, g, _log_abs(g), e)
        if b * math.exp(min(g * float(np.min(x)), 0.0)) / -g > 2.0 ** -60 * _BIG:
            return None
        return (e / c) / hr

    def _solve(self, log_b: FloatArray, e: FloatArray) -> FloatArray:
        """T with c T + (B/g)(exp(g T) - 1) = e, B = exp(log_b); arrays of equal shape."""
        return self._lanes.solve(log_b, e)
