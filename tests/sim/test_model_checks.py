"""sim.model.checks: the one number check. Property tests: every accepted value comes back as the same
Python number; every refused value gives one problem naming the path, the rule and the value."""

from __future__ import annotations

import math
import pickle

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sim.model import ModelError, PopulationError, ValuationError
from sim.model.checks import Problems, flag, is_number, number, number_map, string
from sim.problems import Problem, ValidationError

PATH = ("valuation", "utilities", "well")
_numpy_floats = st.sampled_from([np.float64, np.float32, np.float16])
_numpy_ints = st.sampled_from([np.int64, np.int32, np.int8, np.uint16])


def _problem(fn, *args, **kwargs) -> tuple:
    with pytest.raises(ValidationError) as info:
        fn(*args, **kwargs)
    (p,) = info.value.problems
    return p.path, p.rule, p.value


@given(st.floats(allow_nan=False, allow_infinity=False))
def test_finite_floats_come_back_unchanged(x):
    out = number(PATH, x)
    assert type(out) is float and out == x


@given(st.integers(-10**15, 10**15))
def test_ints_come_back_as_float_or_int(n):
    as_float = number(PATH, n)
    assert type(as_float) is float and as_float == float(n)
    as_int = number(PATH, n, integer=True)
    assert type(as_int) is int and as_int == n


@given(_numpy_floats, st.floats(-1e4, 1e4, allow_nan=False))
def test_numpy_floating_scalars_are_numbers(kind, x):
    value = kind(x)
    out = number(PATH, value)
    assert type(out) is float and out == float(value)


@given(_numpy_ints, st.integers(0, 100))
def test_numpy_integer_scalars_are_numbers(kind, n):
    value = kind(n)
    assert type(number(PATH, value, integer=True)) is int and number(PATH, value, integer=True) == n
    assert type(number(PATH, value)) is float


@pytest.mark.parametrize("value", [True, False, np.True_, np.bool_(False), "5", "", None, [1.0], (1.0,),
                                   {"a": 1}, 1 + 2j, np.array(1.0), np.array([1.0])])
def test_non_numbers_are_refused(value):
    assert not is_number(value)
    assert _problem(number, PATH, value) == (PATH, "must be a number", value)


@given(st.sampled_from([math.nan, math.inf, -math.inf, np.float64("nan"), np.float32("inf")]))
def test_nan_and_infinity_are_not_finite(value):
    path, rule, got = _problem(number, PATH, value)
    assert (path, rule) == (PATH, "must be finite") and got is value


def test_infinity_allowed_on_request_but_never_nan():
    assert number(PATH, math.inf, finite=False) == math.inf
    assert _problem(number, PATH, math.nan, finite=False)[1] == "must be a number (not NaN)"
    assert _problem(number, PATH, 10**400) == (PATH, "must be finite", 10**400)  # too large for a float


@given(st.floats(allow_nan=False, allow_infinity=False), st.floats(-1e6, 1e6, allow_nan=False), st.booleans())
def test_minimum(x, low, strict):
    ok = x > low if strict else x >= low
    if ok:
        assert number(PATH, x, minimum=low, strict_min=strict) == x
    else:
        assert _problem(number, PATH, x, minimum=low, strict_min=strict) == (
            PATH, f"must be {'>' if strict else '>='} {low:g}", x)


@given(st.floats(allow_nan=False, allow_infinity=False), st.floats(-1e6, 1e6, allow_nan=False), st.booleans())
def test_maximum(x, high, strict):
    ok = x < high if strict else x <= high
    if ok:
        assert number(PATH, x, maximum=high, strict_max=strict) == x
    else:
        assert _problem(number, PATH, x, maximum=high, strict_max=strict) == (
            PATH, f"must be {'<' if strict else '<='} {high:g}", x)


def test_rule_wording():
    assert _problem(number, PATH, -1, minimum=0)[1] == "must be >= 0"
    assert _problem(number, PATH, 0, minimum=0, strict_min=True)[1] == "must be > 0"
    assert _problem(number, PATH, 1.5, maximum=1)[1] == "must be <= 1"
    assert _problem(number, PATH, 5.0, integer=True)[1] == "must be a whole number"  # written as a float


@given(st.one_of(st.floats(), st.integers(), st.text(max_size=3), st.booleans(), st.none(),
                 st.lists(st.integers(), max_size=2)))
@settings(max_examples=200)
def test_any_value_is_a_number_or_one_problem(value):
    try:
        out = number(PATH, value, minimum=0)
    except ValidationError as err:
        assert len(err.problems) == 1 and err.problem.path == PATH and err.problem.value is value
        assert str(err).startswith("valuation.utilities.well: must be")
    else:
        assert type(out) is float and math.isfinite(out) and out >= 0
        assert not isinstance(value, bool)


def test_error_class_is_chosen_by_the_caller():
    with pytest.raises(ModelError) as info:
        number(("horizon", "value"), "5", error=ModelError)
    assert isinstance(info.value, ValueError) and isinstance(info.value, ValidationError)
    assert issubclass(PopulationError, ModelError) and issubclass(ValuationError, ModelError)


def test_string_and_flag():
    assert string(("horizon", "scale"), "age", choices=("time", "age")) == "age"
    assert _problem(string, ("horizon", "scale"), "cycles", choices=("time", "age")) == (
        ("horizon", "scale"), "must be one of ['time', 'age']", "cycles")
    for bad in ("", "  ", None, 3):
        assert _problem(string, ("name",), bad) == (("name",), "must be a non-empty string", bad)
    assert flag(("states", "dead", "absorbing"), np.True_) is True
    assert _problem(flag, ("states", "dead", "absorbing"), "no") == (
        ("states", "dead", "absorbing"), "must be true or false", "no")
    assert _problem(flag, ("states", "dead", "absorbing"), 1)[1] == "must be true or false"


def test_number_map_reports_every_bad_entry():
    assert number_map(("valuation", "state_costs"), {"well": np.int64(3), "sick": 2.5}) == {"well": 3.0, "sick": 2.5}
    with pytest.raises(ValidationError) as info:
        number_map(("valuation", "utilities"), {"well": "high", "sick": 1.2, "ok": 0.5, "x": True}, maximum=1)
    assert [(p.path, p.rule) for p in info.value.problems] == [
        (("valuation", "utilities", "well"), "must be a number"),
        (("valuation", "utilities", "sick"), "must be <= 1"),
        (("valuation", "utilities", "x"), "must be a number")]
    assert _problem(number_map, ("valuation", "utilities"), [0.5]) == (
        ("valuation", "utilities"), "must be a table of name = number", [0.5])


def test_problems_collects_and_raises_once():
    found = Problems()
    assert found.check(number, ("horizon", "value"), 5) == 5.0
    assert found.check(number, ("horizon", "value"), "5") is None
    found.add(("states",), "at least one state must be absorbing (e.g. death), got none")
    assert len(found) == 2
    with pytest.raises(ModelError) as info:
        found.raise_if_any(ModelError)
    assert info.value.problems == (Problem(("horizon", "value"), "must be a number", "5"),
                                   Problem(("states",), "at least one state must be absorbing (e.g. death), got none"))
    again = pickle.loads(pickle.dumps(info.value))
    assert type(again) is ModelError and again.problems == info.value.problems and str(again) == str(info.value)
    Problems().raise_if_any(ModelError)  # nothing recorded: no error
