"""How the renderers write numbers: GUM 7.2.6 rounding and the significant-digit formats."""

from __future__ import annotations

import random
from decimal import Decimal

import pytest
from uncertainties import ufloat

from validate.report.numbers import (
    DASH,
    MISSING,
    compact,
    decimals_of,
    dof,
    gum_decimals,
    gum_pair,
    interval,
    num,
    pct,
    sig,
    tolerance_decimals,
)

# --------------------------------------------------------------------------
# GUM (JCGM 100:2008) 7.2.6: U or u_c to at most two significant digits, y to the same place


def test_gum_worked_example_standard_uncertainty():
    # GUM 7.2.2, example (from memory): m_S = 100.021 47 g with u_c = 0.35 mg,
    # reported as m_S = 100.021 47(35) g
    assert gum_pair(100.02147, 0.00035) == ("100.02147", "0.00035")


def test_gum_worked_example_expanded_uncertainty():
    # GUM 7.2.4, example (from memory): the same mass with U = 0.79 mg (k = 2.26),
    # reported as m_S = (100.021 47 +/- 0.000 79) g
    assert gum_pair(100.02147, 0.00079) == ("100.02147", "0.00079")


def test_gum_rounds_the_estimate_to_the_place_of_the_uncertainty():
    # GUM 7.2.6 (from memory): y = 10.057 62 ohm with u_c(y) = 27 mohm is rounded to 10.058 ohm
    assert gum_pair(10.05762, 0.027) == ("10.058", "0.027")


def test_concise_form_agrees_with_the_uncertainties_library():
    # the `uncertainties` package (general reference library) writes the GUM 7.2.2 concise form
    value, u = gum_pair(100.02147, 0.00035)
    assert f"{ufloat(100.02147, 0.00035):.2uS}" == f"{value}({u.lstrip('0.')})"


def test_rounding_up_to_the_next_decade_keeps_two_significant_digits():
    # 0.0996 to two significant digits is 0.10 (the rule of GUM 7.2.6 applied; common practice)
    assert gum_pair(0.5, 0.0996) == ("0.50", "0.10")
    assert gum_pair(1.23456, 9.96e-6) == ("1.234560", "0.000010")
    assert gum_decimals(1.23456, 9.96e-6) == 6


def test_large_uncertainties_round_to_tens_and_more():
    # two significant digits of U also left of the decimal point (GUM 7.2.6)
    assert gum_pair(881.67, 42.58) == ("882", "43")
    assert gum_pair(4276753.6, 112363.3) == ("4280000", "110000")
    assert gum_decimals(881.67, 42.58) == 0


def test_the_uncertainties_library_keeps_every_integer_digit_of_a_large_uncertainty():
    # why numbers.py does its own rounding: in fixed-point form the library does not round
    # an uncertainty of 100 or more to two significant digits
    assert f"{ufloat(881600.0, 42584.0):.2uf}" == "881600+/-42584"
    assert gum_pair(881600.0, 42584.0) == ("882000", "43000")


def test_a_trailing_five_of_the_uncertainty_rounds_to_even():
    # ISO 80000-1:2009, annex B, rule B (from memory): a dropped 5 leaves an even last digit
    assert gum_pair(1.0, 0.0145)[1] == "0.014"
    assert gum_pair(1.0, 0.0235)[1] == "0.024"
    # why numbers.py does its own rounding: the `uncertainties` package rounds this 5 up
    assert f"{ufloat(1.0, 0.0145):.2uf}" == "1.000+/-0.015"


def test_negative_values_and_missing_numbers():
    assert gum_pair(-0.123456, 0.0027) == ("-0.1235", "0.0027")
    assert gum_pair(None, 0.1) == (DASH, DASH)
    assert gum_pair(1.0, float("nan"), missing="n/a") == ("n/a", "n/a")
    assert gum_pair(1.0, None) == (DASH, DASH)


def test_zero_uncertainty_leaves_six_significant_digits():
    assert gum_pair(0.123456789, 0.0) == ("0.123457", "0")


def _is_tie(u: float) -> bool:
    """True when the third significant digit onwards of u is exactly 5 (a rounding tie)."""
    digits = Decimal(repr(u)).as_tuple().digits
    return len(digits) == 3 and digits[2] == 5


def test_agrees_with_the_uncertainties_library_below_100():
    # general reference library: '{:.2uf}' rounds u to two significant digits and the value to
    # the same place; the two must agree wherever the library applies (u < 100, no tie)
    rng = random.Random(20240611)
    compared = 0
    for _ in range(3000):
        u = 10 ** rng.uniform(-7, 1.99)
        value = rng.choice((-1, 1)) * 10 ** rng.uniform(-6, 6)
        if _is_tie(u):
            continue
        assert gum_pair(value, u) == tuple(f"{ufloat(value, u):.2uf}".split("+/-")), (value, u)
        compared += 1
    assert compared > 2900


# --------------------------------------------------------------------------
# decimal places, intervals


def test_decimals_of_plain_numbers():
    assert decimals_of("0.0027") == 4
    assert decimals_of("43") == 0


def test_tolerance_decimals_follow_the_numerical_tolerance():
    # JCGM 101:2008 7.9.2: delta = 1/2 x 10^l; the interval ends are shown to the place of delta
    assert tolerance_decimals(5e-4, fallback=9) == 4
    assert tolerance_decimals(0.5, fallback=9) == 1
    assert tolerance_decimals(None, fallback=3) == 3
    assert tolerance_decimals(0.0, fallback=3) == 3


def test_interval_text():
    assert interval([0.11115, 0.116494], 5) == "[0.11115, 0.11649]"
    assert interval([1.0, None], 2) == DASH
    assert interval(None, 2, missing="-") == "-"


# --------------------------------------------------------------------------
# significant digits, percentages, degrees of freedom


def test_num_plain_notation_without_trailing_zeros():
    assert num(0.082481234, 4) == "0.08248"
    assert num(0.5000) == "0.5"
    assert num(123456.7, 4) == "123457"
    assert num(1.5e-7, 3) == "1.5e-7"
    assert num(None) == DASH
    assert num(float("inf")) == "∞"
    assert num("text") == "text"


def test_num_groups_digits_of_large_integers():
    # ISO 80000-1:2009, 7.3.1 (from memory): digits in groups of three separated by a small space
    assert num(1_000_000) == "1\u00a0000\u00a0000"
    assert num(9999) == "9999"


def test_sig_keeps_trailing_zeros():
    assert sig(0.2, 4) == "0.2000"
    assert sig(12.0, 3) == "12.0"
    assert sig(None) == DASH


def test_compact_is_the_general_format():
    assert compact(0.082481234) == "0.08248"
    assert compact(1.2345e-5, 3) == "1.23e-05"
    assert compact(None) == MISSING


def test_percentages():
    assert pct(0.7422474659977819) == "74.2 %"
    assert pct(0.95, 0) == "95 %"
    assert pct(0.00001) == "< 0.1 %"
    assert pct(None) == DASH


@pytest.mark.parametrize("value, text", [(None, "∞"), (float("inf"), "∞"), (22.17, "22"), (19, "19")])
def test_degrees_of_freedom(value, text):
    # GUM G.4: a Type B input without stated reliability has infinite degrees of freedom
    assert dof(value) == text
