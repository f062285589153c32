"""Reading quantities the way they are written on schematics and datasheets."""

from __future__ import annotations

import math

import pytest

from fixture.errors import QuantityError
from fixture.model.quantity import format_si, parse_quantity, parse_relative, parse_tempco, parse_tolerance


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        # SI prefixes: BIPM, The International System of Units (SI Brochure, 9th ed.), table 7.
        ("47n", "F", 47e-9),
        ("100 nF", "F", 100e-9),
        ("22k", "ohm", 22e3),
        ("4.7 kΩ", "ohm", 4.7e3),
        ("10 kohm", "ohm", 10e3),
        ("1M", "ohm", 1e6),
        ("20 mV", "V", 20e-3),
        ("2 us", "s", 2e-6),
        ("2 µs", "s", 2e-6),
        ("12", "V", 12.0),
        ("1e-7", "F", 1e-7),
        # RKM code, IEC 60062 (letter in place of the decimal point; R = ohms), from memory.
        ("4k7", "ohm", 4.7e3),
        ("2R2", "ohm", 2.2),
        ("4n7", "F", 4.7e-9),
        ("1M5", "ohm", 1.5e6),
        # slew rate in the datasheet form V/us
        ("0.5 V/us", "V/s", 0.5e6),
        ("13 V/µs", "V/s", 13e6),
    ],
)
def test_engineering_notation_reads_to_si_base_units(text: str, unit: str, expected: float) -> None:
    assert math.isclose(parse_quantity(text, unit), expected, rel_tol=1e-12)


def test_plain_toml_numbers_are_taken_as_base_units() -> None:
    assert parse_quantity(10000, "ohm") == 10000.0
    assert parse_quantity(1.5e-7, "F") == 1.5e-7


@pytest.mark.parametrize(("text", "unit"), [("47x", "F"), ("4.7 kF", "ohm"), ("ten", "V"), ("2R2", "F"),
                                            ("", "ohm"), (True, "V"), ("inf", "V")])
def test_unreadable_or_wrong_unit_values_say_what_was_expected_and_found(text: object, unit: str) -> None:
    with pytest.raises(QuantityError, match=r"^expected .*, found "):
        parse_quantity(text, unit)


def test_relative_values_need_their_percent_or_ppm_sign() -> None:
    assert parse_relative("1%") == pytest.approx(0.01)
    assert parse_relative("±0.5 %") == pytest.approx(0.005)
    assert parse_relative("50 ppm") == pytest.approx(50e-6)
    with pytest.raises(QuantityError):
        parse_relative("1")


def test_tolerances_are_relative_to_nominal_or_absolute_with_a_unit() -> None:
    assert parse_tolerance("1%", "ohm", 10e3) == pytest.approx(100.0)
    assert parse_tolerance("±50 mV", "V", 1.0) == pytest.approx(0.05)
    with pytest.raises(QuantityError):
        parse_tolerance(5, "ohm", 10e3)  # "5" could mean 5 % or 5 ohms: refuse to guess


def test_temperature_coefficients_read_per_kelvin() -> None:
    assert parse_tempco("100 ppm/K") == pytest.approx(1e-4)
    assert parse_tempco("-0.02 %/°C") == pytest.approx(-2e-4)
    assert parse_tempco(0) == 0.0
    with pytest.raises(QuantityError):
        parse_tempco("100 ppm")


def test_format_si_uses_a_prefix_and_significant_figures() -> None:
    assert format_si(4700, "Ω") == "4.700 kΩ"
    assert format_si(1e-7, "F") == "100.0 nF"
    assert format_si(0.00123, "s") == "1.230 ms"
    assert format_si(0, "V") == "0 V"


def test_format_si_puts_no_prefix_on_percent_or_ppm() -> None:
    # Percent and ppm are plain numbers: an SI prefix on them (400 m%) is not used
    # (SI Brochure, 9th ed., 5.4.7, from memory); significant figures as for any unit.
    assert format_si(0.4, "%") == "0.4000 %"
    assert format_si(49.2249, "%") == "49.22 %"
    assert format_si(2500, "ppm", 3) == "2500 ppm"
    assert format_si(0.4, "V") == "400.0 mV"
