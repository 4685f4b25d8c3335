"""Hazard numerics at the edges (issue 13 item 7): the public conditional time never returns NaN,
never leaks a floating-point warning (the suite turns RuntimeWarnings into errors), and is +inf only
where the distribution is improper, the draw reaches the total hazard left, or the root lies beyond the
largest double; finite times are checked against 40-1400 digit arithmetic (mpmath). Clocks reach the
largest double, rates the smallest (subnormal) and the largest, hazard ratios the smallest double.

Tolerance, from the conditioning of ``H(x + T) - H(x) = e``: a returned ``T`` passes when the root
lies in ``[T - w, T + w]`` with ``w = K eps (x + T) + K 2^-1074`` (the rounding of the end point
``x + T``, relative, and of a subnormal ``T``, absolute), allowing ``H`` itself a relative error
``K eps (e + H(x))`` (the rounding of the two cumulative hazards whose difference is ``e``) and each
parameter the rounding its use in log form implies (relative ``K eps max(1, |ln p|)``; absolute
``K eps max(1, |mu|)`` for the log-normal mu; relative ``K eps`` for the Gompertz slope), K = 64.
Equivalently, a relative tolerance on ``e`` of ``K eps (1 + H(x)/e + (x + T) h(x + T)/e + ...)``.
References: the closed forms of each family (docs/methods.md, 'Families and parameterisations');
log-normal tails by the asymptotic series of erfc (DLMF 7.12.1) beyond 1e6.
"""

from __future__ import annotations

import math
import warnings

import mpmath as mp
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sim.engine.histories import SimulationError, simulate
from sim.hazards import (Exponential, Gamma, Gompertz, GompertzMakeham, LogLogistic, LogNormal,
                         PiecewiseConstant, ProportionalHazards, Weibull)
from sim.model.multistate import Clock, Horizon, Model, State, Transition
from sim.model.population import FixedAge, Population

TINY = 2.0 ** -1074
BIG = float(np.finfo(float).max)
EPS = 2.0 ** -52
K = 64

def spec(h):
    """(family, {param: mpf}) with hr folded in as a parameter."""
    if isinstance(h, ProportionalHazards):
        fam, p = spec(h.base)
        return fam, {**p, "hr": mp.mpf(h.hr)}
    if isinstance(h, PiecewiseConstant):
        return "piecewise", {"breaks": [mp.mpf(b) for b in h.breaks], "rates": [mp.mpf(r) for r in h.rates]}
    return h.family, {k: mp.mpf(v) for k, v in h.params().items()}

def lim(fam, p):
    hr = p.get("hr", 1)
    if hr == 0: return mp.mpf(0)
    if fam == "exponential": v = mp.inf if p["rate"] > 0 else mp.mpf(0)
    elif fam in ("gompertz", "gompertz_makeham"):
        v = mp.inf if (p.get("constant", 0) > 0 or p["shape"] >= 0) else p["rate"] / -p["shape"]
    elif fam == "piecewise":
        v = mp.inf if p["rates"][-1] > 0 else H(fam, {**p, "hr": 1}, p["breaks"][-1])
    else: v = mp.inf
    return hr * v

def log_erfc_big(z):
    """log erfc(z) for z > 1e6 (asymptotic series, DLMF 7.12.1; truncation below 1e-36 relative)."""
    u = 1 / (2 * z * z)
    return -z * z - mp.log(z * mp.sqrt(mp.pi)) + mp.log(1 - u + 3 * u * u - 15 * u ** 3)


def log_half_erfc(z):
    """log(erfc(z) / 2) = log Phi(-w) for z = w / sqrt 2, for any real z."""
    if z > 1e6:
        return log_erfc_big(z) - mp.log(2)
    if z < -1e6:
        return mp.log1p(-mp.exp(log_erfc_big(-z)) / 2)
    if z < 0:
        return mp.log1p(-mp.erfc(-z) / 2)
    return mp.log(mp.erfc(z) / 2)


def H(fam, p, t):
    hr = p.get("hr", 1)
    if hr == 0: return mp.mpf(0)
    if t == mp.inf: return lim(fam, p)
    if fam == "exponential": v = p["rate"] * t
    elif fam == "weibull": v = (t / p["scale"]) ** p["shape"]
    elif fam in ("gompertz", "gompertz_makeham"):
        b, g = p["rate"], p["shape"]
        v = b * t if g == 0 else b / g * mp.expm1(g * t)
        v += p.get("constant", 0) * t
    elif fam == "loglogistic": v = mp.log1p((t / p["scale"]) ** p["shape"])
    elif fam == "lognormal":
        v = mp.mpf(0) if t == 0 else -log_half_erfc((mp.log(t) - p["mu"]) / p["sigma"] / mp.sqrt(2))
    elif fam == "gamma":
        z = t / p["scale"]
        if z < p["shape"]:  # lower function: 1 - Q would cancel to 0 for a tiny z
            v = -mp.log1p(-mp.gammainc(p["shape"], 0, z, regularized=True))
        else:
            v = -mp.log(mp.gammainc(p["shape"], z, mp.inf, regularized=True))
    elif fam == "piecewise":
        v = mp.mpf(0); b = p["breaks"] + [mp.inf]
        for i, r in enumerate(p["rates"]):
            if t <= b[i]: break
            if r > 0: v += r * (min(t, b[i + 1]) - b[i])
    else: raise TypeError(fam)
    return hr * v

def perturbed(fam, p):
    """Parameter sets each moved by the rounding its use in log form implies: relative
    K eps max(1, |ln p|) for a positive parameter, absolute K eps max(1, |p|) for one that may be
    negative (Gompertz shape, log-normal mu)."""
    out = []
    for name, v in p.items():
        if name in ("breaks", "rates"):
            continue
        if name == "mu":
            d = K * EPS * max(1, abs(v))
            out += [{**p, name: v + d}, {**p, name: v - d}]
        elif name == "shape" and fam in ("gompertz", "gompertz_makeham"):
            d = K * EPS * abs(v)
            out += [{**p, name: v + d}, {**p, name: v - d}]
        elif v > 0:
            f = K * EPS * max(1, abs(mp.log(v)))
            out += [{**p, name: v * (1 + f)}, {**p, name: v * (1 - f)}]
    return out

def check(h, x, e, T):
    """None if T is acceptable for (h, x, e), else a reason."""
    if not (T >= 0):
        return f"T={T}"
    if e == math.inf:
        return None if T == math.inf else "e=inf but T finite"
    fam, p = spec(h)
    x_, e_ = mp.mpf(x), mp.mpf(e)
    with mp.workdps(30):
        hx = H(fam, p, x_)
    digits = 40
    if T > 0 and x > T and math.isfinite(T):
        digits += int(math.log10(x) - math.log10(T)) + 1
    if e > 0 and hx > e and hx != mp.inf:
        digits += int(mp.log10(hx) - mp.log10(e)) + 1
    digits = min(digits, 1400)
    with mp.workdps(digits):
        def inc(q, t):
            return H(fam, q, x_ + t) - H(fam, q, x_)
        hx = H(fam, p, x_)
        rest = lim(fam, p) - hx
        slack = K * EPS * (e_ + hx)
        if T == math.inf:
            if e_ >= rest - slack:
                return None
            # T = inf is right when, for some parameters within rounding of the given ones, the
            # increment up to the largest double stays below e (as the finite case below accepts T
            # when some rounding of the parameters brackets e): the smallest increment, not the largest
            top = mp.mpf(BIG)
            if min(inc(q, top) for q in [p] + perturbed(fam, p)) <= e_ + slack:
                return None
            return f"T=inf but root finite (rest={mp.nstr(rest,5)}, inc(BIG)={mp.nstr(inc(p, top),5)})"
        if e_ > rest + slack:
            return f"T finite={T} but e >= H(inf)-H(x)={mp.nstr(rest,5)}"
        w = K * EPS * (x_ + mp.mpf(T)) + K * TINY
        lo = max(mp.mpf(0), mp.mpf(T) - w)
        hi = mp.mpf(T) + w
        qs = [p] + perturbed(fam, p)
        ilo = min(inc(q, lo) for q in qs)
        ihi = max(inc(q, hi) for q in qs)
        if ilo > e_ + slack:
            return f"T too large: inc(T-)/e-1={mp.nstr(ilo/e_-1, 3)}"
        if ihi < e_ - slack:
            return f"T too small: inc(T+)/e-1={mp.nstr(ihi/e_-1, 3)}"
    return None


# ------------------------------------------------------------------------------------------ helpers
DRAWS = [0.0, TINY, 1e-300, 1e-12, 0.7, 30.0, 1e12, 1e300, BIG, math.inf]


def _times(h, x: float, draws=DRAWS) -> np.ndarray:
    """Public conditional times at clock ``x`` for ``draws``, failing on any warning."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        t = h.conditional_time(np.full(len(draws), x), np.array(draws))
    assert not np.isnan(t).any(), (h, x, t)
    return t


def _assert_all(h, x: float, draws=DRAWS) -> None:
    t = _times(h, x, draws)
    bad = [(e, float(ti), why) for e, ti in zip(draws, t) if (why := check(h, x, e, float(ti)))]
    assert not bad, (h, x, bad)


# ---------------------------------------------------------------- the cases issue 13 item 7 names
def test_gompertz_subnormal_rate_and_zero_shape() -> None:
    h = Gompertz(5e-324, 0.0)
    t = _times(h, 1.0)
    assert t[0] == 0.0  # was NaN with a RuntimeWarning (0 * inf)
    assert t[2] == pytest.approx(1e-300 / 5e-324, rel=1e-12)  # e / b, finite: 2.0e23 years
    _assert_all(h, 0.0)
    _assert_all(h, 1.0)


def test_gompertz_makeham_infinite_draw_and_overflowed_root() -> None:
    # B = b exp(g x) overflows at x = 1e3 with g = 1: an infinite draw gave NaN (inf / inf)
    h = GompertzMakeham(1.0, 1.0, 1e-3)
    assert _times(h, 1e3, [math.inf])[0] == math.inf
    # a subnormal Makeham term with a falling Gompertz term: the root lies beyond the largest double
    # (c T alone needs T = 1e300 / 5e-324), so +inf, not the largest double
    h = GompertzMakeham(1.0, -1.0, 5e-324)
    t = _times(h, 0.0, [1e300])[0]
    assert t == math.inf
    _assert_all(h, 0.0, [0.0, 0.5, 1.0, 1e300])


def test_lognormal_tiny_sigma() -> None:
    for sigma in (1e-12, 1e-300):
        h = LogNormal(0.0, sigma)
        for x in (0.0, 0.5, 1.0, 2.0, 60.0):
            _assert_all(h, x)
    # H(x) overflows at x = 2 for sigma = 1e-300: the event is (almost) immediate, never +inf
    assert _times(LogNormal(0.0, 1e-300), 2.0, [0.7])[0] < 1e-300


def test_lognormal_far_tail_inverse_is_finite_and_quiet() -> None:
    # y beyond ~1e16 (w^2 / 2 and log Phi(-w) cancel) and at the largest double (log Phi(-w) = -inf)
    h = LogNormal(0.0, 1e-152)
    y = np.array([BIG, 1e300])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        t = h.inv_cumhazard(y)
    # H^{-1}(y) = exp(sigma w) with w = sqrt(2 y) to relative order log(y) / y (Mills ratio asymptotics)
    np.testing.assert_allclose(np.log(t) / 1e-152, math.sqrt(2.0) * np.sqrt(y), rtol=1e-6)


def test_tiny_hazard_ratio_with_a_huge_draw_is_finite() -> None:
    # e / hr overflows; the event time does not: Gompertz T = log1p(g e / (hr b)) / g ~ 8.3e3 years
    h = Gompertz(1e-4, 0.09).scaled(1e-12)
    t = _times(h, 0.0, [1e300])[0]
    expected = mp.log1p(mp.mpf(0.09) * mp.mpf(1e300) / (mp.mpf(1e-12) * mp.mpf(1e-4))) / mp.mpf(0.09)
    assert t == pytest.approx(float(expected), rel=1e-13)
    for base in (Exponential(1.0), Weibull(1.5, 10.0), Gompertz(1e-4, 0.09), GompertzMakeham(1e-4, 0.09, 1e-3),
                 PiecewiseConstant([0.0, 50.0], [0.01, 0.1]), Gompertz(0.1, -0.2)):
        for hr in (1e-12, 1e300):
            for x in (0.0, 60.0):
                _assert_all(base.scaled(hr), x)


def test_clock_near_the_largest_double_gives_a_finite_time() -> None:
    # Families inverted by the base class: x + T overflows although T is finite (was +inf).
    # Gamma: the hazard there is 1/scale to rounding, T = e * scale (the continued fraction of Q)
    h = Gamma(2.0, 3.0)
    t = _times(h, BIG, [0.7, 1e300])
    np.testing.assert_allclose(t, [2.1, 3e300], rtol=1e-15)
    for h in (Gamma(2.0, 3.0), Gamma(0.5, 1e-6), Gamma(10.0, 1e6), LogNormal(1.0, 0.5), LogNormal(-50.0, 1e-6),
              LogNormal(50.0, 1e6), Gamma(2.0, 3.0).scaled(1e-3), LogNormal(1.0, 0.5).scaled(1e3)):
        _assert_all(h, BIG)


def test_gompertz_makeham_subnormal_rate_with_a_makeham_term() -> None:
    # exp(g T) overflows before the root; B expm1(g T) is finite (was the overflow point, e.g.
    # 709.78 = log(largest double) for every draw above ~30)
    h = GompertzMakeham(5e-324, 1.0, 1e-3)
    t = _times(h, 0.0, [30.0])[0]
    assert t > 740.0  # c T alone needs 3e4 years; b e^T / 1 = 30 needs T = log(30 / 5e-324) = 747.8
    for b in (TINY, 1e-320, 1e-310):
        for g in (-2.0, -1.0, 0.0, 1.0, 2.0):
            for x in (0.0, 60.0):
                _assert_all(GompertzMakeham(b, g, 1e-3), x)


def test_huge_draw_over_a_tiny_hazard_ratio_stays_finite_where_the_time_is() -> None:
    # e / hr overflows; the time does not: a gamma of tiny scale (T = e scale / hr in the flat
    # tail), a log-normal of tiny sigma, a log-logistic of huge shape (T = scale exp(e / (hr k)))
    assert _times(Gamma(2.0, 1e-6).scaled(1e-300), 0.0, [1e12])[0] == pytest.approx(1e306, rel=1e-14)
    h = LogLogistic(1e306, 5.0).scaled(1e-300)  # y = e / hr = 3e308, y / k = 300
    with mp.workdps(40):  # H^-1(y) = scale expm1(y)^(1/k)
        expected = mp.mpf(5) * mp.expm1(mp.mpf(3e8) / mp.mpf(1e-300)) ** (1 / mp.mpf(1e306))
    assert _times(h, 0.0, [3e8])[0] == pytest.approx(float(expected), rel=1e-12)
    # (mpmath at clocks near the largest double is slow for some families: those are sampled by the
    # property test below)
    late = (0.0, 60.0, 1e300, BIG)
    for base, clocks in ((LogNormal(1.0, 1e-300), late), (LogNormal(-50.0, 1e-160), late),
                         (LogNormal(50.0, 1e-153), late), (LogNormal(0.0, 1e-12), late), (Gamma(2.0, 1e-6), late),
                         (Gamma(10.0, 1e-12), late), (Gamma(0.5, 1e-300), (0.0, 60.0)), (LogLogistic(1e306, 5.0), (0.0,)),
                         (LogLogistic(2.0, 5.0), (0.0, 60.0)), (LogNormal(1.0, 0.5), late), (Gamma(2.0, 3.0), (0.0, 60.0)),
                         (Exponential(1e-3), (0.0, 60.0)), (Gompertz(1e-4, 0.09), (0.0, 60.0)),
                         (GompertzMakeham(1e-4, 0.09, 1e-3), (0.0, 60.0)), (GompertzMakeham(1e-4, -0.09, 1e-3), (0.0,)),
                         (GompertzMakeham(1e-4, 0.0, 1e-3), (0.0,))):
        for hr in (TINY, 1e-300):
            for x in clocks:
                _assert_all(base.scaled(hr), x)


def test_huge_hazard_ratio_with_a_small_draw_gives_the_time_not_zero() -> None:
    # e / hr underflows (5.6e-609 for e = 1e-300, hr = the largest double; was T = 0, or a subnormal
    # e / hr with 3 digits left, 1e-4 off); the root, from 50-digit arithmetic at x = 0:
    # log-logistic H^-1(y) = scale expm1(y)^(1/k), gamma P(a, T/scale) = y, log-normal Phi(w) = y
    with mp.workdps(50):
        y = mp.mpf(1e-300) / mp.mpf(BIG)
        loglogistic = 5 * mp.sqrt(mp.expm1(y))
        z = mp.findroot(lambda u: mp.log(mp.gammainc(2, 0, mp.exp(u), regularized=True)) - mp.log(y),
                        mp.log(mp.sqrt(2 * y)))
        gamma = 3 * mp.exp(z)
        w = mp.findroot(lambda v: log_half_erfc(-v / mp.sqrt(2)) - mp.log(y), -mp.sqrt(2 * -mp.log(y)))
        lognormal = mp.exp(1 + w / 2)
    for base, expected in ((LogLogistic(2.0, 5.0), loglogistic), (Gamma(2.0, 3.0), gamma), (LogNormal(1.0, 0.5), lognormal)):
        t = _times(base.scaled(BIG), 0.0, [1e-300])[0]
        assert t == pytest.approx(float(expected), rel=1e-12), base
    # times on either side of the underflow of T itself: a subnormal, and 0 where the root is below
    # 2^-1075 (log-logistic of shape 2: T = 5 sqrt(y), y = e / hr)
    h = LogLogistic(2.0, 5.0).scaled(BIG)
    t = _times(h, 0.0, [1e-200, 1e-300])
    assert t[0] == pytest.approx(5.0 * math.sqrt(1e-200 / BIG), rel=1e-12)
    assert 0.0 < t[1] < 2.0 ** -1000
    assert _times(LogLogistic(4.0, 1e-300).scaled(BIG), 0.0, [TINY])[0] == 0.0  # 1e-300 (5e-324 / BIG)^(1/4)
    # clocks above 0, draws down to the smallest double, per family, checked against mpmath
    for base, x in ((LogNormal(1.0, 0.5), 1e-12), (Gamma(0.5, 1.0), 1.0), (LogLogistic(0.5, 1.0), TINY),
                    (LogNormal(1.0, 1e-300), TINY)):
        _assert_all(base.scaled(BIG), x, [TINY, 1e-300, 1e-12, 0.7])


def test_piecewise_rates_near_the_largest_double_are_quiet() -> None:
    # the band totals (rate x width) overflow: no RuntimeWarning at construction (was one), the
    # time is spent band by band, H^-1(inf) is inf (was NaN)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        h = PiecewiseConstant([0.0, 1.0, 50.0], [BIG, 1.0, BIG])
        assert h.inv_cumhazard(math.inf) == math.inf
    # half the draw is left at 1, 49 of it in [1, 50), the rest takes 0.5 years at the last rate
    assert _times(h, 0.5, [BIG])[0] == pytest.approx(50.0, rel=1e-15)  # was +inf
    for rates in ([BIG, BIG, BIG], [1.0, BIG, 0.0], [1e308, 1e308, 0.0], [0.0, BIG, 1.0], [1e300, BIG, BIG / 2]):
        h = PiecewiseConstant([0.0, 1.0, 50.0], rates)
        for x in (0.0, 0.5, 1.0, 10.0, 50.0, 1e300, BIG):
            _assert_all(h, x)


# --------------------------------------------------------------------- property tests, sampled
def _log_uniform(lo: float, hi: float):
    return st.floats(math.log(lo), math.log(hi)).map(math.exp)


POSITIVE = st.one_of(st.sampled_from([TINY, 1e-300, 1e-12, 1.0, 1e12, 1e300, BIG]), _log_uniform(1e-300, 1e300))
MODERATE = st.one_of(st.sampled_from([1e-6, 1e-3, 1.0, 1e3, 1e6]), _log_uniform(1e-6, 1e6))
SLOPE = st.one_of(st.sampled_from([-1e300, -1.0, -1e-300, -TINY, 0.0, TINY, 1e-300, 0.085, 1.0, 1e3]),
                  st.floats(-5.0, 5.0))
# Clocks up to the largest double, for every family (those inverted by the base class too, where
# x + T overflows although T is finite)
CLOCK = st.sampled_from([0.0, TINY, 1e-12, 1.0, 60.0, 1e12, 1e300, BIG / 2, BIG])
DRAW = st.sampled_from(DRAWS)
SUBNORMAL = st.sampled_from([TINY, 1e-320, 1e-310])
# Hazard ratios down to the smallest double: e / hr overflows for every draw above ~1e-16
RATIO = st.sampled_from([TINY, 1e-310, 1e-300, 1e-12, 1e-3, 1e3, 1e12])
# Hazard ratios up to the largest double: e / hr subnormal or 0 for every draw below ~1e-8
HUGE_RATIO = st.sampled_from([1e300, 1e305, BIG / 2, BIG])


def _check_one(h, x: float, e: float) -> None:
    t = float(_times(h, x, [e])[0])
    assert t >= 0.0
    assert check(h, x, e, t) is None, (h, x, e, t, check(h, x, e, t))


FAMILY_STRATEGIES = {
    "exponential": st.builds(Exponential, st.one_of(st.just(0.0), POSITIVE)),
    "weibull": st.builds(Weibull, MODERATE, POSITIVE),
    "loglogistic": st.builds(LogLogistic, MODERATE, POSITIVE),
    "gamma": st.builds(Gamma, st.sampled_from([0.5, 1.0, 2.0, 10.0]), MODERATE),
    "gompertz": st.builds(Gompertz, POSITIVE, SLOPE),
    # a subnormal Gompertz rate with a Makeham term of ~1e-3: exp(g T) overflows before the root
    "gompertz_makeham": st.builds(GompertzMakeham, st.one_of(SUBNORMAL, MODERATE), st.floats(-2.0, 2.0),
                                  st.one_of(st.just(1e-3), MODERATE)),
    "lognormal": st.builds(LogNormal, st.floats(-50.0, 50.0), st.one_of(st.sampled_from([1e-300, 1e-12]), MODERATE)),
    # rates up to the largest double: the band totals (rate x 49 years) and H overflow
    "piecewise": st.builds(lambda r: PiecewiseConstant([0.0, 1.0, 50.0], r),
                           st.lists(st.one_of(st.sampled_from([0.0, 1e300, BIG / 2, BIG]), _log_uniform(TINY, 1e300)),
                                    min_size=3, max_size=3)),
    # besides ordinary bases, bases whose time stays finite where e / hr overflows: a log-normal
    # with a tiny sigma, a gamma with a tiny scale, a log-logistic with a huge shape
    "proportional": st.builds(lambda b, hr: b.scaled(hr),
                              st.sampled_from([Exponential(1.0), Weibull(1.5, 10.0), Gompertz(1e-4, 0.09),
                                               GompertzMakeham(1e-4, 0.09, 1e-3), LogNormal(1.0, 0.5),
                                               LogLogistic(2.0, 5.0), Gamma(2.0, 3.0), Gamma(0.5, 1.0),
                                               LogNormal(1.0, 1e-300), LogNormal(-50.0, 1e-160), Gamma(2.0, 1e-6),
                                               Gamma(0.5, 1e-300), LogLogistic(1e306, 5.0)]),
                              RATIO),
    # e / hr underflows: bases whose hazard is tiny near 0, so that the time is not (gamma, log-normal,
    # log-logistic, solved on the log scale), and those rescaled into their own family
    "proportional_huge": st.builds(lambda b, hr: b.scaled(hr),
                                   st.sampled_from([Exponential(1.0), Weibull(1.5, 10.0), Gompertz(1e-4, 0.09),
                                                    LogNormal(1.0, 0.5), LogNormal(1.0, 1e-300), LogNormal(-50.0, 1e-160),
                                                    LogLogistic(2.0, 5.0), LogLogistic(0.5, 1.0), LogLogistic(1e306, 5.0),
                                                    Gamma(2.0, 3.0), Gamma(0.5, 1.0), Gamma(10.0, 1e6), Gamma(2.0, 1e-6),
                                                    PiecewiseConstant([0.0, 1.0, 50.0], [0.0, 1e-300, 2.0])]),
                                   HUGE_RATIO),
}


@pytest.mark.parametrize("family", sorted(FAMILY_STRATEGIES))
def test_conditional_time_against_high_precision(family: str) -> None:
    examples = {"proportional": 60, "proportional_huge": 25}.get(family, 25)

    @settings(max_examples=examples, derandomize=True, deadline=None, database=None)
    @given(h=FAMILY_STRATEGIES[family], x=CLOCK, e=DRAW)
    def run(h, x, e):
        _check_one(h, x, e)

    run()


@pytest.mark.parametrize("family", sorted(FAMILY_STRATEGIES))
def test_public_method_rejects_an_infinite_clock(family: str) -> None:
    @settings(max_examples=3, derandomize=True, deadline=None, database=None)
    @given(h=FAMILY_STRATEGIES[family])
    def run(h):
        with pytest.raises(ValueError, match="finite"):
            h.conditional_time(math.inf, 1.0)

    run()


# ------------------------------------------------------------------- engine: NaN is an internal error
class _Broken(Exponential):
    """An exponential whose kernel returns NaN (a stand-in for a family bug)."""

    def _conditional_time(self, x, e):
        return np.full(e.shape, np.nan)


@pytest.mark.parametrize("first", [True, False])
def test_engine_raises_on_a_nan_event_time(first: bool) -> None:
    broken = Transition("broken", "alive", "dead", _Broken(0.1), Clock.ENTRY)
    fine = Transition("death", "alive", "dead", Exponential(0.1), Clock.ENTRY)
    model = Model(states=(State("alive"), State("dead", absorbing=True)),
                  transitions=(broken, fine) if first else (fine, broken),
                  population=Population(FixedAge(50.0), "alive"), horizon=Horizon(10.0, "time"))
    with pytest.raises(SimulationError, match="transition 'broken' gave no event time \\(NaN\\)"):
        simulate(model, 50, seed=1)
