"""Piecewise-constant hazards (life tables by age band): exact cumulative hazard, inverse and
conditional time by band lookup."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import ClassVar

import numpy as np
from numpy.typing import NDArray

from ._numerics import FloatArray
from .base import Hazard, _invalid, _param, _seq
from .dimensions import Dimension

__all__ = ["Bands", "PiecewiseConstant"]


def _search_right(table: FloatArray, row: NDArray[np.intp], y: FloatArray) -> NDArray[np.intp]:
    """Per lane, the number of entries of the non-decreasing row ``table[row]`` that are ``<= y``:
    ``np.searchsorted(table[row], y, side="right")`` lane by lane (NaN counts as above every entry,
    as numpy sorts it), by a vectorised bisection instead of one call per row."""
    n = table.shape[1]
    lo = np.zeros(y.shape, dtype=np.intp)
    hi = np.full(y.shape, n, dtype=np.intp)
    for _ in range(n.bit_length() + 1):
        active = lo < hi
        if not np.any(active):
            break
        mid = (lo + hi) // 2
        below = table[row, np.minimum(mid, n - 1)] <= y
        lo = np.where(active & below, mid + 1, lo)
        hi = np.where(active & ~below, mid, hi)
    return np.where(np.isnan(y), n, lo)


class Bands:
    """The conditional-time kernels of piecewise-constant hazards on shared band starts ``b``
    (``end`` the band ends, the last ``inf``). ``r`` and ``cum`` (band rates and the cumulative
    hazard at band starts) are one hazard's 1-D arrays, or tables with one row per hazard and
    ``row`` naming each lane's row (:mod:`sim.hazards.lanes`: a block of parameter draws in one
    call). :class:`PiecewiseConstant` evaluates its own through them: the same operations on the
    same numbers, and band lookups that give the same integers (``np.searchsorted`` for one hazard,
    :func:`_search_right` per lane)."""

    def __init__(self, b: FloatArray, end: FloatArray, r: FloatArray, cum: FloatArray,
                 row: NDArray[np.intp] | None = None) -> None:
        self.b, self.end, self.r, self.cum, self.row = b, end, r, cum, row

    def take(self, mask: NDArray[np.bool_]) -> "Bands":
        """The lanes ``mask`` selects."""
        return self if self.row is None else Bands(self.b, self.end, self.r, self.cum, self.row[mask])

    def _at(self, table: FloatArray, j: NDArray[np.intp]) -> FloatArray:
        """``table`` at band ``j`` of each lane's row."""
        return table[j] if self.row is None else table[self.row, j]

    def band(self, t: FloatArray) -> NDArray[np.intp]:
        return np.searchsorted(self.b, t, side="right") - 1

    def from_cum(self, y: FloatArray) -> tuple[NDArray[np.intp], FloatArray]:
        """Band j with cum[j] <= y < cum[j+1] (last such) and the time since its start."""
        if self.row is None:
            j = np.searchsorted(self.cum, y, side="right") - 1
        else:
            j = _search_right(self.cum, self.row, y) - 1
        r = self._at(self.r, j)
        with np.errstate(invalid="ignore", divide="ignore"):
            dt = np.where(r > 0.0, (y - self._at(self.cum, j)) / r, np.inf)
        return j, dt

    def conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        """See :class:`PiecewiseConstant` (conditional time)."""
        n = self.b.size
        i = self.band(x)
        r = self._at(self.r, i)
        end = self.end[i]
        room = end - x  # > 0; inf in the last band
        with np.errstate(invalid="ignore", divide="ignore"):
            left = np.where(r > 0.0, r * room, 0.0)  # hazard left in the current band
            within = e < left
            t_within = e / r
            nxt = np.minimum(i + 1, n - 1)
            y = self._at(self.cum, nxt) + (e - left)  # target cumulative hazard, from the next band start
            j, dt = self.from_cum(y)
            t_cross = room + (self.b[j] - self.b[nxt]) + dt
        last = i == n - 1
        t = np.where(within, t_within, np.where(last, np.inf, t_cross))
        lost = ~(y < np.inf) & ~within & ~last  # the target cumulative hazard overflowed (or inf - inf)
        if np.any(lost):
            t = np.array(t, dtype=np.float64)
            with np.errstate(invalid="ignore"):  # inf - inf for an infinite draw: +inf below
                rest = e[lost] - left[lost]
            t[lost] = np.where(e[lost] < np.inf, self.take(lost)._walk(nxt[lost], rest, room[lost]), np.inf)
        return t

    def _walk(self, j: NDArray[np.intp], rest: FloatArray, room: FloatArray) -> FloatArray:
        """Time to the event for 1-D lanes whose target cumulative hazard overflows (band totals
        near the largest double): from band ``j`` on (``room`` years after the clock), the hazard
        ``rest`` still to go is spent band by band, without forming cumulative sums. ``+inf`` where
        it outlasts every band (a last rate of 0)."""
        n = self.b.size
        start = self.b[j]
        out = np.full(rest.shape, np.inf)
        open_ = np.ones(rest.shape, dtype=bool)
        with np.errstate(invalid="ignore", over="ignore"):  # 0 * inf: a last band of rate 0
            for _ in range(n):
                r = self._at(self.r, j)
                total = np.where(r > 0.0, r * (self.end[j] - self.b[j]), 0.0)
                here = open_ & (rest < total)
                out = np.where(here, room + (self.b[j] - start) + rest / np.where(here, r, 1.0), out)
                open_ &= ~here & (j < n - 1)
                if not np.any(open_):
                    break
                rest = np.where(open_, rest - total, rest)
                j = np.where(open_, j + 1, j)
        return out


@dataclass(frozen=True)
class PiecewiseConstant(Hazard):
    """Piecewise-constant hazard, e.g. a life table by age band.

    Parameters
    ----------
    breaks : sequence of float
        Band starts in years, strictly increasing, starting at exactly 0 (e.g. ages
        0, 1, 5, 10, ...). The last band extends to infinity.
    rates : sequence of float
        Hazard per year in each band, ``>= 0`` and finite; same length as ``breaks``.
        A last rate of 0 makes the distribution improper.

    Notes
    -----
    With :math:`H_j = \\sum_{i<j} r_i (b_{i+1} - b_i)` the cumulative hazard at band starts,
    :math:`H(t) = H_j + r_j (t - b_j)` for :math:`b_j \\le t < b_{j+1}`, and the inverse is exact:
    find :math:`j` with :math:`H_j \\le y < H_{j+1}` by ``np.searchsorted`` and return
    :math:`b_j + (y - H_j)/r_j` (docs/methods.md, 'Hazards and survival'). Zero-rate bands are stepped over.
    Conditional time: if ``e`` is below the hazard left in the current band, ``T = e / r`` exactly;
    otherwise the time to the band end plus the inversion of the remainder from the next band.
    Life-table probabilities ``q`` over ``n`` years convert to band rates ``-log(1 - q)/n`` (constant
    force; see :func:`sim.units.rate_from_risk`).
    """

    breaks: tuple[float, ...]
    rates: tuple[float, ...]
    family: ClassVar[str] = "piecewise"
    dimensions: ClassVar[Mapping[str, Dimension]] = MappingProxyType({"breaks": Dimension.TIME, "rates": Dimension.RATE})
    _b: FloatArray = field(init=False, repr=False, compare=False)
    _r: FloatArray = field(init=False, repr=False, compare=False)
    _end: FloatArray = field(init=False, repr=False, compare=False)
    _cum: FloatArray = field(init=False, repr=False, compare=False)
    _bands: Bands = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        fam = self.family
        breaks = tuple(_param(fam, ("breaks", i), v, "nonnegative")
                       for i, v in enumerate(_seq(fam, "breaks", self.breaks)))
        rates = tuple(_param(fam, ("rates", i), v, "nonnegative")
                      for i, v in enumerate(_seq(fam, "rates", self.rates)))
        if not breaks:
            raise _invalid(fam, ("breaks",), "must have at least one band start", breaks)
        if len(breaks) != len(rates):
            raise _invalid(fam, ("rates",), f"must have the same length as breaks ({len(breaks)})", rates,
                           message=f"{fam}: breaks and rates must have the same length, "
                                   f"got {len(breaks)} breaks and {len(rates)} rates")
        if breaks[0] != 0.0:
            raise _invalid(fam, ("breaks", 0), "must be 0 (the first band starts at clock 0)", breaks[0])
        for i in range(1, len(breaks)):
            if not breaks[i] > breaks[i - 1]:
                raise _invalid(fam, ("breaks", i), f"must be greater than breaks[{i - 1}] = {breaks[i - 1]!r} "
                               "(breaks strictly increasing)", breaks[i],
                               message=f"{fam}: breaks must be strictly increasing, got breaks[{i}] = "
                                       f"{breaks[i]!r} after breaks[{i - 1}] = {breaks[i - 1]!r}")
        b = np.array(breaks)
        r = np.array(rates)
        end = np.append(b[1:], np.inf)
        with np.errstate(over="ignore"):  # band totals beyond the largest double: H = +inf from there
            cum = np.concatenate(([0.0], np.cumsum(r[:-1] * np.diff(b))))
        for name, arr in (("breaks", breaks), ("rates", rates)):
            object.__setattr__(self, name, arr)
        for name, arr in (("_b", b), ("_r", r), ("_end", end), ("_cum", cum)):
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)
        object.__setattr__(self, "_bands", Bands(b, end, r, cum))

    @property
    def cumhazard_limit(self) -> float:
        return math.inf if self._r[-1] > 0.0 else float(self._cum[-1])

    def params(self) -> dict[str, tuple[float, ...]]:
        return {"breaks": self.breaks, "rates": self.rates}

    def _band(self, t: FloatArray) -> NDArray[np.intp]:
        return self._bands.band(t)

    def _hazard(self, t: FloatArray) -> FloatArray:
        return self._r[self._band(t)]

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        j = self._band(t)
        r = self._r[j]
        with np.errstate(invalid="ignore"):  # 0 * inf in a last band of rate 0, replaced below
            inc = np.where(r > 0.0, r * (t - self._b[j]), 0.0)
        return self._cum[j] + inc

    def _from_cum(self, y: FloatArray) -> tuple[NDArray[np.intp], FloatArray]:
        """Band j with cum[j] <= y < cum[j+1] (last such) and the time since its start."""
        return self._bands.from_cum(y)

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        j, dt = self._from_cum(y)
        t = self._b[j] + dt
        if np.isinf(self._cum[-1]):  # band totals overflowed: inf - inf at y = inf, which gives inf
            t = np.where(np.isnan(t), np.inf, t)
        return t

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        return self._bands.conditional_time(x, e)
