"""Conditional event times of many hazards of one family in one call, each lane (patient) with its
own hazard's parameters.

A probabilistic analysis simulates a block of parameter draws in one engine call
(:func:`sim.engine.simulate_draws`): the draws' hazards of one exit differ in their numbers, not in
their family. :class:`LaneHazards` gathers those numbers into tables (one row per distinct hazard)
and evaluates every lane with its own row in one vectorised call of the family's kernel:

=====================  ============================================  =============================
family                 per-lane numbers                              shared by the call
=====================  ============================================  =============================
exponential            rate                                          --
weibull, loglogistic   shape, log(scale) (:func:`weibull_times`)      --
lognormal              mu, sigma (:class:`.lognormal.LogNormalLanes`)  --
gamma                  shape, scale (:class:`.gamma.GammaLanes`)      --
gompertz               log(rate), slope g of any sign or 0,          --
                       log|g| (:func:`gompertz_times`)
gompertz_makeham       rate, log(rate), g, log|g|, constant c,       --
                       log(c) (:class:`.gompertz.MakehamLanes`)
piecewise              band rates and cumulative hazards             the band starts
                       (:class:`.piecewise.Bands`)
=====================  ============================================  =============================

A hazard ratio (:class:`ProportionalHazards`, e.g. a strategy's effect, itself drawn or not) may
differ per lane on any of them: the base's time for ``e / hr`` (Bender, Augustin & Blettner 2005,
Stat Med 24(11):1713-1723), a hazard without a ratio counting as ``hr = 1`` (``e / 1 = e``
exactly). So may it on one base shared by every hazard of the call, of any family.

Each family's own ``_conditional_time`` is its kernel with its own numbers (computed by the same
scalar arithmetic as here), and every kernel is elementwise with lane-by-lane stopping, so a lane
gets the bits of its own hazard whichever lanes share the call. Lanes where ``e / hr`` over- or
underflowed (huge or tiny ratios: the hazard's own edge handling, e.g. the log-space solver of
:mod:`._log_space`) are reported back (``lost``) for the caller to evaluate with their own hazard.

The Gompertz and Gompertz-Makeham solvers choose their formula lane by lane (the slope's sign, a
slope or constant of 0, the short or log-space form, the bracket side and stop of the Makeham's
Halley iteration), and ``log |g|`` and ``log c`` come per hazard from ``math.log``, as in the
hazard's own call: slopes of both signs, 0 and constants that differ share one call.

Not per lane (the caller groups lanes by hazard, one call per distinct hazard):

- piecewise hazards whose band starts differ (the band lookup shares them);
- waning hazard ratios and hazards with a floor as hazards of their own (their windows, pieces and
  crossing points differ per hazard; a ratio that differs on one shared such hazard is per lane);
- mixtures of families.
"""

from __future__ import annotations

from collections.abc import Callable, Hashable, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ._numerics import FloatArray
from .base import Hazard
from .exponential import Exponential
from .gamma import Gamma, GammaLanes
from .gompertz import Gompertz, GompertzMakeham, MakehamLanes, gompertz_times
from .lognormal import LogNormal, LogNormalLanes
from .piecewise import Bands, PiecewiseConstant
from .proportional import ProportionalHazards, ratio_draws
from .shape_scale import LogLogistic, Weibull, loglogistic_times, weibull_times

__all__ = ["LaneHazards"]

Codes = NDArray[np.int64]
Tables = tuple[NDArray[np.float64], ...]
Times = Callable[[Hashable, Tables, Codes, FloatArray, FloatArray], FloatArray]


def _exponential(shared: Hashable, tab: Tables, codes: Codes, x: FloatArray, e: FloatArray) -> FloatArray:
    r = tab[0][codes]
    with np.errstate(divide="ignore", invalid="ignore"):  # rate 0 lanes: +inf below
        return np.where(r > 0.0, e / r, np.inf)


def _weibull(shared: Hashable, tab: Tables, codes: Codes, x: FloatArray, e: FloatArray) -> FloatArray:
    return weibull_times(tab[0][codes], tab[1][codes], x, e)


def _loglogistic(shared: Hashable, tab: Tables, codes: Codes, x: FloatArray, e: FloatArray) -> FloatArray:
    return loglogistic_times(tab[0][codes], tab[1][codes], x, e)


def _lognormal(shared: Hashable, tab: Tables, codes: Codes, x: FloatArray, e: FloatArray) -> FloatArray:
    return LogNormalLanes(tab[0][codes], tab[1][codes]).conditional_time(x, e)


def _gamma(shared: Hashable, tab: Tables, codes: Codes, x: FloatArray, e: FloatArray) -> FloatArray:
    return GammaLanes(tab[0][codes], tab[1][codes]).conditional_time(x, e)


def _gompertz(shared: Hashable, tab: Tables, codes: Codes, x: FloatArray, e: FloatArray) -> FloatArray:
    return gompertz_times(tab[0][codes], tab[1][codes], tab[2][codes], x, e)


def _makeham(shared: Hashable, tab: Tables, codes: Codes, x: FloatArray, e: FloatArray) -> FloatArray:
    return MakehamLanes(*(col[codes] for col in tab)).conditional_time(x, e)


def _piecewise(shared: Hashable, tab: Tables, codes: Codes, x: FloatArray, e: FloatArray) -> FloatArray:
    b, end, rates, cum = tab
    return Bands(b, end, rates, cum, row=codes).conditional_time(x, e)


@dataclass(frozen=True)
class _Family:
    """How one family is evaluated per lane: what its hazards of one call must share, the numbers
    each contributes (rows of the tables), and the kernel on the gathered tables."""

    shared: Callable[[Hazard], Hashable]
    numbers: Callable[[Hazard], tuple]
    times: Times
    whole: bool = False  # the numbers are arrays kept as tables (rows picked by code), not gathered


def _none(h: Hazard) -> Hashable:
    return None


_FAMILIES: dict[type, _Family] = {
    Exponential: _Family(_none, lambda h: (h.rate,), _exponential),
    Weibull: _Family(_none, lambda h: h._lane_params(), _weibull),
    LogLogistic: _Family(_none, lambda h: h._lane_params(), _loglogistic),
    LogNormal: _Family(_none, lambda h: h._lane_params(), _lognormal),
    Gamma: _Family(_none, lambda h: h._lane_params(), _gamma),
    Gompertz: _Family(_none, lambda h: h._lane_params(), _gompertz),
    GompertzMakeham: _Family(_none, lambda h: h._lane_params(), _makeham),
    PiecewiseConstant: _Family(lambda h: h.breaks, lambda h: (h._r, h._cum), _piecewise, whole=True),
}


def _shared_base(s: Hashable, tab: Tables, codes: Codes, x: FloatArray, e: FloatArray) -> FloatArray:
    return s._conditional_time(x, e)  # type: ignore[attr-defined]


class LaneHazards:
    """Hazards of one family (optionally times a hazard ratio), evaluated lane by lane with each
    lane's own hazard's numbers in one call (see the module notes).

    Build with :meth:`of`; ``family`` names the family of the bases (``"shared"`` for one shared
    base of any family under ratios that differ), ``ratio`` whether any hazard carries a ratio.
    """

    def __init__(self, family: str, times: Times, shared: Hashable, tables: Tables,
                 hr: NDArray[np.float64] | None) -> None:
        self.family, self._times, self._shared, self._tables, self.hr = family, times, shared, tables, hr
        self.ratio = hr is not None
        self._zero = hr is not None and bool(np.any(hr == 0.0))

    @classmethod
    def of(cls, hazards: Sequence[Hazard]) -> LaneHazards | None:
        """``hazards`` (distinct, at least one) as one per-lane evaluation, or ``None`` where they
        cannot share one (different families, or numbers a family needs shared that differ)."""
        hrs, bases = [], []
        for h in hazards:
            hr, base = (h.hr, h.base) if type(h) is ProportionalHazards else (1.0, h)
            hrs.append(hr)
            bases.append(base)
        ratio = any(type(h) is ProportionalHazards for h in hazards)
        hr = np.array(hrs, dtype=np.float64) if ratio else None
        kinds = {type(b) for b in bases}
        fam = _FAMILIES.get(kinds.pop()) if len(kinds) == 1 else None
        if fam is not None:
            shared = {fam.shared(b) for b in bases}
            if len(shared) == 1:
                rows = [fam.numbers(b) for b in bases]
                tables = tuple(np.array(col, dtype=np.float64) for col in zip(*rows))
                if fam.whole:  # piecewise: band starts and ends first, then the tables of rows
                    first = bases[0]
                    tables = (first._b, first._end) + tables  # type: ignore[attr-defined]
                return cls(bases[0].family, fam.times, shared.pop(), tables, hr)
        if ratio and all(b == bases[0] for b in bases):  # one base of any family, ratios that differ
            return cls("shared", _shared_base, bases[0], (), hr)
        return None

    def times(self, codes: Codes, x: FloatArray, e: FloatArray) -> tuple[FloatArray, NDArray[np.bool_] | None]:
        """``(T, lost)``: conditional times of lanes with clocks ``x``, draws ``e`` and hazards
        ``codes`` (indexes into the ``hazards`` given to :meth:`of`), under the kernels' error
        state. ``lost`` marks lanes (or is ``None``) whose ``e / hr`` over- or underflowed: their
        times must come from their own hazard (its edge handling)."""
        if self.hr is None:
            return self._times(self._shared, self._tables, codes, x, e), None
        hr = self.hr[codes]
        zero = hr == 0.0 if self._zero else None
        y, lost = ratio_draws(e, hr if zero is None else np.where(zero, 1.0, hr))  # as ProportionalHazards
        t = self._times(self._shared, self._tables, codes, x, y)
        if zero is not None:  # hr = 0: the event never happens
            t = np.where(zero, np.inf, t)
            lost &= ~zero
        return t, lost
