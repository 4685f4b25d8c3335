"""Stable elementary functions shared by the hazard families (private to :mod:`sim.hazards`).

Each helper is vectorised and raises no floating-point warning for valid input; each is free of
the overflow or cancellation its naive form would suffer (``log(1 + exp(v))`` for large ``v``,
``log1p(v) / v`` near 0, ``log(expm1(y))`` for large ``y``). Also the 12-point Gauss-Legendre
rule on [0, 1] with which the conditional time integrates the hazard over short intervals
(:mod:`._lane_kernels`), and the double-precision epsilon and smallest positive double.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import special as sc

FloatArray = NDArray[np.float64]

_EPS = float(np.finfo(np.float64).eps)
_TINY = 2.0 ** -1074  # the smallest positive double


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
