"""The model's background mortality on a fit's clock (sim.evidence.background_on_fit_clock), shared by
the evidence window and ``hazardtrace fit --background``: hazard and cumulative hazard in the data's
unit since the start of follow-up, against the Gompertz closed form, a life table's own rates and
scipy.integrate.quad; the follow-up a horizon leaves (follow_up_years)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate

from sim.evidence import background_on_fit_clock, below_background, follow_up_years
from sim.hazards import Exponential, Gompertz, PiecewiseConstant
from sim.model import BackgroundMortality, Horizon
from sim.problems import ValidationError


def test_gompertz_background_in_months_from_entry_age():
    """h_bg(a) = b e^{g a} per year at age a; on a clock t in months from entry age a0:
    h(t) = b e^{g (a0 + t/12)} / 12 and H(t) = (b / g)(e^{g (a0 + t/12)} - e^{g a0}) (Gompertz law,
    closed form, docs/methods.md section 2)."""
    b, g, a0 = 3e-5, 0.09, 60.0
    (bg,) = background_on_fit_clock(Gompertz(rate=b, shape=g), unit="months", entry_age=a0)
    t = np.array([0.0, 1.0, 30.0, 240.0, 480.0])
    np.testing.assert_allclose(bg.hazard(t), b * np.exp(g * (a0 + t / 12.0)) / 12.0, rtol=1e-13)
    np.testing.assert_allclose(bg.cumhazard(t), b / g * (np.exp(g * (a0 + t / 12.0)) - math.exp(g * a0)),
                               rtol=1e-12, atol=1e-300)
    np.testing.assert_allclose(bg.sf(t), np.exp(-bg.cumhazard(t)), rtol=1e-15)
    # the cumulative hazard is the integral of the hazard on the same clock (scipy.integrate.quad)
    for end in t[1:]:
        value, err = integrate.quad(lambda u: float(bg.hazard(u)), 0.0, end, epsabs=0.0, epsrel=1e-12)
        assert float(bg.cumhazard(end)) == pytest.approx(value, rel=1e-10)


def test_life_table_background_with_multiplier_per_sex_in_weeks():
    """A piecewise-constant life table (bands by age) times a multiplier m: on a clock in weeks from
    entry age 62, the hazard in each band is m x the table's own rate x (years per week); the
    cumulative hazard is the integral of that step function (scipy.integrate.quad, band edges as
    break points)."""
    breaks, rates = (0.0, 60.0, 65.0, 70.0), (0.001, 0.01, 0.02, 0.04)
    m, a0 = 1.5, 62.0
    female = PiecewiseConstant(breaks=breaks, rates=rates)
    male = PiecewiseConstant(breaks=breaks, rates=tuple(2 * r for r in rates))
    model_bg = BackgroundMortality("dead", {"female": female, "male": male}, multiplier=m)
    found = {b.label: b for b in background_on_fit_clock(model_bg, unit="weeks", entry_age=a0)}
    assert set(found) == {"female", "male"}
    week = 7.0 / 365.25
    t = np.array([0.0, 100.0, 2.9 / week, 3.1 / week, 7.9 / week, 8.1 / week, 30.0 / week])
    age = a0 + t * week
    for sex, factor in (("female", 1.0), ("male", 2.0)):
        band = np.searchsorted(np.asarray(breaks), age, side="right") - 1
        expected = m * factor * np.asarray(rates)[band] * week
        np.testing.assert_allclose(found[sex].hazard(t), expected, rtol=1e-13)
        edges = [(e - a0) / week for e in breaks if e > a0]
        for end in t[1:]:
            value, _ = integrate.quad(lambda u: float(found[sex].hazard(u)), 0.0, end,
                                      points=[e for e in edges if e < end] or None, epsabs=0.0, epsrel=1e-12,
                                      limit=200)
            assert float(found[sex].cumhazard(end)) == pytest.approx(value, rel=1e-10)


def test_background_on_the_entry_clock_ignores_the_entry_age():
    bg = BackgroundMortality("dead", {"all": Gompertz(rate=0.01, shape=0.05)}, clock="entry")
    (on_fit,) = background_on_fit_clock(bg, unit="years", entry_age=70.0)
    t = np.array([0.0, 5.0, 20.0])
    np.testing.assert_allclose(on_fit.hazard(t), 0.01 * np.exp(0.05 * t), rtol=1e-13)


def test_below_background_agrees_with_the_hazards_on_the_fit_clock():
    """At the crossing that below_background reports (years), the fitted hazard equals the background
    hazard on the fit's clock (in months); before it the fit is above, after it below."""
    fitted = Exponential(rate=0.004)  # per month
    bg = Gompertz(rate=3e-5, shape=0.09)
    (res,) = below_background(fitted, bg, entry_age=60.0, horizon=40.0, unit="months")
    (on_fit,) = background_on_fit_clock(bg, unit="months", entry_age=60.0)
    ((start, end),) = res.intervals_in("months")
    assert (start, end) == pytest.approx((res.intervals[0][0] * 12.0, 480.0), rel=1e-13)
    assert float(on_fit.hazard(start)) == pytest.approx(0.004, rel=1e-8)
    assert float(on_fit.hazard(start - 1.0)) < 0.004 < float(on_fit.hazard(start + 1.0))


def test_follow_up_years():
    assert follow_up_years(Horizon(40.0), 60.0) == 40.0
    assert follow_up_years(Horizon(100.0, "age"), 60.0) == 40.0
    assert follow_up_years(Horizon(50.0, "age"), 60.0) == -10.0


def test_bad_unit_or_entry_age_names_the_setting():
    with pytest.raises(ValidationError) as err:
        background_on_fit_clock(Gompertz(rate=3e-5, shape=0.09), unit="fortnights", entry_age=60.0)
    assert err.value.problem.path == ("unit",) and err.value.problem.value == "fortnights"
    with pytest.raises(ValidationError) as err:
        background_on_fit_clock(Gompertz(rate=3e-5, shape=0.09), unit="months", entry_age=-1.0)
    assert err.value.problem.path == ("entry_age",) and err.value.problem.value == -1.0
