"""Rounding a result and its expanded uncertainty for a report: JCGM 100:2008 (GUM) 7.2 worked examples."""

from __future__ import annotations

from decimal import Decimal

import pytest

from fixture.model.rounding import decision_place, round_result, significant_place
from fixture.reporting.formatting import format_measurement, format_plain


def test_gum_7_2_2_example_keeps_the_mass_to_the_uncertainty_s_last_digit() -> None:
    # GUM 7.2.2 (from memory of the text): "ms = 100,021 47 g with (a combined standard uncertainty)
    # uc = 0,35 mg". The uncertainty's last digit is 0.01 mg = 1e-5 g: the mass keeps five decimals.
    r = round_result(100.02147, 0.00035)
    assert (r.value, r.uncertainty, r.place) == (Decimal("100.02147"), Decimal("0.00035"), -5)
    text = format_measurement(100.02147, "g", uncertainty=0.00035)
    assert (text.reading, text.uncertainty) == ("100.02147 g", "0.35 mg")


def test_gum_7_2_4_example_expanded_uncertainty_with_k_2_26() -> None:
    # GUM 7.2.4 (from memory): "ms = (100,021 47 ± 0,000 79) g ... U = k uc with uc = 0,35 mg and
    # k = 2,26 based on the t-distribution for nu = 9 degrees of freedom". 2.26 x 0.35 mg = 0.791 mg.
    r = round_result(100.02147, 2.26 * 0.00035)
    assert (r.value, r.uncertainty) == (Decimal("100.02147"), Decimal("0.00079"))


def test_gum_7_2_6_examples_round_the_estimate_to_the_uncertainty_s_place() -> None:
    # GUM 7.2.6 (from memory): "if y = 10,057 62 Ω with uc(y) = 27 mΩ, y should be rounded to 10,058 Ω".
    r = round_result(10.05762, 0.027)
    assert (r.value, r.uncertainty) == (Decimal("10.058"), Decimal("0.027"))
    assert format_measurement(10.05762, "ohm", uncertainty=0.027).reading == "10.058 Ω"
    # GUM 7.2.6: "a value such as u(xi) = 28,05 kHz should be rounded down to 28 kHz".
    assert round_result(1.0e6, 28.05e3).uncertainty == Decimal("2.8E+4")
    assert format_measurement(1.0e6, "Hz", uncertainty=28.05e3).uncertainty == "28 kHz"
    # GUM 7.2.6 says uc(y) = 10,47 mΩ "might be rounded up to 11 mΩ"; knobline rounds to the nearest
    # (fixture/model/rounding.py says why), so it prints 10 mΩ, still two significant digits.
    assert format_measurement(1.0, "ohm", uncertainty=0.01047).uncertainty == "10 mΩ"


def test_ties_round_half_to_even() -> None:
    # ISO 80000-1:2009 Annex B, rule B (from memory): a dropped digit of exactly 5 rounds to the even
    # neighbour; Python's decimal.ROUND_HALF_EVEN is the same rule (IEEE 754 roundTiesToEven).
    assert round_result(1.0, 0.125).uncertainty == Decimal("0.12")
    assert round_result(1.0, 0.135).uncertainty == Decimal("0.14")


def test_a_carry_into_a_new_digit_keeps_two_significant_digits() -> None:
    # 0.0996 to two significant digits is 0.10 (not 0.100): GUM 7.2.6 "at most two significant digits".
    assert significant_place(Decimal("0.0996"), 2) == -2
    r = round_result(1.23456, 0.0996)
    assert (r.value, r.uncertainty) == (Decimal("1.23"), Decimal("0.10"))


def test_no_float_noise_survives_and_percent_takes_no_prefix() -> None:
    # 0.1 + 0.2 is 0.30000000000000004 in binary64 (IEEE 754); printed at any sane place it is 0.3.
    assert format_plain(0.1 + 0.2, "V") == "300 mV"
    text = format_measurement(99.5, "%", uncertainty=0.012, acceptance=(None, 100.00000000000001))
    assert text.acceptance == "≤ 100.000 %"
    # a percent never takes an SI prefix (common practice, no source): 0.4 % is "0.4 %", never "400 m%"
    assert format_plain(0.4, "%") == "0.4 %"
    assert format_measurement(0.4, "%", uncertainty=0.0025).reading == "0.4000 %"


def test_reading_and_u_each_take_their_own_prefix_at_u_s_place() -> None:
    # SI Brochure 9th ed. table 7 (m = 1e-3, µ = 1e-6, n = 1e-9); the choice of one prefix per value,
    # never one that would print a trailing zero before U's last digit, is this project's convention.
    text = format_measurement(290.222445738, "Hz", uncertainty=0.000317195)
    assert (text.reading, text.uncertainty) == ("290.22245 Hz", "0.32 mHz")
    text = format_measurement(3.44563183e-3, "s", uncertainty=4.4513e-9)
    assert (text.reading, text.uncertainty) == ("3.4456318 ms", "4.5 ns")


def test_a_limit_never_prints_equal_to_a_reading_on_its_other_side() -> None:
    # Common practice, no source: at U = 0.012 % both 100.0004 and 100.0003 read 100.000; one digit
    # more is taken for the row so the reader sees the reading lies beyond its limit.
    assert decision_place(100.0004, [100.0003], -3) == -4
    text = format_measurement(100.0004, "%", uncertainty=0.012, acceptance=(None, 100.0003))
    assert (text.reading, text.acceptance) == ("100.0004 %", "≤ 100.0003 %")
    # limits that read apart already keep the reading's place; an exact limit drops its zeros
    text = format_measurement(290.222445738, "Hz", uncertainty=0.000317, acceptance=(225.000317, 309.999683),
                              tolerance=(225.0, 310.0))
    assert (text.acceptance, text.tolerance) == ("225.00032 to 309.99968 Hz", "225 to 310 Hz")


def test_negative_uncertainty_is_refused() -> None:
    with pytest.raises(ValueError):
        round_result(1.0, -0.1)
