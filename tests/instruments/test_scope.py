"""The scope driver on a scripted instrument: settings sent, ASCII and binary records, faults, events."""

from __future__ import annotations

import numpy as np
import pytest

from fixture.errors import ImpossibleReading, InstrumentErrorQueue, OverflowReading, UnparsableReply, UserInputError
from fixture.instruments import Scope, ScopeSettings

from .fakes import FakeInstrument, scripted_session

PROFILE = "tessaly-yqs47"
SETTINGS = dict(sample_rate_hz=1e6, record_length=4, range_v=8.0, t0_s=-1e-6)


def scope(replies=None, errors=()) -> tuple[Scope, list[str]]:
    base = {"*OPC?": "1", "SENS:SWE:TINT?": "1.000000E-06", "SENS:SWE:OFFS:TIME?": "-1.000000E-06"}
    session, transport = scripted_session(PROFILE, FakeInstrument({**base, **(replies or {})}, errors))
    return Scope(session), transport.sent


def test_configure_sends_timebase_record_vertical_trigger_and_format() -> None:
    # SENSe:SWEep:TINTerval/POINts/OFFSet:TIME, SENSe:VOLTage:RANGe, TRIGger, FORMat:DATA (SCPI-1999, from memory).
    s, sent = scope()
    s.configure(ScopeSettings(**SETTINGS, offset_v=2.5, trigger_level_v=1.25, trigger_slope="falling"))
    assert sent == ["SENS:SWE:TINT 1.000000E-06", "SENS:SWE:POIN 4", "SENS:SWE:OFFS:TIME -1.000000E-06",
                    "SENS1:VOLT:RANG:PTP 8.0000E+00", "SENS1:VOLT:RANG:OFFS 2.5000E+00", "TRIG:SOUR CH1",
                    "TRIG:LEV 1.2500E+00", "TRIG:SLOP NEG", "FORM:DATA ASC", "SYST:ERR?"]


def test_ascii_record_carries_volts_and_the_timebase_read_back() -> None:
    s, sent = scope({"TRAC:DATA? CH1": "0.0,3.3,3.3,0.0"})
    s.configure(ScopeSettings(**SETTINGS))
    sent.clear()
    record = s.acquire()
    assert sent == ["INIT", "*OPC?", "TRAC:DATA? CH1", "SENS:SWE:TINT?", "SENS:SWE:OFFS:TIME?"]
    assert record.volts.tolist() == [0.0, 3.3, 3.3, 0.0]
    assert record.sample_interval_s == 1e-6 and record.t0_s == -1e-6


def test_int16_block_record_is_scaled_by_the_preamble() -> None:
    # Codes 0, 256, -256 big-endian (00 00, 01 00, FF 00; two's complement by hand), scaled by the profile's rule
    # volts = (code - y_offset_code) * y_multiplier_v + y_zero_v with 0.01 V/code, offset 0, zero 0.5 V:
    # 0.5, 3.06, -2.06 V (arithmetic by hand).
    block = b"#16" + bytes([0x00, 0x00, 0x01, 0x00, 0xFF, 0x00])
    s, sent = scope({"TRAC:PRE? CH1": "3,2.0E-06,-5.0E-06,1.0E-02,0,5.0E-01", "TRAC:DATA? CH1": block})
    s.configure(ScopeSettings(**{**SETTINGS, "record_length": 3}, encoding="int16"))
    assert "FORM:DATA INT,16" in sent
    record = s.acquire()
    assert np.allclose(record.volts, [0.5, 3.06, -2.06], rtol=0, atol=1e-12)
    assert record.sample_interval_s == 2e-6 and record.t0_s == -5e-6


def test_float32_block_record() -> None:
    # IEEE 754 binary32 big-endian: 1.0 = 3F800000, -2.5 = C0200000 (from memory).
    block = b"#18" + bytes.fromhex("3F800000C0200000")
    s, _ = scope({"TRAC:PRE? CH1": "2,1.0E-06,0,1,0,0", "TRAC:DATA? CH1": block})
    s.configure(ScopeSettings(**SETTINGS, encoding="float32"))
    assert s.acquire().volts.tolist() == [1.0, -2.5]


def test_block_shorter_than_its_preamble_says_is_unparsable() -> None:
    s, _ = scope({"TRAC:PRE? CH1": "4,1.0E-06,0,1,0,0", "TRAC:DATA? CH1": b"#14" + bytes(4)})
    s.configure(ScopeSettings(**SETTINGS, encoding="int16"))
    with pytest.raises(UnparsableReply, match="announces 4 samples, the block holds 2"):
        s.acquire()


def test_truncated_block_is_unparsable_after_retries() -> None:
    s, sent = scope({"TRAC:PRE? CH1": "2,1.0E-06,0,1,0,0", "TRAC:DATA? CH1": b"#210" + bytes(4)})
    s.configure(ScopeSettings(**SETTINGS, encoding="int16"))
    with pytest.raises(UnparsableReply, match="announces 10 bytes"):
        s.acquire()
    assert sent.count("TRAC:DATA? CH1") == 3      # idempotent: retried twice


def test_preamble_with_the_wrong_field_count_is_unparsable() -> None:
    s, _ = scope({"TRAC:PRE? CH1": "2,1.0E-06", "TRAC:DATA? CH1": b"#14" + bytes(4)})
    s.configure(ScopeSettings(**SETTINGS, encoding="int16"))
    with pytest.raises(UnparsableReply, match="expected 6 preamble fields"):
        s.acquire()


def test_ascii_record_with_the_overflow_value_is_an_impossible_reading_not_a_missing_signal() -> None:
    # 9.91E37 is SCPI's "not a number" (SCPI-1999 Vol 1 ch. 7, from memory): no sample voltage, and not
    # an OverflowReading either, which a runner could take for the unit's missing signal.
    s, _ = scope({"TRAC:DATA? CH1": "9.91E37,9.91E37"})
    s.configure(ScopeSettings(**SETTINGS))
    with pytest.raises(ImpossibleReading, match=r"TRAC:DATA\? CH1") as caught:
        s.acquire()
    assert not isinstance(caught.value, OverflowReading)
    assert (caught.value.role, caught.value.command) == ("scope", "TRAC:DATA? CH1")


def test_one_sample_is_not_a_record() -> None:
    s, _ = scope({"TRAC:DATA? CH1": "1.0"})
    s.configure(ScopeSettings(**SETTINGS))
    with pytest.raises(UnparsableReply, match="at least 2 samples"):
        s.acquire()


def test_scope_refusing_a_setting_is_an_error_queue_fault() -> None:
    s, _ = scope(errors=('-100,"Command error"',))
    with pytest.raises(InstrumentErrorQueue):
        s.configure(ScopeSettings(**SETTINGS))


def test_events_carry_the_settings_before_the_record_is_fetched() -> None:
    order: list[str] = []
    s, _ = scope({"TRAC:DATA? CH1": lambda: order.append("fetch") or "0,1"})
    s.events.subscribe(lambda e: order.append(e.name))
    got = []
    s.events.subscribe(got.append)
    s.configure(ScopeSettings(**SETTINGS))
    s.acquire()
    assert order == ["configured", "before_fetch", "fetch"]
    assert got[1].info["sample_interval_s"] == 1e-6 and got[1].info["record_length"] == 4


@pytest.mark.parametrize("kwargs, complaint", [
    ({"sample_rate_hz": 0}, "sample rate"),
    ({"record_length": 1}, "record length"),
    ({"range_v": -1}, "vertical range"),
    ({"channel": 0}, "channel"),
    ({"encoding": "int32"}, "encoding"),
    ({"trigger_slope": "either"}, "slope"),
])
def test_bad_scope_settings_are_user_input_errors(kwargs, complaint) -> None:
    with pytest.raises(UserInputError, match=complaint):
        ScopeSettings(**{**SETTINGS, **kwargs})
