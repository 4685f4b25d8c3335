"""Conditional time under a huge hazard ratio, where the hazard to spend ``e / hr`` underflows
(private to :mod:`sim.hazards`).

Under :math:`\\mathrm{hr}\\,H` the time :math:`T` solves :math:`H(x + T) - H(x) = e/\\mathrm{hr}`.
For ``hr`` near the largest double and a small draw, ``e / hr`` is subnormal (digits lost) or 0
(the time lost), although :math:`T` itself may be a normal double: a gamma, log-normal or
log-logistic hazard is tiny near 0, so a tiny increment of :math:`H` takes a not so tiny time.
Here the equation is solved on the log scale, where nothing underflows:
:math:`\\log(H(x + T) - H(x)) = \\log e - \\log \\mathrm{hr}`, for :math:`v = \\log T`, by a
bracketed Newton iteration (bisection where a step leaves the bracket). The family supplies
:math:`\\log H` and :math:`\\log h` as functions of :math:`\\log t`, accurate where :math:`H`
and :math:`h` underflow (each from its small-time asymptotics). The log increment is

* at ``x = 0``: :math:`\\log H(T)`;
* where :math:`D = \\log H(x + T) - \\log H(x) > 0.05`:
  :math:`\\log H(x + T) + \\log(1 - e^{-D})`;
* otherwise (``H`` grows by under 5 % over the step, so ``h`` is smooth there):
  :math:`v + \\log \\sum_i w_i h(x + T s_i)` by the 12-point Gauss-Legendre rule, the sum in log
  space (no cancellation, no underflow).

The derivative of the log increment in ``v`` is :math:`T h(x + T) / (H(x + T) - H(x))`. The
result is ``exp(v)``: it is 0 exactly where the root lies below half the smallest subnormal,
:math:`2^{-1075}` (it rounds to 0 whatever ``x`` is), a subnormal where it is one.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import special as sc

from ._numerics import _GL_NODES, _GL_WEIGHTS, FloatArray, _softplus

_TINY_NORMAL = float(np.finfo(np.float64).tiny)
_LOG_NODES = np.log(_GL_NODES)
_LOG_WEIGHTS = np.log(_GL_WEIGHTS)
_SWITCH = 0.05  # log H(x + T) - log H(x) above which the increment is a difference of H

LogFn = Callable[[FloatArray], FloatArray]


def _log_sum(a: FloatArray, b: FloatArray) -> FloatArray:
    """log(exp(a) + exp(b)) as the larger plus the softplus of their difference (rounding of the
    larger only; ``b`` where ``a = -inf``)."""
    big = np.maximum(a, b)
    return np.where(a == -np.inf, b, big + _softplus(np.minimum(a, b) - big))


def _log_increment(log_ch: LogFn, log_h: LogFn, x: FloatArray, v: FloatArray) -> tuple[FloatArray, FloatArray]:
    """``(log(H(x + T) - H(x)), log(T h(x + T)))`` for ``T = exp(v)`` (1-D arrays)."""
    with np.errstate(divide="ignore", invalid="ignore"):  # log 0 at x = 0 (those lanes use v itself)
        lx = np.log(x)
        lend = _log_sum(lx, v)  # log(x + T)
        top = log_ch(lend)
        d = top - log_ch(np.where(x > 0.0, lx, 0.0))
        diff = top + np.log(-np.expm1(-d))
        nodes = _log_sum(lx[:, None], v[:, None] + _LOG_NODES)
        quad = v + sc.logsumexp(log_h(nodes.ravel()).reshape(nodes.shape) + _LOG_WEIGHTS, axis=1)
    inc = np.where(x == 0.0, top, np.where(d > _SWITCH, diff, quad))
    return inc, v + log_h(lend)


def conditional_time_log_space(log_ch: LogFn, log_h: LogFn, x: FloatArray, e: FloatArray, hr: float,
                               upper: FloatArray) -> FloatArray:
    """Time ``T`` with ``H(x + T) - H(x) = e / hr`` for 1-D lanes with ``0 < e < inf``, solved for
    ``log T`` (see the module notes).

    Parameters
    ----------
    log_ch, log_h : callable
        :math:`\\log H` and :math:`\\log h` as functions of :math:`\\log t` (any finite value).
    x : ndarray
        Clocks, finite and ``>= 0``.
    e : ndarray
        Draws, finite and ``> 0``.
    hr : float
        Hazard ratio, ``> 0`` and finite.
    upper : ndarray
        A time at least the root (the conditional time for a larger increment of ``H``).

    Returns
    -------
    ndarray
        ``exp(v)`` at the root ``v``; 0 where the root lies below :math:`\\log 2^{-1075}`.
    """
    with np.errstate(divide="ignore", over="ignore", under="ignore", invalid="ignore"):  # inf - inf: bisect
        return _solve(log_ch, log_h, x, np.log(e) - math.log(hr), upper)


def _solve(log_ch: LogFn, log_h: LogFn, x: FloatArray, target: FloatArray, upper: FloatArray) -> FloatArray:
    """The bracketed Newton iteration of :func:`conditional_time_log_space` for ``log T``."""
    hi = np.log(upper) + 0.5  # a margin for the rounding of ``upper``
    hi = np.where(hi < 710.0, hi, 710.0)
    lo = hi - 64.0
    for _ in range(8):  # widen the bracket downwards until the increment is below the target
        low = _log_increment(log_ch, log_h, x, lo)[0] >= target
        if not np.any(low):
            break
        lo = np.where(low, hi - 4.0 * (hi - lo), lo)
    v = hi.copy()
    for _ in range(200):
        f, slope = _log_increment(log_ch, log_h, x, v)
        r = f - target
        hi = np.where(r > 0.0, v, hi)
        lo = np.where(r <= 0.0, v, lo)
        new = v - r / np.exp(slope - f)
        bad = ~((new > lo) & (new < hi))
        new = np.where(r == 0.0, v, np.where(bad, lo + 0.5 * (hi - lo), new))
        tol = 2.0 ** -50 * np.maximum(1.0, np.abs(v))
        done = (np.abs(new - v) <= tol) | (hi - lo <= tol) | (r == 0.0) | (hi < -746.0)
        v = new
        if np.all(done):
            break
    return np.where(hi < -746.0, 0.0, np.exp(v))
