"""Tests for ``sim.hazards.units``: time units and rate/risk conversions (docs/methods.md, 'Rates, risks and units').

Check values are computed here from the closed forms of Miller & Homan 1994 (Med Decis Making
14:52-58) and Fleurence & Hollenbeak 2007 (PharmacoEconomics 25(1):3-6): p = 1 - exp(-r t),
r = -ln(1 - p) / t, p' = 1 - (1 - p)^(t'/t).
"""

from __future__ import annotations

import dataclasses
import math
import re

import numpy as np
import pytest

from sim.hazards.units import (
    DAYS_PER_YEAR,
    UNIT_IN_YEARS,
    RateConversion,
    UnitError,
    from_years,
    rate_from_risk,
    rate_per_year,
    rescale_risk,
    risk_from_rate,
    to_years,
)


def test_time_units_follow_the_stated_convention() -> None:
    # 365.25 days and 12 months per year (the module's convention: common practice, no source).
    assert DAYS_PER_YEAR == 365.25
    assert to_years(365.25, "days") == pytest.approx(1.0, rel=1e-15)
    assert to_years(7.0, "days") == pytest.approx(to_years(1.0, "weeks"), rel=1e-15)
    assert to_years(6.0, "months") == 0.5
    assert to_years(2.5, "years") == 2.5
    assert to_years(math.inf, "days") == math.inf  # an unlimited horizon stays unlimited
    assert to_years(0.0, "weeks") == 0.0
    for unit in UNIT_IN_YEARS:
        assert from_years(to_years(3.7, unit), unit) == pytest.approx(3.7, rel=1e-15)


def test_rate_per_person_time() -> None:
    # 3 events per 1000 person-years is 0.003 per year; per 1000 person-months it is 12 times that.
    assert rate_per_year(3, per=1000) == pytest.approx(0.003, rel=1e-15)
    assert rate_per_year(3, per=1000, unit="months") == pytest.approx(0.036, rel=1e-15)
    assert rate_per_year(5, per=100_000, unit="days") == pytest.approx(5 * 365.25 / 100_000, rel=1e-15)
    assert rate_per_year(0.0) == 0.0


def test_rate_from_risk_matches_closed_form() -> None:
    # Miller & Homan 1994; Fleurence & Hollenbeak 2007: r = -ln(1 - p) / t. A 20% risk over 5 years
    # is a constant rate of -ln(0.8)/5 = 0.04463 per year (not 0.2/5 = 0.04).
    conv = rate_from_risk(0.2, 5.0)
    assert isinstance(conv, RateConversion)
    assert conv.rate == pytest.approx(-math.log(0.8) / 5.0, rel=1e-15)
    assert conv.risk == 0.2 and conv.period_years == 5.0
    assert "Constant-rate assumption applied" in conv.note and "r = -ln(1 - p) / t" in conv.note
    assert "p = 0.2 over 5.0 years" in conv.note and repr(conv.rate) in conv.note
    assert "Miller & Homan 1994" in conv.note and "Fleurence & Hollenbeak 2007" in conv.note
    # Period in months: 0.2 over 6 months is -ln(0.8)/0.5 per year.
    monthly = rate_from_risk(0.2, 6, unit="months")
    assert monthly.rate == pytest.approx(-math.log(0.8) / 0.5, rel=1e-15)
    assert "6.0 months (t = 0.5 years)" in monthly.note
    assert rate_from_risk(0.0, 1.0).rate == 0.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        conv.rate = 1.0  # type: ignore[misc]


def test_risk_from_rate_matches_closed_form_and_inverts() -> None:
    # p = 1 - exp(-r t) (Miller & Homan 1994; Fleurence & Hollenbeak 2007).
    for r, t in [(0.04, 5.0), (0.5, 1.0), (3.0, 2.0), (1e-4, 10.0)]:
        assert risk_from_rate(r, t) == pytest.approx(1.0 - math.exp(-r * t), rel=1e-14)
        assert rate_from_risk(risk_from_rate(r, t), t).rate == pytest.approx(r, rel=1e-13)
    assert risk_from_rate(rate_from_risk(0.2, 5.0).rate, 5.0) == pytest.approx(0.2, rel=1e-15)
    assert risk_from_rate(0.12, 30, unit="days") == pytest.approx(1.0 - math.exp(-0.12 * 30 / 365.25), rel=1e-14)
    # Small r t: p = r t - (r t)^2 / 2 + ... (Taylor series; docs/methods.md, 'Rates, risks and units'). 1 - exp(-r t)
    # computed naively would lose most digits here; -expm1 keeps them.
    rt = 1e-12
    assert risk_from_rate(rt, 1.0) == pytest.approx(rt - rt**2 / 2, rel=1e-15)
    assert rate_from_risk(rt, 1.0).rate == pytest.approx(rt + rt**2 / 2, rel=1e-15)


def test_rescale_risk_matches_closed_form() -> None:
    # p' = 1 - (1 - p)^(t'/t) (Miller & Homan 1994; Fleurence & Hollenbeak 2007). A 10-year risk of
    # 30% is a 1-year risk of 1 - 0.7^0.1 = 3.504% (not 3%).
    one_year = rescale_risk(0.3, 10.0, 1.0)
    assert one_year == pytest.approx(1.0 - 0.7**0.1, rel=1e-14)
    assert one_year == pytest.approx(0.035038904880182, rel=1e-12)  # value of the line above
    assert rescale_risk(one_year, 1.0, 10.0) == pytest.approx(0.3, rel=1e-14)
    # Same as going through the constant rate.
    for p, t, t_new in [(0.3, 10.0, 1.0), (0.05, 1.0, 1.0 / 12), (0.9, 2.0, 7.0)]:
        via_rate = risk_from_rate(rate_from_risk(p, t).rate, t_new)
        assert rescale_risk(p, t, t_new) == pytest.approx(via_rate, rel=1e-14)
    # Tiny risks keep full relative precision: p' ~ p t'/t.
    assert rescale_risk(1e-15, 10.0, 1.0) == pytest.approx(1e-16, rel=1e-14)
    assert rescale_risk(0.0, 3.0, 1.0) == 0.0


def test_conversions_accept_numpy_scalars() -> None:
    assert rate_from_risk(np.float64(0.2), np.int64(5)).rate == pytest.approx(-math.log(0.8) / 5, rel=1e-15)
    assert to_years(np.float32(12.0), "months") == 1.0


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: rate_from_risk(1.0, 5.0),
         "rate_from_risk: p must be in [0, 1) (a risk of 1 corresponds to an infinite rate), got 1.0"),
        (lambda: rate_from_risk(-0.1, 5.0), "rate_from_risk: p must be in [0, 1), got -0.1"),
        (lambda: rate_from_risk(math.nan, 5.0), "rate_from_risk: p must be in [0, 1), got nan"),
        (lambda: rate_from_risk(0.2, 0.0), "rate_from_risk: period must be > 0 and finite, got 0.0"),
        (lambda: rate_from_risk(0.2, math.inf), "rate_from_risk: period must be > 0 and finite, got inf"),
        (lambda: rate_from_risk(0.2, 5.0, unit="decades"),
         "rate_from_risk: unit must be one of 'days', 'weeks', 'months', 'years', got 'decades'"),
        (lambda: rate_from_risk("0.2", 5.0), "rate_from_risk: p must be a real number, got '0.2'"),
        (lambda: risk_from_rate(-0.5, 1.0), "risk_from_rate: rate must be >= 0 and finite, got -0.5"),
        (lambda: risk_from_rate(0.5, -1.0), "risk_from_rate: period must be > 0 and finite, got -1.0"),
        (lambda: rescale_risk(1.2, 10.0, 1.0), "rescale_risk: p must be in [0, 1), got 1.2"),
        (lambda: rescale_risk(0.3, 10.0, 0.0), "rescale_risk: new_period must be > 0 and finite, got 0.0"),
        (lambda: rate_per_year(3, per=0), "rate_per_year: per must be > 0 and finite, got 0.0"),
        (lambda: rate_per_year(-3, per=1000), "rate_per_year: value must be >= 0 and finite, got -3.0"),
        (lambda: to_years(-1.0, "days"), "to_years: value must be >= 0 (inf allowed, NaN not), got -1.0"),
        (lambda: to_years(1.0, "Days"), "to_years: unit must be one of 'days', 'weeks', 'months', 'years', got 'Days'"),
        (lambda: to_years(True, "days"), "to_years: value must be a real number, got True"),
    ],
)
def test_errors_name_argument_value_and_rule(call, message: str) -> None:
    with pytest.raises(UnitError, match=re.escape(message)):
        call()
    assert issubclass(UnitError, ValueError)
