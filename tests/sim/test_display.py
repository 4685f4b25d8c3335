"""Number display rules (sim.analysis.display): decimals from the MCSE, per column, formatting.
The rules are common practice in reporting simulation results (no source); the expected strings
below follow from them by hand."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sim.analysis.display import column_decimals, decimals_from_mcse, format_fixed


def test_mean_and_mcse_shown_to_the_mcse_second_significant_digit():
    d = decimals_from_mcse([0.0408, 52.78, 0.0048, 224.0, 0.0, np.nan, -1.0, np.inf])
    assert d.tolist() == [3, 0, 4, 0, -2, -2, -2, -2]
    assert format_fixed(26.4836, 3) == "26.484" and format_fixed(0.0408, 3) == "0.041"
    assert format_fixed(17043.8645, 0) == "17,044" and format_fixed(52.7835, 0) == "53"


@settings(max_examples=200, derandomize=True)
@given(st.floats(min_value=1e-7, max_value=1e7, allow_nan=False))
def test_the_mcse_keeps_two_significant_digits(mcse):
    d = int(decimals_from_mcse([mcse])[0])
    shown = float(format_fixed(mcse, d).replace(",", ""))
    digits = f"{shown:.15e}"  # the shown value has at most two significant digits
    mantissa = digits.split("e")[0].replace(".", "").rstrip("0")
    if d < 8:  # not clipped
        assert 1 <= len(mantissa) <= 2 or shown >= 100  # integers >= 100 show all their digits
        assert math.isclose(shown, mcse, rel_tol=0.06)  # two significant digits: within 5% (+ rounding)


def test_column_decimals_one_quantity_and_mixed_quantities():
    assert column_decimals(np.array([26.48, 13.5, 2.9])) == 3  # five significant figures of 26.48
    assert column_decimals(np.array([32895.5, 17043.9])) == 0
    assert column_decimals(np.array([0.5, 0.25, 0.1])) == 5
    assert column_decimals(np.array([1, 2, 3])) == 0
    assert column_decimals(np.array([0.0, np.nan])) == 0
    assert column_decimals(np.array([1e16, 3.0])) == -1
    mixed = column_decimals(np.array([26.48, 32895.5, 0.0, np.nan]))
    assert isinstance(mixed, np.ndarray) and mixed.tolist() == [3, 0, 0, 0]


@pytest.mark.parametrize("value, decimals, text", [
    (1234567.891, 2, "1,234,567.89"), (-0.0004, 3, "0.000"), (-1.5, 1, "-1.5"), (None, 2, ""),
    (float("nan"), 2, ""), (float("inf"), 2, "∞"), (float("-inf"), 2, "−∞"), (12345, 3, "12,345"),
    (1.23456e-8, -1, "1.235e-08"),
])
def test_format_fixed(value, decimals, text):
    assert format_fixed(value, decimals) == text
