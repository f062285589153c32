"""SCPI numbers, the overflow value, error-queue entries and *IDN? replies."""

from __future__ import annotations

import numpy as np
import pytest

from fixture.errors import ImpossibleReading, OverflowReading, UnparsableReply
from fixture.instruments.replies import Identity, parse_error_entry, parse_int, parse_number, parse_numbers


@pytest.mark.parametrize("reply, value", [
    ("+1.000000000000E+03", 1000.0),   # NR3 (IEEE 488.2 §7.7.2, from memory)
    ("-12.5", -12.5),                  # NR2
    ("42", 42.0),                      # NR1
    (" 1.5e-3\n", 1.5e-3),
    (".5", 0.5),
])
def test_scpi_numbers_parse(reply: str, value: float) -> None:
    assert parse_number(reply) == value


@pytest.mark.parametrize("reply", ["9.91E37", "+9.910000000000E+37", "9.91e+37"])
def test_scpi_not_a_number_is_an_overflow_reading(reply: str) -> None:
    # SCPI-1999 Vol 1 ch. 7: 9.91E37 is returned when a reading could not be taken (from memory).
    with pytest.raises(OverflowReading, match="not a number"):
        parse_number(reply)


@pytest.mark.parametrize("reply, kind", [("9.9E37", r"\+infinity"), ("-9.9E37", "-infinity")])
def test_scpi_infinities_are_overflow_readings(reply: str, kind: str) -> None:
    # SCPI-1999 Vol 1 ch. 7: +9.9E37 and -9.9E37 stand for plus and minus infinity (from memory).
    with pytest.raises(OverflowReading, match=kind):
        parse_number(reply)


def test_a_large_ordinary_number_is_not_an_overflow() -> None:
    assert parse_number("9.8E37") == 9.8e37


@pytest.mark.parametrize("reply", ["nan", "inf", "-Infinity", "1_000", "1.0 V", "", "0x10", "1,2"])
def test_what_python_float_accepts_but_scpi_does_not_is_unparsable(reply: str) -> None:
    with pytest.raises(UnparsableReply):
        parse_number(reply)


@pytest.mark.parametrize("reply", ["1E999", "-1E999", "+1.5E+400"])
def test_a_valid_nr3_number_beyond_a_double_is_an_impossible_reading(reply: str) -> None:
    # IEEE 754 binary64 tops out near 1.8E308 (IEEE 754-2008, from memory); float() makes these +-inf.
    with pytest.raises(ImpossibleReading, match="beyond the range of a number"):
        parse_number(reply)


def test_whole_numbers() -> None:
    assert parse_int("+1") == 1 and parse_int("0\n") == 0
    with pytest.raises(UnparsableReply):
        parse_int("1.0")


def test_ascii_trace_parses_to_an_array() -> None:
    assert np.array_equal(parse_numbers("1.0,-2.5E-01,+3"), [1.0, -0.25, 3.0])


@pytest.mark.parametrize("reply", ["1.0,,2.0", "1.0,abc", "", "1,nan"])
def test_bad_ascii_traces_are_unparsable(reply: str) -> None:
    with pytest.raises(UnparsableReply):
        parse_numbers(reply)


def test_ascii_trace_holding_the_overflow_value_is_an_overflow() -> None:
    with pytest.raises(OverflowReading, match="1 of 3"):
        parse_numbers("0.0,9.91E37,0.0")


def test_error_entries_follow_the_scpi_format() -> None:
    # SCPI-1999 SYSTem:ERRor?: <code>,"<description>"; 0 means empty; -100 is "Command error" (from memory).
    assert parse_error_entry('+0,"No error"').code == 0
    entry = parse_error_entry('-100,"Command error"')
    assert (entry.code, entry.description) == (-100, "Command error")
    assert parse_error_entry('-222,"Data out of range; ""GATE"" 20 s"').description == 'Data out of range; "GATE" 20 s'


@pytest.mark.parametrize("reply", ["No error", "x,\"y\"", ""])
def test_malformed_error_entries_are_unparsable(reply: str) -> None:
    with pytest.raises(UnparsableReply):
        parse_error_entry(reply)


def test_idn_has_four_fields() -> None:
    # IEEE 488.2 §10.14: manufacturer, model, serial number, firmware level (from memory).
    ident = Identity.parse("TESSALY INSTRUMENTS,YQ-C83,TS26A0117,1.4.2\n")
    assert ident == Identity("TESSALY INSTRUMENTS", "YQ-C83", "TS26A0117", "1.4.2")


@pytest.mark.parametrize("reply", ["TESSALY,YQ-C83", "A,B,C,D,E", ",B,C,D", ""])
def test_idn_without_four_fields_is_unparsable(reply: str) -> None:
    with pytest.raises(UnparsableReply):
        Identity.parse(reply)
