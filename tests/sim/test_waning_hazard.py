"""Tests for ``sim.hazards.waning`` (a hazard ratio that wanes to 1 between two clock values).

References outside the project: the cumulative hazard against ``scipy.integrate.quad`` of
``R(u) h0(u)`` with the ratio ``R`` written out in the test (docs/methods.md, 'Treatment-effect
waning'); the conditional time against its definition ``H(x + T) - H(x) = E`` (inverse cumulative
hazard sampling, Bender, Augustin & Blettner 2005, Stat Med 24(11):1713-1723); draws against
``exp(-H)`` within 4 binomial standard errors; the proportional-hazards pieces against the base
family's own closed forms.
"""

from __future__ import annotations

import math
import pickle

import numpy as np
import pytest
from scipy import integrate

from sim.hazards import (Exponential, Gamma, Gompertz, HazardParameterError, LogLogistic, LogNormal, PiecewiseConstant,
                         Weibull)
from sim.hazards.waning import WaningHazardRatio, waning_ratio

EPS = np.finfo(np.float64).eps

# invented parameters; base hazards of every shape the engine meets (rising, falling and singular
# at 0, improper, with jumps inside the window)
BASES = {
    "weibull_rising": Weibull(shape=1.3, scale=8.0),
    "weibull_singular": Weibull(shape=0.5, scale=8.0),
    "gompertz": Gompertz(rate=0.01, shape=0.1),
    "gompertz_improper": Gompertz(rate=0.3, shape=-0.4),
    "loglogistic": LogLogistic(shape=0.8, scale=3.0),
    "lognormal": LogNormal(mu=1.0, sigma=0.7),
    "gamma": Gamma(shape=2.5, scale=2.0),
    "piecewise": PiecewiseConstant(breaks=(0.0, 1.5, 3.3, 4.0), rates=(0.1, 0.4, 0.0, 0.2)),
}
WINDOWS = [(2.0, 5.0), (0.0, 3.0), (1.0, 1.0)]
CASES = [(b, hr, w, s) for b in BASES for (hr, s) in ((0.6, "log"), (1.8, "hr"), (0.0, "hr"))
         for w in WINDOWS if not (hr == 0.0 and s == "log")]


def ratio(t: float, hr: float, t1: float, t2: float, scale: str) -> float:
    """The waning hazard ratio written out (docs/methods.md, 'Treatment-effect waning')."""
    if t < t1:
        return hr
    if t >= t2:
        return 1.0
    w = (t - t1) / (t2 - t1)
    return hr ** (1.0 - w) if scale == "log" else hr + w * (1.0 - hr)


def make(name, hr, window, scale):
    return WaningHazardRatio(BASES[name], hr, window[0], window[1], scale)


def quad_cumhazard(h0, t, hr, t1, t2, scale):
    """int_0^t R(u) h0(u) du by scipy.integrate.quad, split at the window ends and the base's jumps."""
    breaks = [0.0, t1, t2, *(getattr(h0, "breaks", ())[1:])]
    pts = sorted({0.0, t, *[p for p in breaks if 0.0 < p < t]})
    total = 0.0
    for a, b in zip(pts[:-1], pts[1:]):
        val, _ = integrate.quad(lambda u: ratio(u, hr, t1, t2, scale) * float(h0.hazard(u)), a, b,
                                epsabs=0.0, epsrel=1e-12, limit=200)
        total += val
    return total


@pytest.mark.parametrize("name,hr,window,scale", CASES)
def test_cumulative_hazard_matches_quadrature_of_the_ratio_times_the_base(name, hr, window, scale):
    w = make(name, hr, window, scale)
    for t in (0.4, 1.0, 1.7, 2.0, 2.9, 3.6, 4.5, 5.0, 7.5):
        ref = quad_cumhazard(w.base, t, hr, *window, scale)
        assert float(w.cumhazard(t)) == pytest.approx(ref, rel=1e-9, abs=1e-300), t
        assert float(w.hazard(t)) == pytest.approx(ratio(t, hr, *window, scale) * float(w.base.hazard(t)),
                                                   rel=1e-14)


@pytest.mark.parametrize("name,hr,window,scale", CASES)
def test_conditional_time_round_trip(name, hr, window, scale):
    # H(x + T) - H(x) = E (the definition of the conditional time), from clocks before, inside and
    # after the window, for small and large draws
    w = make(name, hr, window, scale)
    rng = np.random.default_rng(20261205)
    x = np.concatenate([rng.uniform(0.0, 7.0, 400), [0.0, window[0], window[1], 1.5, 3.3]])
    e = np.concatenate([rng.standard_exponential(400), [1e-9, 0.3, 2.0, 1e-6, 4.0]])
    t = w.conditional_time(x, e)
    assert np.all(t >= 0.0) and not np.any(np.isnan(t))
    fin = np.isfinite(t)
    end = x[fin] + t[fin]
    gained = w.cumhazard(end) - w.cumhazard(x[fin])
    # the check's own rounding: a few ulps of H at the end, plus the hazard times the clock's ulp
    slack = 64 * EPS * (w.cumhazard(end) + w.hazard(end) * end) + 1e-11 * e[fin]
    assert np.all(np.abs(gained - e[fin]) <= slack)
    # an infinite time only where the event can never happen: the draw exceeds what is left
    never = ~fin
    if np.any(never):
        left = w.cumhazard_limit - w.cumhazard(x[never])
        assert np.all(e[never] >= left * (1 - 1e-12))


@pytest.mark.parametrize("name", ["weibull_rising", "piecewise", "lognormal"])
def test_draws_follow_the_survival_function(name):
    # share of draws beyond t vs exp(-H(t)) within 4 binomial standard errors (fixed seed)
    w = WaningHazardRatio(BASES[name], 0.5, 1.0, 4.0, "log")
    n = 40_000
    draws = w.rvs(n, np.random.default_rng(7))
    for t in (0.5, 1.5, 2.5, 4.0, 6.0):
        p = float(w.sf(t))
        assert abs(np.mean(draws > t) - p) <= 4 * math.sqrt(p * (1 - p) / n)


@pytest.mark.parametrize("name", list(BASES))
def test_a_ratio_of_one_is_the_plain_hazard(name):
    h0 = BASES[name]
    assert waning_ratio(h0, 1.0, 2.0, 5.0) is h0
    assert waning_ratio(h0, 0.5, 0.0, 0.0) is h0  # the effect is gone from clock 0
    w = WaningHazardRatio(h0, 1.0, 2.0, 5.0, "log")
    t = np.array([0.0, 0.5, 2.0, 3.1, 4.99, 5.0, 9.0, np.inf])
    np.testing.assert_allclose(w.cumhazard(t), h0.cumhazard(t), rtol=1e-12, atol=0.0)
    np.testing.assert_array_equal(w.hazard(t[1:]), h0.hazard(t[1:]))
    x = np.array([0.0, 1.0, 2.5, 4.0, 6.0])
    e = np.array([0.2, 1.0, 0.05, 3.0, 0.7])
    np.testing.assert_allclose(w.conditional_time(x, e), h0.conditional_time(x, e), rtol=1e-9)


@pytest.mark.parametrize("name", list(BASES))
def test_start_equal_to_end_is_a_step_back_to_the_base(name):
    # proportional hazards with hr before t1, the plain base after: H from the base's closed form
    h0, hr, t1 = BASES[name], 0.4, 2.0
    w = WaningHazardRatio(h0, hr, t1, t1, "log")
    for t in (0.5, 1.9, 2.0, 3.0, 8.0):
        want = hr * float(h0.cumhazard(min(t, t1))) + max(float(h0.cumhazard(t) - h0.cumhazard(t1)), 0.0)
        assert float(w.cumhazard(t)) == pytest.approx(want, rel=1e-13)
    x = np.array([2.0, 3.0, 7.0])
    e = np.array([0.3, 1.0, 0.01])
    np.testing.assert_array_equal(w.conditional_time(x, e), h0.conditional_time(x, e))  # after t1: the base's own
    x0 = np.array([0.0, 0.5])
    e0 = np.array([1e-4, 1e-3])  # events before t1: the proportional hazards' closed form
    inside = x0 + h0.scaled(hr).conditional_time(x0, e0) < t1
    np.testing.assert_array_equal(w.conditional_time(x0, e0)[inside], h0.scaled(hr).conditional_time(x0, e0)[inside])


def test_ratio_moves_on_the_stated_scale():
    h0 = Exponential(0.1)
    log = WaningHazardRatio(h0, 0.25, 2.0, 6.0, "log")
    lin = WaningHazardRatio(h0, 0.25, 2.0, 6.0, "hr")
    t = np.array([0.0, 2.0, 4.0, 6.0, 10.0, np.inf])
    np.testing.assert_allclose(log.ratio(t), [0.25, 0.25, 0.5, 1.0, 1.0, 1.0], rtol=1e-15)  # sqrt(0.25) midway
    np.testing.assert_allclose(lin.ratio(t), [0.25, 0.25, 0.625, 1.0, 1.0, 1.0], rtol=1e-15)
    # an exponential base has H in closed form on the window: 0.1 * int R = 0.1 * hr^(1-w) ... by hand
    # log scale: int_{t1}^{t2} hr^(1-w) du = (t2 - t1) (1 - hr) / (-ln hr)
    want = 0.1 * (0.25 * 2.0 + 4.0 * 0.75 / math.log(4.0))
    assert float(log.cumhazard(6.0)) == pytest.approx(want, rel=1e-13)
    assert float(lin.cumhazard(6.0)) == pytest.approx(0.1 * (0.25 * 2.0 + 4.0 * 0.625), rel=1e-13)


def test_edges_of_the_clock_and_the_draw():
    w = WaningHazardRatio(BASES["gompertz_improper"], 0.5, 1.0, 3.0, "log")
    assert float(w.cumhazard(np.inf)) == pytest.approx(w.cumhazard_limit, rel=1e-14)
    assert np.isfinite(w.cumhazard_limit)
    assert float(w.conditional_time(2.0, np.inf)) == np.inf
    assert float(w.conditional_time(2.0, 0.0)) == 0.0
    assert float(w.inv_cumhazard(w.cumhazard_limit * 1.01)) == np.inf
    s = WaningHazardRatio(BASES["weibull_singular"], 0.0, 0.0, 2.0, "hr")  # 0 * inf at clock 0
    assert float(s.hazard(0.0)) == 0.0
    assert float(s.cumhazard(0.0)) == 0.0
    assert pickle.loads(pickle.dumps(w)) == w
    assert hash(w) == hash(WaningHazardRatio(BASES["gompertz_improper"], 0.5, 1.0, 3.0, "log"))


@pytest.mark.parametrize("kwargs,key,rule", [
    ({"hr": 0.0, "scale": "log"}, "hr", "> 0"),
    ({"hr": -0.5, "scale": "hr"}, "hr", ">= 0"),
    ({"hr": math.inf}, "hr", "finite"),
    ({"start": -1.0}, "start", ">= 0"),
    ({"start": math.nan}, "start", ">= 0"),
    ({"end": 1.0}, "end", ">= start"),
    ({"scale": "cubic"}, "scale", "one of"),
])
def test_bad_parameters_are_named(kwargs, key, rule):
    args = {"base": Exponential(0.1), "hr": 0.5, "start": 2.0, "end": 5.0, "scale": "log", **kwargs}
    with pytest.raises(HazardParameterError) as err:
        WaningHazardRatio(**args)
    assert err.value.problems[0].path == (key,)
    assert rule in err.value.problems[0].rule
    assert key in str(err.value)


EXTREME_BASES = [Weibull(0.1, 1e-3), Weibull(5.0, 1e3), Gompertz(1e-300, 3.0), Gompertz(10.0, 2.0), Exponential(1e200),
                 LogNormal(-20.0, 0.01), Gamma(0.01, 1e-5), LogLogistic(20.0, 1e-4),
                 PiecewiseConstant((0.0, 1e-9, 500.0), (0.0, 1e10, 0.0))]


@pytest.mark.parametrize("base", EXTREME_BASES, ids=lambda b: repr(b)[:40])
def test_extreme_hazards_ratios_and_windows_stay_quiet_and_never_nan(base):
    # overflowing and underflowing hazards, ratios and windows: no warning (they are errors here), no
    # NaN, no negative time, H non-decreasing
    x = np.array([0.0, 1e-300, 1e-9, 0.7, 2.0, 999.5, 1e6])
    e = np.array([0.0, 1e-300, 1e-12, 0.5, 1.0, 50.0, np.inf])
    xx, ee = np.meshgrid(x, e)
    for (hr, scale), (t1, t2) in [((1e-300, "log"), (0.0, 1e-12)), ((1e300, "log"), (0.0, 1000.0)),
                                  ((0.0, "hr"), (1e-300, 2e-300)), ((1e300, "hr"), (999.0, 1000.0)),
                                  ((0.5, "log"), (0.5, 3.0))]:
        w = WaningHazardRatio(base, hr, t1, t2, scale)
        t = w.conditional_time(xx, ee)
        h = w.cumhazard(np.append(x, np.inf))
        assert not np.any(np.isnan(t)) and np.all(t >= 0.0)
        assert not np.any(np.isnan(h)) and not np.any(np.isnan(w.hazard(x))) and not math.isnan(w.cumhazard_limit)
        with np.errstate(invalid="ignore"):  # inf - inf in the check itself
            assert not np.any(np.diff(h) < 0.0)


def test_a_strategy_ratio_waning_on_a_transition_ratio_that_wanes():
    # nested windows (the transition's own effect 1 -> 3, the strategy's 2 -> 6): quad of the product
    base = Weibull(shape=0.6, scale=10.0)
    inner = WaningHazardRatio(base, 1.5, 1.0, 3.0, "hr")
    outer = WaningHazardRatio(inner, 0.5, 2.0, 6.0, "log")
    for t in (0.5, 2.5, 4.0, 7.0, 19.0):
        pts = [p for p in (1.0, 2.0, 3.0, 6.0) if p < t]
        ref = integrate.quad(lambda u: ratio(u, 0.5, 2.0, 6.0, "log") * ratio(u, 1.5, 1.0, 3.0, "hr")
                             * float(base.hazard(u)), 0.0, t, points=pts or None, epsrel=1e-12, limit=200)[0]
        assert float(outer.cumhazard(t)) == pytest.approx(ref, rel=1e-10)
    x = np.linspace(0.0, 15.0, 301)
    e = np.random.default_rng(3).standard_exponential(301)
    t = outer.conditional_time(x, e)
    end = x + t
    assert np.all(np.abs(outer.cumhazard(end) - outer.cumhazard(x) - e) <= 64 * EPS * outer.cumhazard(end) + 1e-12 * e)
