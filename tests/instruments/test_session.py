"""Sessions: retries only where safe and bounded, the error queue, *IDN? checks, faults named, lifecycle."""

from __future__ import annotations

import pytest
import pyvisa

from fixture.errors import (
    ConnectionLost,
    InstrumentErrorQueue,
    InstrumentTimeout,
    OverflowReading,
    SoftwareFault,
    UnparsableReply,
    UserInputError,
    WrongInstrument,
)
from fixture.instruments import SessionState
from fixture.instruments.session import MAX_ERROR_READS

from .fakes import IDN, FakeInstrument, scripted_session, sequence

COUNTER = "tessaly-yqc83"


def test_flaky_idempotent_query_succeeds_on_retry_within_the_bound() -> None:
    # FETCh? only returns the last reading, so asking again is safe (SCPI-1999, from memory).
    fake = FakeInstrument({"FETC:PER?": sequence(None, None, "1.0E-03")})  # two timeouts, then a reply
    session, transport = scripted_session(COUNTER, fake, max_retries=2)
    assert session.query_float("fetch_period") == 1.0e-3
    assert transport.sent == ["FETC:PER?"] * 3
    assert session.retries == 2


def test_retry_bound_is_respected_and_named_in_the_fault() -> None:
    fake = FakeInstrument({"FETC:PER?": sequence(None, None, None, "1.0E-03")})
    session, transport = scripted_session(COUNTER, fake, max_retries=2)
    with pytest.raises(InstrumentTimeout, match="after 3 attempts"):
        session.query_float("fetch_period")
    assert transport.sent == ["FETC:PER?"] * 3


def test_retries_can_be_switched_off() -> None:
    fake = FakeInstrument({"FETC:PER?": sequence(None, "1.0E-03")})
    session, transport = scripted_session(COUNTER, fake, max_retries=0)
    with pytest.raises(InstrumentTimeout):
        session.query_float("fetch_period")
    assert transport.sent == ["FETC:PER?"]


def test_garbled_reply_to_an_idempotent_query_is_retried() -> None:
    fake = FakeInstrument({"*IDN?": sequence("TESSALY INSTRU", IDN[COUNTER])})
    session, transport = scripted_session(COUNTER, fake)
    assert session.identify().model == "YQ-C83"
    assert transport.sent == ["*IDN?", "*IDN?"]


def test_error_queue_query_is_never_retried() -> None:
    # Each SYSTem:ERRor? read removes an entry (SCPI-1999, from memory): a retry could lose an error.
    session, transport = scripted_session(COUNTER, lambda text: None)
    with pytest.raises(InstrumentTimeout):
        session.read_errors()
    assert transport.sent == ["SYST:ERR?"]


def test_a_write_is_never_retried() -> None:
    def handler(text: str) -> None:
        raise ConnectionLost("TCPIP0::fake::inst0::INSTR: socket closed")

    session, transport = scripted_session(COUNTER, handler)
    with pytest.raises(ConnectionLost):
        session.write("initiate")
    assert transport.sent == ["INIT"]


def test_overflow_is_an_answer_and_not_retried() -> None:
    fake = FakeInstrument({"FETC:FREQ?": "9.91E+37"})
    session, transport = scripted_session(COUNTER, fake)
    with pytest.raises(OverflowReading, match=r"FETC:FREQ\?: .*9.91E\+37"):
        session.query_float("fetch_frequency")
    assert transport.sent == ["FETC:FREQ?"]


def test_lost_connection_is_not_retried() -> None:
    def handler(text: str) -> None:
        raise ConnectionLost("TCPIP0::fake::inst0::INSTR: connection lost")

    session, transport = scripted_session(COUNTER, handler)
    with pytest.raises(ConnectionLost, match=r"counter \(Tessaly Instruments YQ-C83 at TCPIP0::fake::inst0::INSTR\): "
                                             r"FETC:PER\?: connection lost") as caught:
        session.query_float("fetch_period")
    assert (caught.value.role, caught.value.command) == ("counter", "FETC:PER?")
    assert transport.sent == ["FETC:PER?"]


def test_unparsable_reply_names_instrument_and_command() -> None:
    fake = FakeInstrument({"FETC:PER?": "1.0E-03 s"})
    session, _ = scripted_session(COUNTER, fake, max_retries=0)
    with pytest.raises(UnparsableReply, match=r"counter \(Tessaly Instruments YQ-C83 at TCPIP0::fake::inst0::INSTR\): "
                                              r"FETC:PER\?: expected a number"):
        session.query_float("fetch_period")


def test_non_empty_error_queue_raises_with_every_error() -> None:
    fake = FakeInstrument(errors=('-100,"Command error"', '-222,"Data out of range"'))
    session, _ = scripted_session(COUNTER, fake)
    with pytest.raises(InstrumentErrorQueue) as info:
        session.check_errors("configuring period")
    assert 'after configuring period: -100,"Command error"; -222,"Data out of range"' in info.value.message


def test_empty_error_queue_passes() -> None:
    session, transport = scripted_session(COUNTER, FakeInstrument())
    session.check_errors()
    assert transport.sent == ["SYST:ERR?"]


def test_plain_zero_also_ends_the_error_queue() -> None:
    session, _ = scripted_session(COUNTER, FakeInstrument({"SYST:ERR?": '0,"No error"'}))
    assert session.read_errors() == []


def test_an_error_queue_that_never_empties_is_read_a_bounded_number_of_times() -> None:
    session, transport = scripted_session(COUNTER, lambda text: '-350,"Queue overflow"')
    with pytest.raises(InstrumentErrorQueue, match=f"still not empty after {MAX_ERROR_READS} reads"):
        session.check_errors()
    assert len(transport.sent) == MAX_ERROR_READS


def test_identify_accepts_the_profiles_instrument_in_any_case() -> None:
    fake = FakeInstrument({"*IDN?": "Tessaly Instruments,yq-c83,TS26A0117,1.4.2"})
    session, _ = scripted_session(COUNTER, fake)
    ident = session.identify()
    assert (ident.serial, ident.firmware) == ("TS26A0117", "1.4.2")
    assert session.identity == ident


@pytest.mark.parametrize("idn", ["TESSALY INSTRUMENTS,YQ-S47,S1,1.0", "OTHER MAKER,YQ-C83,S1,1.0"])
def test_identify_refuses_another_instrument(idn: str) -> None:
    session, _ = scripted_session(COUNTER, FakeInstrument({"*IDN?": idn}))
    with pytest.raises(WrongInstrument, match="expected TESSALY INSTRUMENTS YQ-C83"):
        session.identify()


def test_session_lifecycle_refuses_reuse_after_close() -> None:
    session, transport = scripted_session(COUNTER, FakeInstrument())
    assert session.state is SessionState.UNOPENED
    with session:
        assert session.state is SessionState.OPENED
        with pytest.raises(SoftwareFault, match="already open"):
            session.open()
    assert session.state is SessionState.CLOSED
    with pytest.raises(SoftwareFault, match="closed"):
        session.check_errors()
    with pytest.raises(SoftwareFault, match="cannot be reopened"):
        session.open()
    assert transport.sent == []


def test_timeout_is_lengthened_for_a_slow_operation_and_restored() -> None:
    session, transport = scripted_session(COUNTER, FakeInstrument())
    transport.timeout_s = 2.0
    with session.timeout_at_least(11.0):
        assert transport.timeout_s == 11.0
    assert transport.timeout_s == 2.0
    with session.timeout_at_least(1.0):
        assert transport.timeout_s == 2.0


def test_writes_and_queries_cannot_be_mixed_up() -> None:
    session, _ = scripted_session(COUNTER, FakeInstrument())
    with pytest.raises(SoftwareFault):
        session.write("fetch_period")
    with pytest.raises(SoftwareFault):
        session.query("initiate")


def test_negative_retry_count_is_refused() -> None:
    with pytest.raises(UserInputError):
        scripted_session(COUNTER, FakeInstrument(), max_retries=-1)


class RawFailingTransport:
    """A transport that raises what a socket or VISA library raises, not a knobline fault."""

    name = "TCPIP0::raw::inst0::INSTR"
    timeout_s = 2.0

    def __init__(self, exc: BaseException) -> None:
        self.exc = exc

    def write(self, text: str) -> None:
        raise self.exc

    def query(self, text: str) -> str:
        raise self.exc

    read = query_block = query

    def clear(self) -> None:
        raise self.exc

    def close(self) -> None:
        pass


@pytest.mark.parametrize(("exc", "fault"), [
    # The OSError family (Python docs, "OS exceptions"): resets and broken pipes are ConnectionError,
    # a socket timeout is TimeoutError.
    (ConnectionResetError(104, "Connection reset by peer"), ConnectionLost),
    (BrokenPipeError(32, "Broken pipe"), ConnectionLost),
    (OSError(113, "No route to host"), ConnectionLost),
    (TimeoutError("timed out"), InstrumentTimeout),
    (UnicodeDecodeError("ascii", b"\xff", 0, 1, "ordinal not in range(128)"), UnparsableReply),
    (pyvisa.errors.InvalidSession(), ConnectionLost),
    (RuntimeError("a VISA library's own failure"), ConnectionLost),
])
def test_no_raw_transport_exception_leaves_a_session(exc: BaseException, fault: type) -> None:
    from fixture.instruments import Session, load_profile

    session = Session(RawFailingTransport(exc), load_profile(COUNTER), max_retries=1)
    for call in (lambda: session.query_float("fetch_frequency"), lambda: session.write("initiate")):
        with pytest.raises(fault) as caught:
            call()
        assert caught.value.role == "counter" and caught.value.command in ("FETC:FREQ?", "INIT")
        assert caught.value.message.startswith("counter (Tessaly Instruments YQ-C83 at TCPIP0::raw::inst0::INSTR)")
        assert type(exc).__name__ in caught.value.message


def test_a_fault_names_role_and_command_as_attributes() -> None:
    session, _ = scripted_session(COUNTER, FakeInstrument({"FETC:FREQ?": "9.91E37"}))
    with pytest.raises(OverflowReading) as caught:
        session.query_float("fetch_frequency")
    assert (caught.value.role, caught.value.command) == ("counter", "FETC:FREQ?")


class _Reopening:
    """A scripted transport whose connection the instrument can drop, and which can open it again."""

    def __init__(self, handler, refusals: int = 0) -> None:
        from fixture.instruments.transport import ScriptedTransport

        self.inner = ScriptedTransport(handler, name="TCPIP0::10.0.0.9::5025::SOCKET", timeout_s=0.2)
        self.name, self.timeout_s = self.inner.name, 0.2
        self.dropped = False
        self.refusals = refusals   # reopen attempts refused before the instrument is back
        self.reopens = 0

    def write(self, text: str) -> None:
        if self.dropped:
            raise ConnectionLost(f"{self.name}: connection lost (BrokenPipeError)")
        self.inner.write(text)

    def read(self) -> str:
        return self.inner.read()

    def query(self, text: str) -> str:
        self.write(text)
        return self.read()

    def query_block(self, text: str) -> bytes:
        return self.inner.query_block(text)

    def clear(self) -> None:
        self.inner.clear()

    def close(self) -> None:
        self.inner.close()

    def reopen(self) -> None:
        self.reopens += 1
        if self.refusals:
            self.refusals -= 1
            raise ConnectionRefusedError(111, "Connection refused")
        self.dropped = False


def test_a_lost_connection_is_reopened_and_the_instrument_re_identified_before_the_next_message() -> None:
    # After a lost connection nothing is known of the instrument at the other end: ask *IDN? again
    # (common practice for LAN instruments, no source).
    fake = FakeInstrument({"*IDN?": IDN[COUNTER], "FETC:PER?": "1.0E-03"})
    transport = _Reopening(fake, refusals=2)
    from fixture.instruments.profiles import load_profile
    from fixture.instruments.session import Session

    session = Session(transport, load_profile(COUNTER))
    transport.dropped = True
    with pytest.raises(ConnectionLost):
        session.query_float("fetch_period")  # a lost connection is never retried as such
    assert session.query_float("fetch_period") == 1.0e-3
    assert transport.inner.sent == ["*IDN?", "FETC:PER?"]  # re-identified first
    assert (transport.reopens, session.reconnects) == (3, 1)  # two refused while it restarted


def test_another_instrument_at_the_address_after_a_reconnect_is_a_wrong_instrument() -> None:
    fake = FakeInstrument({"*IDN?": IDN["tessaly-yqp26"], "FETC:PER?": "1.0E-03"})
    transport = _Reopening(fake)
    from fixture.instruments.profiles import load_profile
    from fixture.instruments.session import Session

    session = Session(transport, load_profile(COUNTER))
    transport.dropped = True
    with pytest.raises(ConnectionLost):
        session.write("initiate")
    with pytest.raises(WrongInstrument, match="YQ-P26"):
        session.query_float("fetch_period")
    assert "FETC:PER?" not in transport.inner.sent


def test_a_reconnect_gives_up_after_the_timeout_and_tries_again_at_the_next_message() -> None:
    fake = FakeInstrument({"*IDN?": IDN[COUNTER], "FETC:PER?": "1.0E-03"})
    transport = _Reopening(fake, refusals=10_000)
    from fixture.instruments.profiles import load_profile
    from fixture.instruments.session import Session

    session = Session(transport, load_profile(COUNTER))
    transport.dropped = True
    with pytest.raises(ConnectionLost):
        session.query_float("fetch_period")
    with pytest.raises(ConnectionLost, match="reconnecting failed within 0.2 s"):
        session.query_float("fetch_period")
    transport.refusals = 0
    assert session.query_float("fetch_period") == 1.0e-3
