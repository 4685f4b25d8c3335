"""Fused arithmetic between numpy's transcendental passes (numba), for the conditional times the
engine evaluates most (issue 16).

A conditional time written in numpy is a chain of whole-array passes, each with its own temporary:
the Gompertz time on attained age is twelve of them (multiply, add, subtract, exp, multiply, three
comparisons, two ands, log1p, divide). The passes of basic arithmetic and comparisons run here as
one loop each; ``exp``, ``log`` and ``log1p`` stay numpy's own SIMD functions. Basic IEEE operations
round the same in any implementation and numba does not reorder or fuse them into FMAs without
``fastmath``, so the results are bit for bit those of the numpy expressions they replace
(tests/sim/test_hazards_fused.py checks this on random and extreme inputs).
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["fusable", "minus_affine", "scale_within", "affine_of_scaled", "weibull_gaps", "weibull_ends",
           "weibull_times_from"]


def fusable(numbers: tuple, arrays: tuple) -> bool:
    """Whether ``numbers`` are Python floats and ``arrays`` 1-d float64 arrays of one size: the
    case the kernels serve (per-lane parameter arrays and other shapes take the numpy path)."""
    return (all(type(v) is float for v in numbers)
            and all(isinstance(a, np.ndarray) and a.ndim == 1 and a.dtype == np.float64
                    and a.size == arrays[0].size for a in arrays))


@njit(nogil=True, cache=True)
def minus_affine(c, a, b, x, out):  # pragma: no cover - compiled
    """``out = c - (a + b x)``, as numpy's ``c - (a + b * x)``."""
    for i in range(x.size):
        out[i] = c - (a + b * x[i])


@njit(nogil=True, cache=True)
def scale_within(e, f, lo, hi, f_min):  # pragma: no cover - compiled
    """``f = e f`` in place; whether every lane has ``lo <= e f < hi`` and ``f >= f_min`` (before
    the product) (False on a NaN)."""
    ok = True
    for i in range(e.size):
        fi = f[i]
        v = e[i] * fi
        ok &= (v >= lo) & (v < hi) & (fi >= f_min)
        f[i] = v
    return ok


@njit(nogil=True, cache=True)
def affine_of_scaled(a, k, y):  # pragma: no cover - compiled
    """``y = a + y / k`` in place, as numpy's ``a + y / k``."""
    for i in range(y.size):
        y[i] = a + y[i] / k


@njit(inline="always")
def _maximum(a, b):  # pragma: no cover - compiled
    """numpy.maximum of two floats: NaN if either is NaN."""
    if a != a or b != b:
        return a + b
    return a if a >= b else b


@njit(nogil=True, cache=True)
def weibull_gaps(k, log_lam, log_x, log_e, out):  # pragma: no cover - compiled
    """``log_x = k (log_x - log_lam)`` in place (``log H(x)``) and ``out = -|log_e - log_x|``."""
    for i in range(log_x.size):
        h = k * (log_x[i] - log_lam)
        log_x[i] = h
        out[i] = -abs(log_e[i] - h)


@njit(nogil=True, cache=True)
def weibull_ends(k, log_lam, log_hx, log_e, tail, neg_z, log_end):  # pragma: no cover - compiled
    """With ``d = log_e - log_hx``: ``neg_z = -(max(d, 0) + tail) / k`` and
    ``log_end = log_lam + (max(log_hx, log_e) + tail) / k`` (numpy's maximum)."""
    for i in range(log_hx.size):
        h, le, tl = log_hx[i], log_e[i], tail[i]
        neg_z[i] = -((_maximum(le - h, 0.0) + tl) / k)
        log_end[i] = log_lam + (_maximum(h, le) + tl) / k


@njit(nogil=True, cache=True)
def weibull_times_from(ends, expm1_neg_z, e, out):  # pragma: no cover - compiled
    """``out = ends (-expm1_neg_z)`` where ``e > 0`` and 0 elsewhere; False (``out`` unfinished) if
    some lane with a finite ``e`` has an infinite or NaN product (the caller's overflow form)."""
    for i in range(e.size):
        t = ends[i] * -expm1_neg_z[i]
        ei = e[i]
        if not (t < np.inf) and ei < np.inf:
            return False
        out[i] = t if ei > 0.0 else 0.0
    return True
