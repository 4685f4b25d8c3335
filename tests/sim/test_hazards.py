"""Tests for ``sim.hazards`` (the hazard families).

Identities for every family (docs/methods.md, 'Hazards and survival'): ``sf == exp(-H)``, ``H(H^-1(y)) == y``,
``H(x + T) - H(x) == e`` for the conditional time, ``h == dH/dt`` (quadrature). Independent
references: scipy.stats distributions, and the closed forms of Bender, Augustin & Blettner 2005
(Stat Med 24(11):1713-1723) computed in the test. Plus improper families, extreme inputs,
property-based round trips and construction errors.
"""

from __future__ import annotations

import dataclasses
import math
import pickle
import re

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, stats

from sim.hazards import (
    FAMILIES,
    FAMILY_DIMENSIONS,
    UNIT_IN_YEARS,
    Exponential,
    Gamma,
    Gompertz,
    GompertzMakeham,
    Hazard,
    HazardParameterError,
    LogLogistic,
    LogNormal,
    PiecewiseConstant,
    ProportionalHazards,
    Weibull,
    make_hazard,
    to_year_units,
)
from sim.problems import NO_VALUE, ValidationError

EPS = np.finfo(np.float64).eps

# Every family, including improper ones and proportional-hazards wrappers (invented parameters;
# Gompertz slope 0.085/year as for adult human mortality, Finch, Pike & Witten 1990).
CASES: dict[str, Hazard] = {
    "exponential": Exponential(rate=0.02),
    "weibull_rising": Weibull(shape=1.3, scale=30.0),
    "weibull_falling": Weibull(shape=0.6, scale=5.0),
    "gompertz": Gompertz(rate=3e-5, shape=0.085),
    "gompertz_improper": Gompertz(rate=0.05, shape=-0.1),
    "gompertz_makeham": GompertzMakeham(rate=3e-5, shape=0.085, constant=5e-4),
    "gompertz_makeham_falling": GompertzMakeham(rate=0.05, shape=-0.1, constant=0.01),
    "loglogistic": LogLogistic(shape=2.5, scale=12.0),
    "lognormal": LogNormal(mu=2.0, sigma=0.8),
    "gamma": Gamma(shape=2.5, scale=6.0),
    "gamma_small_shape": Gamma(shape=0.5, scale=3.0),
    "piecewise": PiecewiseConstant(breaks=(0, 1, 5, 10, 20, 40), rates=(0.02, 0.001, 0.0, 0.005, 0.01, 0.05)),
    "piecewise_improper": PiecewiseConstant(breaks=(0, 10), rates=(0.03, 0.0)),
    "ph_weibull": Weibull(shape=1.3, scale=30.0).scaled(0.7),
    "ph_gompertz_makeham": GompertzMakeham(rate=3e-5, shape=0.085, constant=5e-4).scaled(2.0),
    "ph_gompertz_improper": Gompertz(rate=0.05, shape=-0.1).scaled(1.5),
}
IDS = list(CASES)
ALL = [CASES[k] for k in IDS]

T_GRID = np.array([0.0, 1e-9, 0.01, 0.5, 1.0, 4.9, 5.0, 7.5, 10.0, 25.0, 50.0, 80.0, 100.0, 130.0])
X_GRID = np.array([0.0, 0.5, 3.0, 10.0, 40.0, 65.0, 90.0, 130.0])
E_GRID = np.array([1e-8, 1e-3, 0.05, 0.3, 1.0, 2.5, 8.0, 20.0])


def increment_tolerance(h: Hazard, x: np.ndarray, t: np.ndarray, e: np.ndarray) -> np.ndarray:
    """Bound on |H(x + T) - H(x) - e| that a correct T meets: 1e-10 relative to e, plus what the test's
    own difference can resolve: the rounding of H(x) and H(x + T) (special functions such as erfc are
    good to ~1e-14 relative) and a relative perturbation of the time x + T of a few eps times
    (1 + |log(x + T)|) (rounding of x + T and of log t inside H), i.e. ~eps * (x + T) h(x + T)."""
    end = x + t
    with np.errstate(invalid="ignore", over="ignore"):  # 0 * inf at end = 0; the float after 1.8e308
        time_rounding = np.nan_to_num(end * h.hazard(end) * (1 + np.abs(np.log(np.maximum(end, 1e-300)))))
        ulp_step = h.cumhazard(np.nextafter(end, np.inf)) - h.cumhazard(np.nextafter(end, 0.0))
    return 1e-10 * e + 64 * EPS * (h.cumhazard(x) + h.cumhazard(end) + time_rounding) + 4 * np.abs(ulp_step)


def assert_conditional_round_trip(h: Hazard, x: np.ndarray, e: np.ndarray) -> None:
    t = h.conditional_time(x, e)
    assert not np.isnan(t).any() and (t >= 0).all()
    fin = np.isfinite(t)
    xf, tf, ef = x[fin], t[fin], e[fin]
    err = np.abs(h.cumhazard(xf + tf) - h.cumhazard(xf) - ef)
    assert (err <= increment_tolerance(h, xf, tf, ef)).all(), (h, xf[err.argmax()], ef[err.argmax()])
    # +inf only when the hazard left after x cannot reach e before the largest float64 time
    # (improper families, or a true time beyond 1.8e308 years).
    h_x = h.cumhazard(x[~fin])
    left = h.cumhazard(np.finfo(np.float64).max) - h_x
    assert (e[~fin] >= left * (1 - 1e-12) - 64 * EPS * h_x).all()


# --------------------------------------------------------------------------------------------
# Identities over every family
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("h", ALL, ids=IDS)
def test_sf_equals_exp_minus_cumhazard(h: Hazard) -> None:
    H = h.cumhazard(T_GRID)
    np.testing.assert_allclose(h.sf(T_GRID), np.exp(-H), rtol=1e-15, atol=0)
    assert H[0] == 0.0 and h.sf(0.0) == 1.0
    assert (np.diff(H) >= 0).all()  # H is non-decreasing
    assert h.cumhazard(np.inf) == h.cumhazard_limit


@pytest.mark.parametrize("h", ALL, ids=IDS)
def test_cumhazard_of_inverse_is_identity(h: Hazard) -> None:
    top = min(60.0, h.cumhazard_limit * (1 - 1e-9))
    y = np.geomspace(1e-12, top, 80)
    t = h.inv_cumhazard(y)
    assert np.isfinite(t).all()
    np.testing.assert_allclose(h.cumhazard(t), y, rtol=1e-10, atol=0)
    # Inverse of 0 is the start of the first stretch of positive hazard (0 here).
    assert h.inv_cumhazard(0.0) == 0.0


@pytest.mark.parametrize("h", ALL, ids=IDS)
def test_inverse_is_infinite_at_and_beyond_the_limit(h: Hazard) -> None:
    limit = h.cumhazard_limit
    y = np.array([limit, 2 * limit, np.inf]) if math.isfinite(limit) else np.array([np.inf])
    assert (h.inv_cumhazard(y) == np.inf).all()


@pytest.mark.parametrize("h", ALL, ids=IDS)
def test_conditional_time_round_trip(h: Hazard) -> None:
    x, e = (a.ravel() for a in np.meshgrid(X_GRID, E_GRID))
    assert_conditional_round_trip(h, x, e)


@pytest.mark.parametrize("h", ALL, ids=IDS)
def test_conditional_time_from_zero_is_inverse(h: Hazard) -> None:
    np.testing.assert_allclose(h.conditional_time(0.0, E_GRID), h.inv_cumhazard(E_GRID), rtol=1e-12, atol=0)


@pytest.mark.parametrize("h", ALL, ids=IDS)
def test_conditional_time_tiny_draw_has_full_relative_accuracy(h: Hazard) -> None:
    # For T << x: H(x + T) - H(x) = h(x) T (1 + O(T h'/h)), so T h(x) / e = 1 to ~1e-12 here. A
    # cancelling form H^-1(H(x) + e) - x would lose all digits (H(x) + 1e-300 == H(x)).
    x = np.array([0.7, 12.0, 30.0, 65.0, 130.0])
    x = x[h.hazard(x) > 0]  # (zero hazard: the time is inf or reaches the next positive band)
    for e in (1e-20, 1e-100, 1e-300):
        t = h.conditional_time(x, e)
        np.testing.assert_allclose(t * h.hazard(x) / e, 1.0, rtol=1e-12, atol=0)


@pytest.mark.parametrize("h", ALL, ids=IDS)
def test_hazard_integrates_to_cumhazard(h: Hazard) -> None:
    breaks = list(getattr(getattr(h, "base", h), "breaks", ()))
    for a, b in [(0.5, 2.0), (2.0, 15.0), (15.0, 60.0), (60.0, 110.0)]:
        points = [p for p in breaks if a < p < b] or None
        q, _ = integrate.quad(lambda s: float(h.hazard(s)), a, b, epsabs=0, epsrel=1e-12, points=points, limit=200)
        np.testing.assert_allclose(q, float(h.cumhazard(b) - h.cumhazard(a)), rtol=1e-9, atol=1e-14)


@pytest.mark.parametrize("h", ALL, ids=IDS)
def test_outputs_are_float64_arrays_and_broadcast(h: Hazard) -> None:
    x = np.array([[0.0], [10.0], [70.0]])
    e = np.array([0.1, 1.0, 3.0, 9.0])
    t = h.conditional_time(x, e)
    assert isinstance(t, np.ndarray) and t.dtype == np.float64 and t.shape == (3, 4)
    for f in (h.hazard, h.cumhazard, h.sf, h.inv_cumhazard):
        out = f(1.5)
        assert isinstance(out, np.ndarray) and out.dtype == np.float64 and out.shape == ()
    np.testing.assert_array_equal(t[1], h.conditional_time(np.full(4, 10.0), e))


# --------------------------------------------------------------------------------------------
# Independent references: scipy.stats and Bender et al. 2005
# --------------------------------------------------------------------------------------------

SCIPY_CASES = [
    # expon(scale=1/rate)
    (Exponential(rate=0.04), stats.expon(scale=1 / 0.04)),
    # weibull_min(c=shape, scale=scale)
    (Weibull(shape=1.7, scale=25.0), stats.weibull_min(c=1.7, scale=25.0)),
    (Weibull(shape=0.5, scale=3.0), stats.weibull_min(c=0.5, scale=3.0)),
    # gompertz(c=b/g, scale=1/g) for g > 0: S = exp(-(b/g)(exp(g t) - 1))
    (Gompertz(rate=3e-5, shape=0.085), stats.gompertz(c=3e-5 / 0.085, scale=1 / 0.085)),
    # fisk(c=shape, scale=scale) is the log-logistic
    (LogLogistic(shape=2.5, scale=12.0), stats.fisk(c=2.5, scale=12.0)),
    (LogLogistic(shape=0.8, scale=4.0), stats.fisk(c=0.8, scale=4.0)),
    # lognorm(s=sigma, scale=exp(mu))
    (LogNormal(mu=2.0, sigma=0.8), stats.lognorm(s=0.8, scale=math.exp(2.0))),
    (LogNormal(mu=-1.0, sigma=2.0), stats.lognorm(s=2.0, scale=math.exp(-1.0))),
    # gamma(a=shape, scale=scale)
    (Gamma(shape=2.5, scale=6.0), stats.gamma(a=2.5, scale=6.0)),
    (Gamma(shape=0.3, scale=10.0), stats.gamma(a=0.3, scale=10.0)),
    # Proportional hazards of a Weibull is a Weibull: (t/s)^k * hr = (t / (s hr^(-1/k)))^k
    (Weibull(shape=1.7, scale=25.0).scaled(2.0), stats.weibull_min(c=1.7, scale=25.0 * 2.0 ** (-1 / 1.7))),
    # A piecewise-constant hazard with equal rates is an exponential
    (PiecewiseConstant(breaks=(0, 1, 5), rates=(0.04, 0.04, 0.04)), stats.expon(scale=1 / 0.04)),
]
SCIPY_IDS = [f"{h.family}-{i}" for i, (h, _) in enumerate(SCIPY_CASES)]


@pytest.mark.parametrize(("h", "dist"), SCIPY_CASES, ids=SCIPY_IDS)
def test_sf_matches_scipy(h: Hazard, dist) -> None:
    t = np.array([0.01, 0.3, 1.0, 5.0, 12.0, 30.0, 60.0, 100.0])
    np.testing.assert_allclose(h.sf(t), dist.sf(t), rtol=1e-10, atol=1e-300)


@pytest.mark.parametrize(("h", "dist"), SCIPY_CASES, ids=SCIPY_IDS)
def test_quantiles_match_scipy(h: Hazard, dist) -> None:
    q = np.array([1e-6, 0.01, 0.1, 0.5, 0.9, 0.99, 0.999])
    np.testing.assert_allclose(h.inv_cumhazard(-np.log1p(-q)), dist.ppf(q), rtol=1e-9, atol=0)


@pytest.mark.parametrize("beta_x", [0.0, 0.5, -1.2])
def test_inverse_matches_bender_closed_forms(beta_x: float) -> None:
    # Bender, Augustin & Blettner 2005 (Stat Med 24(11):1713-1723): with U ~ U(0, 1) and
    # linear predictor beta'x, T = H0^-1(-log(U) / exp(beta'x)). Their parameterisations:
    #   exponential h0 = lambda;               T = -log(U) / (lambda exp(beta x))
    #   Weibull     H0 = lambda t^nu;          T = (-log(U) / (lambda exp(beta x)))^(1/nu)
    #     -> ours: Weibull(shape=nu, scale=lambda^(-1/nu)), i.e. lambda = scale^(-shape)
    #   Gompertz    h0 = lambda exp(alpha t);  T = (1/alpha) log(1 - alpha log(U) / (lambda exp(beta x)))
    #     -> ours: Gompertz(rate=lambda, shape=alpha)
    u = np.random.default_rng(2005).uniform(size=2000)
    hr = math.exp(beta_x)
    lam, nu, alpha = 0.1, 1.6, 0.09
    cases = [
        (Exponential(rate=lam), -np.log(u) / (lam * hr)),
        (Weibull(shape=nu, scale=lam ** (-1 / nu)), (-np.log(u) / (lam * hr)) ** (1 / nu)),
        (Gompertz(rate=lam, shape=alpha), (1 / alpha) * np.log(1 - alpha * np.log(u) / (lam * hr))),
    ]
    for base, expected in cases:
        np.testing.assert_allclose(base.scaled(hr).inv_cumhazard(-np.log(u)), expected, rtol=1e-12, atol=0)


# --------------------------------------------------------------------------------------------
# Improper distributions
# --------------------------------------------------------------------------------------------

def test_improper_gompertz_never_event_limit() -> None:
    b, g = 0.05, -0.1
    h = Gompertz(rate=b, shape=g)
    limit = b / -g  # H(inf) = b/|g|; P(never) = exp(b/g) (docs/methods.md, 'Hazards and survival')
    assert h.cumhazard_limit == pytest.approx(limit, rel=1e-15)
    assert h.never_probability == pytest.approx(math.exp(b / g), rel=1e-15)
    assert np.isfinite(h.inv_cumhazard(limit * (1 - 1e-12)))
    assert (h.inv_cumhazard(np.array([limit, 1.5 * limit, 40.0])) == np.inf).all()
    np.testing.assert_allclose(h.sf(1e4), math.exp(b / g), rtol=1e-14)


@pytest.mark.parametrize(
    "h",
    [Gompertz(rate=0.05, shape=-0.1), GompertzMakeham(rate=0.05, shape=-0.1, constant=0.0),
     PiecewiseConstant(breaks=(0, 10), rates=(0.03, 0.0)), Gompertz(rate=0.05, shape=-0.1).scaled(0.6)],
    ids=["gompertz", "gompertz_makeham_c0", "piecewise", "ph_gompertz"],
)
@pytest.mark.parametrize("x", [0.0, 7.0])
def test_never_event_fraction_monte_carlo(h: Hazard, x: float) -> None:
    # P(never | clock x) = exp(-(H(inf) - H(x))); tolerance 4 Monte Carlo standard errors.
    n = 200_000
    e = np.random.default_rng(20050613).standard_exponential(n)
    t = h.conditional_time(np.full(n, x), e)
    p = math.exp(-(h.cumhazard_limit - float(h.cumhazard(x))))
    se = math.sqrt(p * (1 - p) / n)
    assert abs(np.isinf(t).mean() - p) < 4 * se
    assert not np.isnan(t).any() and (t >= 0).all()


def test_zero_hazard_ratio_and_zero_rate_never_happen() -> None:
    for h in (Exponential(rate=0.0), Weibull(shape=2.0, scale=10.0).scaled(0.0)):
        assert h.cumhazard_limit == 0.0
        assert (h.conditional_time(np.array([0.0, 50.0]), np.array([0.0, 1.0])) == np.inf).all()
        assert (h.inv_cumhazard(np.array([0.0, 3.0])) == np.inf).all()
        assert (h.cumhazard(np.array([0.0, 1.0, np.inf])) == 0.0).all()


# --------------------------------------------------------------------------------------------
# Family-specific exactness
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize(("b", "g", "c"), [(3e-5, 0.085, 5e-4), (1e-6, 0.2, 1e-3), (0.05, -0.1, 0.01),
                                           (1e-12, 0.15, 1e-12), (1e3, 0.085, 1e6), (2e-4, 1e-9, 0.01)])
def test_gompertz_makeham_conditional_time_is_exact(b: float, g: float, c: float) -> None:
    # Increment from x computed without cancellation: c T + (B/g) expm1(g T), B = b exp(g x).
    x, e = (a.ravel() for a in np.meshgrid(X_GRID, [1e-300, 1e-12, 1e-4, 0.1, 1.0, 5.0, 40.0, 700.0]))
    h = GompertzMakeham(rate=b, shape=g, constant=c)
    t = h.conditional_time(x, e)
    big_b = b * np.exp(g * x)
    inc = c * t + big_b * np.expm1(g * t) / g
    np.testing.assert_allclose(inc, e, rtol=1e-12, atol=0)


def test_gompertz_conditional_time_closed_form() -> None:
    # T = (1/g) log(1 + g e / (b exp(g x))) (Bender et al. 2005 with left truncation, docs/methods.md,
    # 'Hazards and survival').
    b, g = 3e-5, 0.085
    x, e = (a.ravel() for a in np.meshgrid(X_GRID, E_GRID))
    expected = np.log1p(g * e / (b * np.exp(g * x))) / g
    np.testing.assert_allclose(Gompertz(rate=b, shape=g).conditional_time(x, e), expected, rtol=1e-12, atol=0)


def test_weibull_and_loglogistic_conditional_time_closed_forms() -> None:
    # Weibull: x + T = scale (H(x) + e)^(1/shape); log-logistic: 1 + a(x + T) = (1 + a(x)) exp(e),
    # a(t) = (t/scale)^shape. Direct forms, fine where e is not small next to H(x).
    x, e = (a.ravel() for a in np.meshgrid(X_GRID, [0.3, 1.0, 4.0, 20.0]))
    k, s = 1.7, 25.0
    np.testing.assert_allclose(Weibull(k, s).conditional_time(x, e), s * ((x / s) ** k + e) ** (1 / k) - x, rtol=1e-12)
    k, s = 2.5, 12.0
    end = s * np.expm1(np.log1p((x / s) ** k) + e) ** (1 / k)
    np.testing.assert_allclose(LogLogistic(k, s).conditional_time(x, e), end - x, rtol=1e-12)


def test_piecewise_matches_life_table_arithmetic() -> None:
    # Bands [0, 1), [1, 5), [5, inf) with rates 0.02, 0.001, 0.05: from x = 0.5 a draw e = 0.03 uses
    # 0.5 * 0.02 = 0.01 in band 0, 4 * 0.001 = 0.004 in band 1, then 0.016 / 0.05 = 0.32 years.
    h = PiecewiseConstant(breaks=[0.0, 1.0, 5.0], rates=[0.02, 0.001, 0.05])
    np.testing.assert_allclose(h.conditional_time(0.5, 0.03), 0.5 + 4.0 + 0.32, rtol=1e-14)
    np.testing.assert_allclose(h.cumhazard(np.array([1.0, 5.0, 7.0])), [0.02, 0.024, 0.124], rtol=1e-14)
    np.testing.assert_allclose(h.inv_cumhazard(np.array([0.01, 0.022, 0.124])), [0.5, 3.0, 7.0], rtol=1e-14)
    np.testing.assert_array_equal(h.hazard(np.array([0.0, 0.99, 1.0, 5.0, 1e9])), [0.02, 0.02, 0.001, 0.05, 0.05])
    # A zero-rate band is stepped over: from x = 2 with rates (0.1, 0, 0.2) and e = 0.2 -> 3 + 1.
    z = PiecewiseConstant(breaks=[0.0, 1.0, 5.0], rates=[0.1, 0.0, 0.2])
    np.testing.assert_allclose(z.conditional_time(2.0, np.array([0.0, 0.2])), [3.0, 4.0], rtol=1e-14)


@pytest.mark.parametrize("g", [1e-12, 0.0, -1e-12])
def test_gompertz_tends_to_exponential_as_shape_tends_to_zero(g: float) -> None:
    b, c = 0.02, 0.003
    x, e = (a.ravel() for a in np.meshgrid(X_GRID, [1e-300, 1e-6, 0.1, 0.5, 2.0]))
    t = np.array([0.0, 1e-6, 1.0, 50.0, 130.0])
    y = np.array([1e-10, 0.1, 1.0, 2.0])
    for h, ref in ((Gompertz(rate=b, shape=g), Exponential(rate=b)),
                   (GompertzMakeham(rate=b, shape=g, constant=c), Exponential(rate=b + c))):
        # All times stay below 130 years, so |g| t <= 1.3e-10 and relative differences are < 1e-9.
        np.testing.assert_allclose(h.hazard(t), ref.hazard(t), rtol=1e-9, atol=0)
        np.testing.assert_allclose(h.cumhazard(t), ref.cumhazard(t), rtol=1e-9, atol=0)
        np.testing.assert_allclose(h.inv_cumhazard(y), ref.inv_cumhazard(y), rtol=1e-9, atol=0)
        np.testing.assert_allclose(h.conditional_time(x, e), ref.conditional_time(x, e), rtol=1e-9, atol=0)
    assert Gompertz(rate=b, shape=-1e-12).cumhazard_limit == pytest.approx(b / 1e-12)


def test_gompertz_series_for_small_shape() -> None:
    # H(t) = b t (1 + u/2 + u^2/6 + u^3/24 + ...), u = g t (Taylor series of (e^u - 1)/u; elementary,
    # from memory); the omitted terms are below 1e-17 relative here.
    b, g, t = 1e-3, 1e-6, np.array([1.0, 50.0, 130.0])
    u = g * t
    np.testing.assert_allclose(Gompertz(b, g).cumhazard(t), b * t * (1 + u / 2 + u**2 / 6 + u**3 / 24), rtol=1e-14)


# --------------------------------------------------------------------------------------------
# Extreme inputs
# --------------------------------------------------------------------------------------------

def _extreme_hazards() -> list[Hazard]:
    out: list[Hazard] = []
    for r in (1e-12, 1e-6, 1.0, 1e6):
        out += [Exponential(r), Weibull(1.5, 1 / r), Weibull(0.3, 1 / r), Weibull(8.0, 1 / r),
                LogLogistic(2.0, 1 / r), LogLogistic(0.5, 1 / r), LogNormal(-math.log(r), 1.0),
                LogNormal(-math.log(r), 0.05), Gamma(2.0, 1 / r), Gamma(0.3, 1 / r), Gamma(20.0, 1 / r),
                PiecewiseConstant((0, 1, 50), (r, 0.0, r)), PiecewiseConstant((0, 1), (r, 0.0))]
        for g in (0.2, 0.085, 1e-12, 0.0, -1e-12, -0.1, -5.0):
            out += [Gompertz(r, g), GompertzMakeham(r, g, 1e-4), GompertzMakeham(1e-6, g, r)]
    out += [Weibull(1.5, 20.0).scaled(1e-12), Gompertz(1e-5, 0.1).scaled(1e6)]
    return out


EXTREME = _extreme_hazards()


@pytest.mark.parametrize("h", EXTREME, ids=[repr(h) for h in EXTREME])
def test_extreme_inputs_never_nan_never_negative(h: Hazard) -> None:
    x = np.array([0.0, 1e-300, 1e-10, 0.3, 1.0, 30.0, 60.0, 100.0, 130.0])
    e = np.array([0.0, 5e-324, 1e-300, 1e-10, 0.5, 1.0, 40.0, 700.0, 1e6, np.inf])
    t = h.conditional_time(x[:, None], e)  # RuntimeWarnings are errors in this test suite
    assert not np.isnan(t).any() and (t >= 0).all()
    with np.errstate(invalid="ignore"):  # inf - inf between two never-event draws
        step = np.diff(t, axis=1)
    assert (np.isnan(step) | (step >= -1e-12 * t[:, 1:])).all()  # non-decreasing in the draw
    assert (t[:, -1] == np.inf).all()  # e = inf: never
    for f, arg in ((h.inv_cumhazard, e), (h.cumhazard, x), (h.hazard, x), (h.sf, x)):
        v = f(arg)
        assert not np.isnan(v).any() and (v >= 0).all()
    assert h.inv_cumhazard(0.0) >= 0.0 and h.cumhazard(np.inf) == h.cumhazard_limit


def test_extreme_values_are_right() -> None:
    assert Exponential(1e6).conditional_time(130.0, 1e-300) == pytest.approx(1e-306, rel=1e-15)
    assert Exponential(1e-12).conditional_time(0.0, 1e6) == pytest.approx(1e18, rel=1e-15)
    # Weibull from x with e tiny: T = e / h(x) to first order.
    w = Weibull(4.0, 70.0)
    assert w.conditional_time(130.0, 1e-300) * w.hazard(130.0) == pytest.approx(1e-300, rel=1e-12)
    # Gompertz at age 130 with b = 1e-6, g = 0.2: T = log1p(g e / B) / g with B = b exp(26).
    g = Gompertz(1e-6, 0.2)
    for e in (1e-300, 40.0, 700.0, 1e6):
        expected = math.log1p(0.2 * e / (1e-6 * math.exp(26.0))) / 0.2
        assert g.conditional_time(130.0, e) == pytest.approx(expected, rel=1e-13)
    # Huge y for the Gompertz inverse: no overflow in g y / b.
    assert Gompertz(1e-12, 0.085).inv_cumhazard(1e300) == pytest.approx(
        (math.log(0.085) + math.log(1e300) - math.log(1e-12)) / 0.085, rel=1e-14)
    # Gamma far tail (gammaincc underflows): hazard -> 1/scale, so T ~ scale * e.
    gm = Gamma(2.0, 0.1)
    assert gm.sf(130.0) == 0.0 and np.isfinite(gm.cumhazard(130.0))
    t = gm.conditional_time(130.0, np.array([1e-300, 1.0, 40.0]))
    np.testing.assert_allclose(gm.cumhazard(130.0 + t) - gm.cumhazard(130.0), [0.0, 1.0, 40.0], rtol=1e-10, atol=1e-9)
    assert t[0] * gm.hazard(130.0) == pytest.approx(1e-300, rel=1e-10)
    # Gamma(2) survival is Q(2, z) = exp(-z)(1 + z), so H = z - log1p(z) exactly (from memory, elementary).
    z = np.array([800.0, 1300.0, 1e5])
    np.testing.assert_allclose(Gamma(2.0, 1.0).cumhazard(z), z - np.log1p(z), rtol=1e-14)
    # Log-normal hazard far in the tail stays finite and positive.
    ln = LogNormal(0.0, 0.3)
    assert 0 < ln.hazard(1e6) < np.inf and np.isfinite(ln.conditional_time(130.0, 1e6))


# --------------------------------------------------------------------------------------------
# Property-based round trips (hypothesis, derandomised so runs are reproducible)
# --------------------------------------------------------------------------------------------

def _piecewise(widths_rates: list[tuple[float, float]]) -> PiecewiseConstant:
    widths = [w for w, _ in widths_rates]
    breaks = [0.0, *np.cumsum(widths[:-1]).tolist()]
    return PiecewiseConstant(breaks, [r for _, r in widths_rates])


def _f(lo: float, hi: float) -> st.SearchStrategy[float]:
    return st.floats(lo, hi, allow_nan=False, allow_infinity=False)


HAZARDS = st.one_of(
    st.builds(Exponential, _f(1e-6, 5.0)),
    st.builds(Weibull, _f(0.2, 8.0), _f(0.1, 200.0)),
    st.builds(Gompertz, _f(1e-8, 0.5), _f(-0.5, 0.5)),
    st.builds(GompertzMakeham, _f(1e-8, 0.5), _f(-0.5, 0.5), _f(0.0, 0.5)),
    st.builds(LogLogistic, _f(0.3, 8.0), _f(0.1, 200.0)),
    st.builds(LogNormal, _f(-2.0, 6.0), _f(0.1, 3.0)),
    st.builds(Gamma, _f(0.1, 30.0), _f(0.05, 50.0)),
    st.lists(st.tuples(_f(0.01, 30.0), _f(0.0, 2.0)), min_size=1, max_size=8).map(_piecewise),
)
MAYBE_SCALED = st.tuples(HAZARDS, st.one_of(st.just(1.0), _f(0.01, 20.0))).map(lambda p: p[0].scaled(p[1]))


@settings(max_examples=150, deadline=None, derandomize=True)
@given(h=MAYBE_SCALED, x=_f(0.0, 130.0), e=_f(1e-9, 50.0))
def test_property_conditional_round_trip(h: Hazard, x: float, e: float) -> None:
    assert_conditional_round_trip(h, np.array([x]), np.array([e]))


@settings(max_examples=150, deadline=None, derandomize=True)
@given(h=MAYBE_SCALED, y=_f(1e-10, 100.0))
def test_property_inverse_round_trip(h: Hazard, y: float) -> None:
    t = float(h.inv_cumhazard(y))
    if y >= h.cumhazard_limit:
        assert t == math.inf
    else:
        assert 0.0 <= t < math.inf
        assert float(h.cumhazard(t)) == pytest.approx(y, rel=1e-10)


# --------------------------------------------------------------------------------------------
# Construction, registry and API details
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("make", "message"),
    [
        (lambda: Weibull(shape=-1.0, scale=2.0), "weibull: shape must be > 0 and finite, got -1.0"),
        (lambda: Weibull(shape=1.0, scale=math.inf), "weibull: scale must be > 0 and finite, got inf"),
        (lambda: Exponential(rate=-0.1), "exponential: rate must be >= 0 and finite, got -0.1"),
        (lambda: Exponential(rate=math.nan), "exponential: rate must be >= 0 and finite, got nan"),
        (lambda: Gompertz(rate=0.0, shape=0.1), "gompertz: rate must be > 0 and finite, got 0.0"),
        (lambda: Gompertz(rate=1e-5, shape=math.inf), "gompertz: shape must be finite, got inf"),
        (lambda: GompertzMakeham(rate=1e-5, shape=0.1, constant=-1e-3),
         "gompertz_makeham: constant must be >= 0 and finite, got -0.001"),
        (lambda: LogLogistic(shape=2.0, scale=0), "loglogistic: scale must be > 0 and finite, got 0.0"),
        (lambda: LogNormal(mu=math.nan, sigma=1.0), "lognormal: mu must be finite, got nan"),
        (lambda: LogNormal(mu=0.0, sigma=-2.0), "lognormal: sigma must be > 0 and finite, got -2.0"),
        (lambda: Gamma(shape=-2.0, scale=1.0), "gamma: shape must be > 0 and finite, got -2.0"),
        (lambda: Weibull(shape="1.5", scale=2.0), "weibull: shape must be a real number (> 0 and finite), got '1.5'"),
        (lambda: PiecewiseConstant((1, 5), (0.1, 0.2)),
         "piecewise: breaks[0] must be 0 (the first band starts at clock 0), got 1.0"),
        (lambda: PiecewiseConstant((0, 5, 5), (0.1, 0.2, 0.3)),
         "piecewise: breaks must be strictly increasing, got breaks[2] = 5.0 after breaks[1] = 5.0"),
        (lambda: PiecewiseConstant((0, 5), (0.1, -0.2)), "piecewise: rates[1] must be >= 0 and finite, got -0.2"),
        (lambda: PiecewiseConstant((0, 5), (0.1,)),
         "piecewise: breaks and rates must have the same length, got 2 breaks and 1 rates"),
        (lambda: PiecewiseConstant((), ()), "piecewise: breaks must have at least one band start, got ()"),
        (lambda: Weibull(1.0, 2.0).scaled(-1.0), "proportional_hazards: hr must be >= 0 and finite, got -1.0"),
        (lambda: Weibull(1.0, 2.0).scaled(math.nan), "proportional_hazards: hr must be >= 0 and finite, got nan"),
        (lambda: ProportionalHazards(base="weibull", hr=2.0),
         "proportional_hazards: base must be a Hazard, got 'weibull'"),
    ],
)
def test_construction_errors_name_field_value_and_rule(make, message: str) -> None:
    with pytest.raises(HazardParameterError, match=re.escape(message)):
        make()


def test_argument_errors_name_argument_and_value() -> None:
    h = Weibull(1.5, 20.0)
    with pytest.raises(ValueError, match=re.escape("weibull.conditional_time: x must be finite and >= 0, got -1.0")):
        h.conditional_time(np.array([1.0, -1.0]), 1.0)
    message = "weibull.conditional_time: e must be >= 0 (inf allowed, NaN not), got nan"
    with pytest.raises(ValueError, match=re.escape(message)):
        h.conditional_time(1.0, np.array([0.5, np.nan]))
    with pytest.raises(ValueError, match=re.escape("weibull.cumhazard: t must be >= 0")):
        h.cumhazard(-0.5)
    with pytest.raises(ValueError, match=re.escape("weibull.inv_cumhazard: y must be >= 0")):
        h.inv_cumhazard(-1e-3)


def test_make_hazard_and_registry() -> None:
    assert set(FAMILIES) == {"exponential", "weibull", "gompertz", "gompertz_makeham", "loglogistic",
                             "lognormal", "gamma", "piecewise"}
    assert make_hazard("weibull", shape=1.3, scale=30.0) == Weibull(1.3, 30.0)
    for h in ALL:
        if not isinstance(h, ProportionalHazards):
            assert make_hazard(h.family, **h.params()) == h  # params() round-trips
    known = "unknown hazard family 'weibul'; known families: exponential, gamma, gompertz, gompertz_makeham, "
    with pytest.raises(HazardParameterError, match=re.escape(known)):
        make_hazard("weibul", shape=1.0, scale=1.0)
    message = "weibull: unknown parameter(s) 'shap'; missing parameter(s) 'shape'; expected parameters: shape, scale"
    with pytest.raises(HazardParameterError, match=re.escape(message)):
        make_hazard("weibull", shap=1.0, scale=1.0)
    with pytest.raises(HazardParameterError, match=re.escape("gompertz: missing parameter(s) 'shape'")):
        make_hazard("gompertz", rate=1e-5)
    with pytest.raises(TypeError):
        FAMILIES["mine"] = Exponential  # type: ignore[index]  # the registry is read-only


def test_hazards_are_frozen_hashable_and_scaled_flattens() -> None:
    w = Weibull(1.5, 20.0)
    with pytest.raises(dataclasses.FrozenInstanceError):
        w.shape = 2.0  # type: ignore[misc]
    assert hash(w) == hash(Weibull(1.5, 20.0)) and w.params() == {"shape": 1.5, "scale": 20.0}
    assert w.scaled(1.0) is w
    s = w.scaled(2.0).scaled(0.25)
    assert isinstance(s, ProportionalHazards) and s.base is w and s.hr == 0.5
    assert s.params() == {"hr": 0.5, "base.family": "weibull", "base.shape": 1.5, "base.scale": 20.0}
    p = PiecewiseConstant(np.array([0.0, 1.0]), [0.1, 0.2])
    assert p.breaks == (0.0, 1.0) and p.rates == (0.1, 0.2) and hash(p) == hash(PiecewiseConstant((0, 1), (0.1, 0.2)))
    x = np.array([0.0, 10.0, 50.0])
    e = np.array([0.2, 1.0, 3.0])
    np.testing.assert_allclose(s.conditional_time(x, e), w.conditional_time(x, e / 0.5), rtol=1e-15)


def test_rvs_reproducible_and_distributed_as_sf() -> None:
    h = Weibull(1.3, 30.0)
    a = h.rvs(100_000, np.random.default_rng(99))
    np.testing.assert_array_equal(a, h.rvs(100_000, np.random.default_rng(99)))
    for t in (5.0, 30.0, 80.0):
        p = float(h.sf(t))
        assert abs((a > t).mean() - p) < 4 * math.sqrt(p * (1 - p) / a.size)  # 4 Monte Carlo SE


def test_weibull_all_zero_clocks_give_the_same_bits_as_mixed_clocks() -> None:
    # Weibull.conditional_time takes a short path when every clock is 0 (the engine's first visits);
    # it must give the same bits as the general form, which runs when any clock is positive, and
    # agree with scipy's weibull_min quantiles: T = F^-1(1 - exp(-e)) from 0.
    h = Weibull(1.3, 25.0)
    e = np.concatenate([np.random.default_rng(3).exponential(size=2000), [0.0, 1e-300, 36.0, np.inf]])
    mixed = h.conditional_time(np.r_[np.zeros(e.size), 1.0], np.r_[e, 1.0])[:-1]
    zero = h.conditional_time(np.zeros(e.size), e)
    np.testing.assert_array_equal(zero, mixed)
    ref = stats.weibull_min(c=1.3, scale=25.0).isf(np.exp(-e[:2000]))
    np.testing.assert_allclose(zero[:2000], ref, rtol=1e-12)


def test_parameter_errors_carry_the_parameter_value_and_rule_as_data() -> None:
    # HazardParameterError is a sim.problems.ValidationError (and still a ValueError): the field is
    # read from its problems, never from the message text.
    cases = [
        (lambda: Weibull(shape=-1.0, scale=2.0), ("shape",), -1.0, "must be > 0 and finite"),
        (lambda: Weibull(shape="1.5", scale=2.0), ("shape",), "1.5", "must be a real number (> 0 and finite)"),
        (lambda: Gompertz(rate=1e-5, shape=math.inf), ("shape",), math.inf, "must be finite"),
        (lambda: PiecewiseConstant((0, 5), (0.1, -0.2)), ("rates", 1), -0.2, "must be >= 0 and finite"),
        (lambda: PiecewiseConstant((1, 5), (0.1, 0.2)), ("breaks", 0), 1.0,
         "must be 0 (the first band starts at clock 0)"),
        (lambda: PiecewiseConstant((0, 5, 5), (0.1, 0.2, 0.3)), ("breaks", 2), 5.0,
         "must be greater than breaks[1] = 5.0 (breaks strictly increasing)"),
        (lambda: PiecewiseConstant((0, 5), (0.1,)), ("rates",), (0.1,), "must have the same length as breaks (2)"),
        (lambda: Weibull(1.0, 2.0).scaled(-1.0), ("hr",), -1.0, "must be >= 0 and finite"),
        (lambda: ProportionalHazards(base="weibull", hr=2.0), ("base",), "weibull", "must be a Hazard"),
        (lambda: make_hazard("weibul", shape=1.0), ("family",), "weibul", "must be one of the known families: "
         "exponential, gamma, gompertz, gompertz_makeham, loglogistic, lognormal, piecewise, weibull"),
    ]
    for make, path, value, rule in cases:
        with pytest.raises(HazardParameterError) as info:
            make()
        err = info.value
        assert isinstance(err, ValidationError) and isinstance(err, ValueError)
        assert len(err.problems) == 1
        assert (err.problem.path, err.problem.value, err.problem.rule) == (path, value, rule)


def test_unknown_and_missing_parameters_are_one_problem_each_and_errors_pickle() -> None:
    with pytest.raises(HazardParameterError) as info:
        make_hazard("gompertz_makeham", rate=1e-5, slope=0.1, extra=2.0)
    err = info.value
    assert str(err) == ("gompertz_makeham: unknown parameter(s) 'extra', 'slope'; missing parameter(s) 'shape', "
                        "'constant'; expected parameters: rate, shape, constant")
    assert [(p.path, p.value) for p in err.problems] == [(("extra",), 2.0), (("slope",), 0.1),
                                                          (("shape",), NO_VALUE), (("constant",), NO_VALUE)]
    assert all("gompertz_makeham" in p.rule for p in err.problems)
    # process and Dask executors send errors between processes: message and problems survive
    back = pickle.loads(pickle.dumps(err))
    assert type(back) is HazardParameterError and str(back) == str(err) and back.problems == err.problems
    # seen from an enclosing table (the scenario loader), the paths are prefixed
    inner = err.within("transitions", 2)
    assert inner.problems[0].path == ("transitions", 2, "extra")


# --------------------------------------------------------------------------------------------
# Parameter dimensions (sim.hazards.dimensions) and time units
# --------------------------------------------------------------------------------------------

def test_family_dimensions_list_each_constructor_parameter_in_order() -> None:
    assert set(FAMILY_DIMENSIONS) == set(FAMILIES)
    for family, cls in FAMILIES.items():
        constructor = [f.name for f in dataclasses.fields(cls) if f.init]
        assert list(FAMILY_DIMENSIONS[family]) == constructor, family


# Each family parameterised on a clock in months (invented values of plausible size).
IN_MONTHS: dict[str, dict[str, float | tuple[float, ...]]] = {
    "exponential": {"rate": 0.004},
    "weibull": {"shape": 1.4, "scale": 90.0},
    "gompertz": {"rate": 2e-4, "shape": 0.006},
    "gompertz_makeham": {"rate": 2e-4, "shape": -0.004, "constant": 1e-3},
    "loglogistic": {"shape": 2.2, "scale": 40.0},
    "lognormal": {"mu": 3.5, "sigma": 0.9},
    "gamma": {"shape": 2.5, "scale": 18.0},
    "piecewise": {"breaks": (0.0, 6.0, 24.0, 60.0), "rates": (0.01, 0.002, 0.0, 0.005)},
}


@pytest.mark.parametrize("family", sorted(FAMILIES))
def test_month_parameters_converted_to_years_describe_the_same_hazard(family: str) -> None:
    # Change of clock s = 12 t (months per year): a hazard written in months and the same hazard
    # with each parameter converted by its dimension (to_year_units) must satisfy
    # H_years(t) = H_months(12 t) and h_years(t) = 12 h_months(12 t) (chain rule).
    assert set(IN_MONTHS) == set(FAMILIES)
    months = IN_MONTHS[family]
    per_unit = UNIT_IN_YEARS["months"]
    years = {name: to_year_units(FAMILY_DIMENSIONS[family][name], value, per_unit) for name, value in months.items()}
    h_months, h_years = make_hazard(family, **months), make_hazard(family, **years)
    t = np.array([0.0, 0.01, 0.3, 0.5, 1.0, 2.0, 4.5, 7.0, 15.0])  # years (0.5 and 2 are band starts)
    s = t / per_unit  # the same instants in months
    np.testing.assert_allclose(h_years.cumhazard(t), h_months.cumhazard(s), rtol=1e-12, atol=0)
    np.testing.assert_allclose(h_years.hazard(t), h_months.hazard(s) / per_unit, rtol=1e-12, atol=0)
    assert h_years.cumhazard_limit == pytest.approx(h_months.cumhazard_limit, rel=1e-12)
