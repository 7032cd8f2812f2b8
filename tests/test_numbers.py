"""comparo.base.numbers.number, the one number formatter, against Python's own format
specification (the ``g`` presentation type of the Format Specification Mini-Language, Python
documentation, "string — Common string operations") and the report's plain style."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from comparo.base.numbers import number


@given(st.floats(allow_nan=False, allow_infinity=False), st.integers(1, 8))
def test_short_style_is_python_g_format(v, digits):
    assert number(v, digits) == format(v, f".{digits}g")


@pytest.mark.parametrize("v", [None, math.nan, math.inf, -math.inf, np.nan, "abc"])
def test_missing_values_read_as_the_missing_text(v):
    assert number(v) == "n/a"
    assert number(v, 5, "-") == "-"
    assert number(v, plain=True) == "n/a"


@pytest.mark.parametrize(
    ("v", "digits", "text"),
    [
        (0.25153, 4, "0.2515"),  # fixed point, 4 significant figures
        (1.5e-05, 4, "1.5e-5"),  # below 1e-4: exponent, trailing zeros dropped
        (123456, 4, "123456"),  # integers in full
        (123456.0, 4, "123456"),  # a float that is an integer >= 10^(digits-1)
        (2.5e7, 4, "25000000"),  # integer-valued floats in full too
        (1.23456e-7, 4, "1.235e-7"),
        (True, 4, "yes"),
        (np.bool_(False), 4, "no"),
        (np.int64(7), 4, "7"),
        (0.0, 4, "0"),
        (3.14159, 3, "3.14"),
    ],
)
def test_plain_style_of_the_report(v, digits, text):
    assert number(v, digits, plain=True) == text


def test_one_log_transform_against_numpy_and_back():
    """comparo.base.scales against numpy's log10/log/power/exp, and the first-order rule
    u(log10 v) = u / (v ln 10) (JCGM 100:2008, GUM, eq. 10 with one input)."""
    from comparo.base.scales import from_scale, se_on_scale, to_scale

    v = np.array([0.5, 1.0, 20.0, 3.0e4])
    np.testing.assert_array_equal(to_scale(v, "10"), np.log10(v))
    np.testing.assert_array_equal(to_scale(v, "e"), np.log(v))
    np.testing.assert_array_equal(to_scale(v, "none"), v)
    for log in ("10", "e", "none"):
        np.testing.assert_allclose(from_scale(to_scale(v, log), log), v, rtol=1e-14)
    assert np.isnan(to_scale([-1.0], "10")[0]) and to_scale([0.0], "e")[0] == -np.inf
    np.testing.assert_allclose(se_on_scale(0.1, 2.0, "10"), 0.1 / (2.0 * np.log(10.0)))
