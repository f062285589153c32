"""The counter driver on a scripted instrument: the SCPI it sends, its readings, its faults, its events."""

from __future__ import annotations

import pytest

from fixture.errors import (
    ImpossibleReading,
    InstrumentErrorQueue,
    InstrumentTimeout,
    OverflowReading,
    SoftwareFault,
    UserInputError,
)
from fixture.instruments import Counter, CounterSettings, Event, ScriptedTransport, Session, load_profile
from tests.files.edits import edited_copy

from .fakes import IDN, FakeInstrument, scripted_session
from .test_profiles import shipped

PROFILE = "tessaly-yqc83"


def counter(replies=None, errors=()) -> tuple[Counter, list[str]]:
    session, transport = scripted_session(PROFILE, FakeInstrument({"*IDN?": IDN[PROFILE], **(replies or {})},
                                                                  errors))
    return Counter(session), transport.sent


def test_configure_sends_scpi_1999_commands_then_reads_the_error_queue() -> None:
    # CONFigure:PERiod, SENSe:FREQuency:APERture, SENSe:EVENt:LEVel/SLOPe, INPut:COUPling/IMPedance
    # (SCPI-1999, from memory), in the profile's short forms.
    c, sent = counter()
    c.configure(CounterSettings(function="period", gate_time_s=0.01, trigger_level_v=1.5,
                                trigger_slope="falling", coupling="ac", impedance_ohm=50))
    assert sent == ["CONF:PER", "SENS:FREQ:APER 1.000000E-02", "SENS:EVEN:LEV 1.5000E+00", "SENS:EVEN:SLOP NEG",
                    "INP:COUP AC", "INP:IMP 50", "SYST:ERR?"]


def test_cycle_count_gate_replaces_the_gate_time() -> None:
    c, sent = counter()
    c.configure(CounterSettings(function="frequency", gate_cycles=200))
    assert sent[:2] == ["CONF:FREQ", "SENS:FREQ:CYCL 200"]
    assert not any(s.startswith("SENS:FREQ:APER") for s in sent)


def test_reading_initiates_then_fetches_the_configured_function() -> None:
    c, sent = counter({"FETC:PWID?": "+2.500000000000E-04"})
    c.configure(CounterSettings(function="pulse_width", gate_time_s=0.1))
    sent.clear()
    assert c.read() == 2.5e-4
    assert sent == ["INIT", "FETC:PWID?"]


def test_duty_in_ratio_is_returned_in_percent(tmp_path) -> None:
    profile = load_profile(edited_copy(shipped(PROFILE), tmp_path, 'duty = "percent"', 'duty = "ratio"'))
    c = Counter(Session(ScriptedTransport(FakeInstrument({"FETC:DCYC?": "0.25"})), profile))
    c.configure(CounterSettings(function="duty", gate_time_s=0.1))
    assert c.read() == 25.0


def test_no_signal_reading_is_an_overflow_fault() -> None:
    # 9.91E37: the counter could not take the reading (SCPI-1999, from memory).
    c, _ = counter({"FETC:FREQ?": "9.91E37"})
    c.configure(CounterSettings(function="frequency", gate_time_s=0.1))
    with pytest.raises(OverflowReading):
        c.read()


def test_counter_that_never_answers_the_fetch_times_out() -> None:
    c, _ = counter()
    c.configure(CounterSettings(function="period", gate_time_s=0.1))
    with pytest.raises(InstrumentTimeout, match="after 3 attempts"):
        c.read()


def test_fetch_timeout_covers_the_gate_time() -> None:
    seen = []
    c, _ = counter({"FETC:PER?": lambda: seen.append(c.session.transport.timeout_s) or "1E-3"})
    c.configure(CounterSettings(function="period", gate_time_s=5.0))
    c.read()
    assert seen == [6.0]                          # 5 s gate + the profile's 1 s fetch margin
    assert c.session.transport.timeout_s == 2.0   # restored


def test_a_refused_setting_surfaces_as_an_error_queue_fault() -> None:
    c, _ = counter(errors=('-222,"Data out of range"',))
    with pytest.raises(InstrumentErrorQueue, match="configuring period, gate 20 s"):
        c.configure(CounterSettings(function="period", gate_time_s=20.0))
    with pytest.raises(SoftwareFault, match="before a successful configure"):
        c.read()


def test_events_announce_configuration_and_each_fetch_in_order() -> None:
    log: list[str] = []
    c, sent = counter({"FETC:PER?": lambda: log.append("fetch") or "1E-3"})
    got: list[Event] = []
    c.events.subscribe(lambda e: (got.append(e), log.append(e.name)))
    settings = CounterSettings(function="period", gate_time_s=0.1)
    c.configure(settings)
    c.read()
    assert [e.name for e in got] == ["configured", "before_fetch"]
    assert got[0].source == "counter"
    assert got[0].info["function"] == "period" and got[0].info["gate_time_s"] == 0.1
    assert got[1].info == {"function": "period"}
    assert log == ["configured", "before_fetch", "fetch"]    # the listener runs before the fetch query


def test_unsubscribed_listener_hears_nothing_more() -> None:
    c, _ = counter()
    got: list[Event] = []
    unsubscribe = c.events.subscribe(got.append)
    unsubscribe()
    c.configure(CounterSettings(function="period", gate_time_s=0.1))
    assert got == []


@pytest.mark.parametrize("kwargs, complaint", [
    ({"function": "rpm", "gate_time_s": 0.1}, "function"),
    ({"function": "period"}, "neither"),
    ({"function": "period", "gate_time_s": 0.1, "gate_cycles": 10}, "both"),
    ({"function": "period", "gate_time_s": 0.0}, "gate time"),
    ({"function": "period", "gate_cycles": 0}, "cycles"),
    ({"function": "period", "gate_time_s": 0.1, "trigger_slope": "up"}, "slope"),
    ({"function": "period", "gate_time_s": 0.1, "coupling": "gnd"}, "coupling"),
    ({"function": "period", "gate_time_s": 0.1, "impedance_ohm": -50}, "impedance"),
    ({"function": "period", "gate_time_s": 0.1, "trigger_level_v": float("nan")}, "trigger level"),
])
def test_bad_counter_settings_are_user_input_errors(kwargs, complaint) -> None:
    with pytest.raises(UserInputError, match=complaint):
        CounterSettings(**kwargs)


@pytest.mark.parametrize(("function", "reply", "expected"), [
    # A frequency or period is above zero by definition; SCPI 9.9E37 is +infinity (SCPI-1999, from memory);
    # 1E999 is a valid NR3 number but no float; duty is a fraction of one period, so 0 < duty < 100 %.
    ("frequency", "-1E300", r"a frequency from 0.001 Hz to 3.5e\+08 Hz"),
    ("frequency", "0", "a frequency from 0.001 Hz"),
    ("frequency", "1E999", "a frequency"),
    ("frequency", "9.9E37", r"SCPI \+infinity"),
    ("frequency", "4.0E+08", r"to 3.5e\+08 Hz"),  # above the YQ-C83 profile's stated range
    ("period", "-1", r"a period from 2.85714e-09 s to 1000 s"),
    ("period", "-9.9E37", "SCPI -infinity"),
    ("pulse_width", "0", "a pulse width above 0 s"),
    ("duty", "0", "a duty above 0 % below 100 %"),
    ("duty", "100.0", "a duty above 0 %"),
    ("duty", "-25", "a duty"),
])
def test_an_impossible_reading_is_a_fault_naming_counter_query_and_reply(function, reply, expected) -> None:
    fetch = {"frequency": "FETC:FREQ?", "period": "FETC:PER?", "pulse_width": "FETC:PWID?", "duty": "FETC:DCYC?"}
    c, sent = counter({fetch[function]: reply})
    c.configure(CounterSettings(function=function, gate_time_s=0.1))
    with pytest.raises(ImpossibleReading, match=expected) as caught:
        c.read()
    message = caught.value.message
    assert message.startswith(f"counter (Tessaly Instruments YQ-C83 at TCPIP0::fake::inst0::INSTR): "
                              f"{fetch[function]}: answered {reply!r}")
    assert (caught.value.role, caught.value.command) == ("counter", fetch[function])
    assert sent.count(fetch[function]) == 3  # asked again twice: a garbled reading may be a one-off


def test_a_duty_ratio_of_one_is_a_hundred_percent_and_impossible(tmp_path) -> None:
    profile = load_profile(edited_copy(shipped(PROFILE), tmp_path, 'duty = "percent"', 'duty = "ratio"'))
    c = Counter(Session(ScriptedTransport(FakeInstrument({"FETC:DCYC?": "1.0"})), profile, max_retries=0))
    c.configure(CounterSettings(function="duty", gate_time_s=0.1))
    with pytest.raises(ImpossibleReading, match="below 100 %"):
        c.read()
