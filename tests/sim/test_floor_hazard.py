"""Tests for ``sim.hazards.floor`` (the larger of a fitted hazard and a floor such as background
mortality; a hazard read further along its clock).

References outside the project: crossings against ``scipy.optimize.brentq`` on the difference of the
two hazards; the cumulative hazard against ``scipy.integrate.quad`` of ``max(h_fit, h_floor)``
written out in the test (docs/methods.md, 'The larger of a fit and the background hazard'); the
conditional time against its definition ``H(x + T) - H(x) = E`` (Bender, Augustin & Blettner 2005,
Stat Med 24(11):1713-1723); draws against ``exp(-H)`` within 4 binomial standard errors.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, optimize

from sim.hazards import Exponential, Gompertz, LogNormal, PiecewiseConstant, Weibull
from sim.hazards.floor import CROSSING_TOL, AtLeastHazard, ShiftedClock

EPS = np.finfo(np.float64).eps

# invented numbers; a Gompertz background with the adult slope of about 0.085/year (Finch, Pike &
# Witten 1990, Science 249:902-905) and a life table of 5-year bands built from it
GOMPERTZ = Gompertz(rate=3e-5, shape=0.085)
AGES = np.arange(0.0, 110.0, 5.0)
LIFE_TABLE = PiecewiseConstant(tuple(AGES), tuple(3e-5 * np.exp(0.085 * AGES + 0.2)))

CASES = {
    # on the age clock: a falling fit against a rising background (one crossing)
    "age_weibull_gompertz": AtLeastHazard(ShiftedClock(Weibull(0.8, 6.0), 50.0), GOMPERTZ, 130.0),
    "age_weibull_table": AtLeastHazard(ShiftedClock(Weibull(0.8, 6.0), 50.0), LIFE_TABLE, 130.0),
    # on time since entry for patients entering at 60: the background shifted by the entry age
    "entry_weibull": AtLeastHazard(Weibull(0.8, 6.0), ShiftedClock(GOMPERTZ, 60.0), 70.0),
    # a log-normal fit rises then falls: below, above, below again
    "entry_lognormal": AtLeastHazard(LogNormal(1.0, 0.6), ShiftedClock(LIFE_TABLE, 60.0), 70.0),
    "never_crosses": AtLeastHazard(Exponential(0.05), Exponential(0.02), 70.0),
}


def larger(w: AtLeastHazard, u: float) -> float:
    return max(float(w.fit.hazard(u)), float(w.floor.hazard(u)))


def crossings_by_brentq(w: AtLeastHazard) -> list[float]:
    """Sign changes of h_fit - h_floor on a grid of 0.01 years, located by scipy.optimize.brentq
    (a change at a jump of a life table is located at the jump)."""
    g = np.linspace(0.0, w.until, int(w.until * 100) + 1)[1:]
    d = w.fit.hazard(g) - w.floor.hazard(g)
    out = []
    for i in np.flatnonzero(np.sign(d[:-1]) != np.sign(d[1:])):
        f = lambda u: float(w.fit.hazard(u) - w.floor.hazard(u))  # noqa: E731
        out.append(optimize.brentq(f, g[i], g[i + 1], xtol=1e-13))
    return out


@pytest.mark.parametrize("name", list(CASES))
def test_crossings_match_brentq(name):
    w = CASES[name]
    want = crossings_by_brentq(w)
    got = [c.at for c in w.crossings]
    assert len(got) == len(want)
    for a, b in zip(got, want):
        assert a == pytest.approx(b, abs=1e-8)  # brentq at 1e-13 on a 0.01-year grid; ours to CROSSING_TOL
    for c in w.crossings:  # the direction is what the fit does there
        before, after = c.at - 1e-3, c.at + 1e-3
        below_after = float(w.fit.hazard(after)) < float(w.floor.hazard(after))
        assert (c.direction == "below") == below_after
        assert (float(w.fit.hazard(before)) < float(w.floor.hazard(before))) != below_after


@pytest.mark.parametrize("name", list(CASES))
def test_hazard_is_the_larger_and_cumulative_hazard_matches_quadrature(name):
    w = CASES[name]
    cuts = [c.at for c in w.crossings] + [float(b) for b in AGES]
    for t in (0.5, 3.0, 10.0, 25.0, 40.0, 69.0, 100.0):
        if t > w.until:
            continue
        if min(abs(t - c.at) for c in w.crossings) > 1e-6 if w.crossings else True:
            assert float(w.hazard(t)) == larger(w, t)
        pts = sorted({0.0, t, *[p for p in cuts if 0.0 < p < t], *[p - 50.0 for p in cuts if 0 < p - 50 < t],
                      *[p - 60.0 for p in cuts if 0 < p - 60 < t]})
        ref = sum(integrate.quad(lambda u: larger(w, u), a, b, epsabs=0.0, epsrel=1e-12, limit=200)[0]
                  for a, b in zip(pts[:-1], pts[1:]))
        # the crossings are located to CROSSING_TOL: H may differ by the hazard gap times that
        assert float(w.cumhazard(t)) == pytest.approx(ref, rel=1e-9)


@pytest.mark.parametrize("name", list(CASES))
def test_conditional_time_round_trip(name):
    w = CASES[name]
    rng = np.random.default_rng(5)
    x = np.concatenate([rng.uniform(0.0, w.until, 500), [0.0] + [c.at for c in w.crossings]])
    e = np.concatenate([rng.standard_exponential(500), np.full(1 + len(w.crossings), 0.25)])
    t = w.conditional_time(x, e)
    assert np.all(t >= 0.0) and np.all(np.isfinite(t))
    end = x + t
    gained = w.cumhazard(end) - w.cumhazard(x)
    slack = 64 * EPS * (w.cumhazard(end) + w.hazard(end) * end)
    assert np.all(np.abs(gained - e) <= slack + 1e-12 * e)


@pytest.mark.parametrize("name", ["entry_weibull", "entry_lognormal"])
def test_draws_follow_the_survival_function(name):
    w = CASES[name]
    n = 40_000
    draws = w.rvs(n, np.random.default_rng(11))
    for t in (0.5, 2.0, 5.0, 15.0, 30.0):
        p = float(w.sf(t))
        assert abs(np.mean(draws > t) - p) <= 4 * math.sqrt(p * (1 - p) / n)


def test_shifted_clock_is_the_base_read_later():
    s = ShiftedClock(GOMPERTZ, 60.0)
    for t in (0.0, 1.0, 12.5, 40.0):
        ref = integrate.quad(lambda u: float(GOMPERTZ.hazard(u)), 60.0, 60.0 + t, epsrel=1e-13)[0]
        assert float(s.cumhazard(t)) == pytest.approx(ref, rel=1e-12, abs=1e-300)
        assert float(s.hazard(t)) == float(GOMPERTZ.hazard(60.0 + t))
    x, e = np.array([0.0, 3.0, 20.0]), np.array([0.1, 1.0, 0.01])
    np.testing.assert_array_equal(s.conditional_time(x, e), GOMPERTZ.conditional_time(x + 60.0, e))
    p = ShiftedClock(LIFE_TABLE, 62.0)
    assert p._rough_points()[0] == pytest.approx(3.0)  # the band at 65 seen from 62


def test_never_crossing_keeps_the_larger_everywhere():
    w = CASES["never_crosses"]
    assert w.crossings == ()
    np.testing.assert_allclose(w.cumhazard([1.0, 50.0, 500.0]), [0.05, 2.5, 25.0], rtol=1e-15)
    flipped = AtLeastHazard(Exponential(0.02), Exponential(0.05), 70.0)
    np.testing.assert_allclose(flipped.cumhazard([1.0, 50.0]), [0.05, 2.5], rtol=1e-15)
    assert CROSSING_TOL < 1e-9


EXTREME = [Weibull(0.1, 1e-3), Gompertz(1e-300, 3.0), Gompertz(10.0, 2.0), Gompertz(1.0, -5.0), Exponential(0.0),
           Exponential(1e200), LogNormal(-20.0, 0.01), PiecewiseConstant((0.0, 1e-9, 500.0), (0.0, 1e10, 0.0)),
           ShiftedClock(GOMPERTZ, 130.0)]


@pytest.mark.parametrize("fit", EXTREME, ids=lambda b: repr(b)[:40])
def test_extreme_pairs_stay_quiet_and_never_nan(fit):
    # no warning (errors here), no NaN, no negative time for any pair and range
    x = np.array([0.0, 1e-300, 1e-9, 0.7, 2.0, 99.5, 1e6])
    e = np.array([0.0, 1e-300, 1e-12, 0.5, 1.0, 50.0, np.inf])
    xx, ee = np.meshgrid(x, e)
    for floor in EXTREME:
        for until in (1e-9, 1000.0):
            w = AtLeastHazard(fit, floor, until)
            t = w.conditional_time(xx, ee)
            assert not np.any(np.isnan(t)) and np.all(t >= 0.0)
            assert not np.any(np.isnan(w.cumhazard(np.append(x, np.inf)))) and not math.isnan(w.cumhazard_limit)
            assert not np.any(np.isnan(w.hazard(x)))
