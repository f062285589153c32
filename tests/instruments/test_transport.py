"""Transports: the scripted double behaves like an instrument; VISA errors become typed station faults."""

from __future__ import annotations

import pytest
from pyvisa.constants import StatusCode
from pyvisa.errors import VisaIOError

from fixture.errors import ConnectionLost, InstrumentFault, InstrumentTimeout, StationFault, UnparsableReply
from fixture.instruments import Message, RecordingTransport, ScriptedTransport, translate_visa_error

RESOURCE = "TCPIP0::10.0.0.7::inst0::INSTR"


def test_scripted_transport_answers_queries_and_ignores_silent_writes() -> None:
    t = ScriptedTransport(lambda text: "1" if text == "*OPC?" else None)
    t.write("*RST")
    assert t.query("*OPC?") == "1"
    assert t.sent == ["*RST", "*OPC?"]


def test_scripted_read_with_nothing_queued_times_out() -> None:
    t = ScriptedTransport(lambda text: None, timeout_s=0.5)
    with pytest.raises(InstrumentTimeout, match="no reply within 0.5 s"):
        t.query("FETC:FREQ?")


def test_scripted_binary_reply_is_returned_raw_with_the_terminator() -> None:
    t = ScriptedTransport(lambda text: b"#14\x00\x01\xfe\xff")
    assert t.query_block("TRAC:DATA? CH1") == b"#14\x00\x01\xfe\xff\n"


def test_scripted_non_ascii_text_reply_is_unparsable() -> None:
    t = ScriptedTransport(lambda text: b"\xff\xfe")
    with pytest.raises(UnparsableReply):
        t.query("*IDN?")


def test_clear_drops_a_late_reply() -> None:
    t = ScriptedTransport(lambda text: "late")
    t.write("*IDN?")
    t.clear()
    with pytest.raises(InstrumentTimeout):
        t.read()


def test_closed_scripted_transport_has_lost_its_connection() -> None:
    t = ScriptedTransport(lambda text: None)
    t.close()
    with pytest.raises(ConnectionLost):
        t.write("*RST")


def test_recording_transport_keeps_the_traffic_in_order() -> None:
    t = RecordingTransport(ScriptedTransport(lambda text: "+0,\"No error\"" if text.endswith("?") else None))
    t.write("*CLS")
    t.query("SYST:ERR?")
    t.clear()
    assert t.traffic == [Message("sent", "*CLS"), Message("sent", "SYST:ERR?"),
                         Message("received", '+0,"No error"'), Message("clear", "")]
    assert t.sent == ["*CLS", "SYST:ERR?"]


def test_recording_transport_passes_the_timeout_through() -> None:
    inner = ScriptedTransport(lambda text: None, timeout_s=2.0)
    t = RecordingTransport(inner)
    t.timeout_s = 5.0
    assert inner.timeout_s == 5.0


# The status codes and their abbreviations are pyvisa's own table of VISA (VPP-4.3) completion codes.
@pytest.mark.parametrize("code, fault", [
    (StatusCode.error_timeout, InstrumentTimeout),
    (StatusCode.error_connection_lost, ConnectionLost),
    (StatusCode.error_invalid_object, ConnectionLost),
    (StatusCode.error_resource_not_found, ConnectionLost),
    (StatusCode.error_io, InstrumentFault),
    (StatusCode.error_resource_busy, InstrumentFault),
])
def test_visa_errors_become_typed_station_faults(code: StatusCode, fault: type[InstrumentFault]) -> None:
    exc = translate_visa_error(VisaIOError(code), RESOURCE)
    assert type(exc) is fault
    assert isinstance(exc, StationFault)
    assert RESOURCE in exc.message
    assert str(int(code)) in exc.message                 # the VISA error code survives
    assert VisaIOError(code).abbreviation in exc.message  # e.g. VI_ERROR_TMO
