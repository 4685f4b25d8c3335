"""Exact sums of many doubles, held as Python integers: the same result whatever the order of the
terms, the chunking, the number of workers or the machine.

Every finite double is an integer multiple of 2^-1074 (IEEE 754 binary64: a 53-bit integer
significand times a power of two no smaller than 2^-1074), so a sum of doubles is held exactly as one
Python integer N, the sum being N 2^-SCALE_BITS with SCALE_BITS = 1074. Terms are grouped by sign and
exponent with ``numpy.bincount`` after splitting each into two doubles of at most 27 significant bits
(see :func:`exact_sums`), so every group's floating sum is exact, and the groups are added as
integers. The only floating operations are elementwise and exact, so the result is bit for bit the
same on any machine and for any order of the terms.

Products enter exactly as the two doubles of Dekker's TwoProduct with Veltkamp's splitting,
a b = p + e with p = fl(a b) (Dekker 1971, Numer Math 18:224-242), so that sums of squares and
cross-products are exact too and a variance can be formed in rational arithmetic and rounded once:

    var = (n sum x^2 - (sum x)^2) / (n (n - 1)),

free of cancellation because the sums are exact. The approach is that of an exact "superaccumulator"
(Neal 2015, arXiv:1505.05571; Ogita, Rump & Oishi 2005, SIAM J Sci Comput 26(6):1955-1988 for
error-free transformations; both from memory). TwoProduct is exact when |a|, |b| <= 2^MAX_EXPONENT
and the product does not underflow (|a b| >= 2^-960 or a b = 0); outside that range, which no
outcome in years or currency units reaches, the low part may be rounded, but the sum stays
deterministic.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from fractions import Fraction

import math

import numpy as np
from numpy.typing import NDArray

__all__ = ["SCALE_BITS", "MAX_EXPONENT", "exact_sums", "two_product", "product_terms", "as_fraction"]

SCALE_BITS = 1074
"""Sums are held as integers times 2^-SCALE_BITS (every finite double is one)."""
MAX_EXPONENT = 480
"""Inputs must satisfy |x| <= 2^MAX_EXPONENT (far above any outcome) so that TwoProduct cannot overflow."""

_GROUPS = 4096  # sign and biased exponent: the top 12 bits of a double
_HIGH = ~np.int64((1 << 26) - 1)  # clears the low 26 significand bits
_BLOCK = 1 << 24  # terms per bincount call: 2^24 * 2^27 < 2^53 keeps every group's sum exact
_SPLIT = 134217729.0  # 2^27 + 1, Veltkamp's splitting constant for 53-bit doubles


def _checked(x: NDArray) -> NDArray[np.float64]:
    a = np.asarray(x, dtype=np.float64)
    if a.size and not np.all(np.abs(a) <= 2.0 ** MAX_EXPONENT):  # also False for NaN and inf
        bad = a[~(np.abs(a) <= 2.0 ** MAX_EXPONENT)][0]
        raise ValueError(f"value {float(bad)!r} cannot be summed exactly; values must be finite with |x| <= "
                         f"2^{MAX_EXPONENT}")
    return a


def exact_sums(columns: Iterable[NDArray]) -> list[int]:
    """Exact sums of 1-D arrays, each as an integer times 2^-SCALE_BITS.

    Parameters
    ----------
    columns : iterable of 1-D array_like
        Finite doubles with |x| <= 2^MAX_EXPONENT (a 2-D array: its columns).

    Returns
    -------
    list of int
        One integer N_j per column, with sum_i x_ij = N_j 2^-SCALE_BITS exactly.

    Notes
    -----
    From the bits of x (IEEE 754 binary64): ``bits >> 52`` is the sign and biased exponent E, the
    group of x. Clearing the low 26 significand bits gives x_hi, and x_lo = x - x_hi exactly. Within
    a group every x_hi is a multiple of 2^(u + 26) below 2^(u + 53), and every x_lo a multiple of 2^u
    below 2^(u + 26), with u = max(E, 1) - 1075; so the floating sums of at most 2^24 of them per
    group (``numpy.bincount``, one column at a time: 4096 groups stay in cache) are exact, and each
    is an integer in units of 2^u.
    """
    if isinstance(columns, np.ndarray) and columns.ndim == 2:
        columns = list(columns.T)
    out = []
    for column in columns:
        x = np.ascontiguousarray(_checked(column))
        if x.ndim != 1:
            raise ValueError(f"columns: shape {x.shape} is invalid; expected 1-D arrays")
        total = 0
        for start in range(0, x.size, _BLOCK):
            part = x[start:start + _BLOCK]
            bits = part.view(np.int64)
            group = (bits >> 52) + _GROUPS // 2  # sign and exponent, 0 .. 4095
            x_hi = (bits & _HIGH).view(np.float64)
            h = np.bincount(group, weights=x_hi, minlength=_GROUPS)
            lo = np.bincount(group, weights=part - x_hi, minlength=_GROUPS)
            for g in np.flatnonzero((h != 0) | (lo != 0)):
                shift = max(int(g) & 2047, 1) - 1  # u + SCALE_BITS
                units = int(math.ldexp(float(h[g]), 1074 - shift)) + int(math.ldexp(float(lo[g]), 1074 - shift))
                total += units << shift
        out.append(total)
    return out


def _split(a: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Veltkamp's splitting: a = hi + lo exactly, each with at most 26 significant bits."""
    c = _SPLIT * a
    hi = c - (c - a)
    return hi, a - hi


def two_product(a: NDArray, b: NDArray) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """(p, e) with p = fl(a b) and p + e = a b exactly (Dekker 1971, Veltkamp splitting; see the module
    docstring for the range where it is exact). ``b is a``: the square, splitting once."""
    a = np.asarray(a, dtype=np.float64)
    p = a * a if b is a else a * np.asarray(b, dtype=np.float64)
    a_hi, a_lo = _split(a)
    if b is a:
        return p, ((a_hi * a_hi - p) + 2.0 * (a_hi * a_lo)) + a_lo * a_lo
    b_hi, b_lo = _split(np.asarray(b, dtype=np.float64))
    return p, ((a_hi * b_hi - p) + a_hi * b_lo + a_lo * b_hi) + a_lo * b_lo


def product_terms(pairs: Iterable[tuple[NDArray, NDArray]]) -> list[NDArray[np.float64]]:
    """For each (a, b) the two columns whose sum is a b exactly (TwoProduct), flattened in order."""
    out: list[NDArray[np.float64]] = []
    for a, b in pairs:
        a_ok = _checked(a)
        out.extend(two_product(a_ok, a_ok if b is a else _checked(b)))
    return out


def as_fraction(total: int | Sequence[int]) -> Fraction:
    """An exact sum (integer times 2^-SCALE_BITS, or several to add) as a fraction."""
    value = total if isinstance(total, int) else sum(total)
    return Fraction(value, 1 << SCALE_BITS)
