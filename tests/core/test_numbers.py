"""How numbers are written for people (service/core/numbers.py), rule by rule as its docstring
states them: 4 significant digits with trailing zeros, plain notation from 1e-4 up to 1e15
without thousands separators, compact exponents outside, whole numbers whole, zero as 0,
p-values below 1e-4 as "< 0.0001", transform parameters without trailing zeros.

Each expected string is written by hand from the rule (source: product rule for numbers);
Python's own general format (".4g") is the independent reference for the digits.
"""

from __future__ import annotations

import math

import pytest
from service.core.numbers import count_of, failure_text, fmt, fmt_p, fmt_param, p_is


def test_numbers_rule():
    # source: product rule (one number format: 4 significant digits, trailing zeros kept,
    # plain notation without thousands separators, p-values below 1e-4 as "< 0.0001")
    assert fmt(-15934.2) == "-15930"  # never -1.593e+04
    assert fmt(0.745) == "0.7450" and fmt(0.7244) == "0.7244"
    assert fmt(1234567.8) == "1235000"
    assert fmt(0.0) == "0" and fmt(1e-20) == "1e-20"
    assert fmt(None) == "undefined" and fmt(float("nan")) == "undefined"
    assert fmt_p(3e-236) == "< 0.0001" and fmt_p(0.0312) == "0.031"
    assert p_is(1e-9) == "p < 0.0001" and p_is(0.2) == "p = 0.20"


@pytest.mark.parametrize(
    "v, text",
    [
        (0.745, "0.7450"),  # trailing zeros kept
        (1.0 / 3.0, "0.3333"),
        (-2.0 / 3.0, "-0.6667"),
        (0.0001, "0.0001000"),  # the low end of plain notation
        (0.00009999, "9.999e-5"),  # below it: compact exponent, no '+0', no padding zeros
        (1.5e-5, "1.5e-5"),
        (1e-12, "1e-12"),
        (-3.25e-7, "-3.25e-7"),
        (123456.0, "123500"),  # whole numbers are rounded too, and written without ".0"
        (123456.7, "123500"),
        (999999999999999.0, "1e15"),  # rounds to 1e15: exponent
        (2.5e15, "2.5e15"),  # at or above 1e15: exponent
        (0.99999, "1.000"),  # rounded first
        (300.0, "300"),
        (-0.0, "0"),
        (math.inf, "undefined"),
    ],
)
def test_fmt_follows_the_documented_rule(v, text):
    assert fmt(v) == text


@pytest.mark.parametrize("v", [0.012345, 7.891e-3, 42.42, 1234.5678, 98765.4321, 0.5])
def test_plain_digits_agree_with_python_general_format(v):
    # source: Python's general format ".4g" rounds to the same 4 significant digits (it drops
    # trailing zeros and switches to exponents earlier, so the values are compared)
    assert float(fmt(v)) == float(f"{v:.4g}")
    if abs(v) < 1000:  # below 1000 there are exactly four digits, zeros kept
        assert len(fmt(v).lstrip("-0.").replace(".", "")) == 4


def test_no_thousands_separator_and_no_plus_exponent_ever():
    for v in (1234.5, -15934.2, 1e14 + 0.5, 7.7e20, 3.3e-9):
        assert "," not in fmt(v) and "e+" not in fmt(v) and "E" not in fmt(v)


def test_significant_digits_can_be_chosen():
    assert fmt(3.14159265, sig=6) == "3.14159"
    assert fmt(0.5, sig=2) == "0.50"


def test_parameters_drop_trailing_zeros():
    assert fmt_param(0.5) == "0.5" and fmt_param(-0.0050614) == "-0.005061"
    assert fmt_param(2.0) == "2" and fmt_param(1.25e-6) == "1.25e-6"


def test_p_values():
    assert fmt_p(0.0001) == "0.00010"  # at the floor: not yet "< 0.0001"
    assert fmt_p(0.99999) == "1.0" and fmt_p(None) == "undefined"
    assert p_is(0.05) == "p = 0.050"


def test_counts_and_failure_groups():
    assert count_of(1, "candidate") == "1 candidate"
    assert count_of(0, "candidate") == "0 candidates"
    assert count_of(2, "family", "families") == "2 families"
    assert (
        failure_text("log needs positive values", 3, 1) == "3 candidates: log needs positive values"
    )
    assert (
        failure_text("the design is rank-deficient", 30, 4)
        == "30 candidates, for example: the design is rank-deficient"
    )
