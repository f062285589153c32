"""A setting is sent once and again only when it changes, or when the instrument's state is no longer known.

Fail safe (RULES.md): after a reset, a reconnect, a retry, any fault or refused setting, the
driver cannot know what the instrument holds, so it sends everything again. The instruments
are the scripted fakes of tests/instruments/fakes.py.
"""

from __future__ import annotations

import pytest

from fixture.errors import ActuatorNotInPosition, InstrumentErrorQueue, InstrumentTimeout
from fixture.instruments import Counter, CounterSettings, ScriptedTransport, Session, Supply, load_profile
from tests.files.edits import edited_copy

from .fakes import IDN, FakeInstrument, scripted_session, sequence
from .test_actuator import FakeKA2, actuator
from .test_profiles import shipped

PROFILE = "tessaly-yqc83"
PERIOD = CounterSettings(function="period", gate_time_s=0.1, trigger_level_v=1.5)
FULL_PERIOD = ["CONF:PER", "SENS:FREQ:APER 1.000000E-01", "SENS:EVEN:LEV 1.5000E+00", "SENS:EVEN:SLOP POS",
               "INP:COUP DC", "INP:IMP 1000000", "SYST:ERR?"]


def counter(fake: FakeInstrument | None = None) -> tuple[Counter, list[str]]:
    session, transport = scripted_session(PROFILE, fake or FakeInstrument({"*IDN?": IDN[PROFILE]}))
    return Counter(session), transport.sent


def test_unchanged_counter_settings_are_sent_once() -> None:
    c, sent = counter()
    c.configure(PERIOD)
    c.configure(PERIOD)
    assert sent == FULL_PERIOD  # the second configure sends nothing, not even the error query


def test_a_changed_gate_alone_is_sent_then_the_error_queue_read() -> None:
    c, sent = counter()
    c.configure(PERIOD)
    sent.clear()
    c.configure(CounterSettings(function="period", gate_time_s=0.2, trigger_level_v=1.5))
    assert sent == ["SENS:FREQ:APER 2.000000E-01", "SYST:ERR?"]


def test_gate_by_cycles_then_back_to_the_same_time_sends_the_time_again() -> None:
    # The gate is one setting however it is given: the time is no longer in force after a cycle gate.
    c, sent = counter()
    c.configure(PERIOD)
    c.configure(CounterSettings(function="period", gate_cycles=100, trigger_level_v=1.5))
    sent.clear()
    c.configure(PERIOD)
    assert sent == ["SENS:FREQ:APER 1.000000E-01", "SYST:ERR?"]


def test_a_new_function_sends_only_configure_when_the_profile_says_it_keeps_the_rest() -> None:
    # tessaly-yqc83.toml [configure] keeps every other setting.
    c, sent = counter()
    c.configure(PERIOD)
    sent.clear()
    c.configure(CounterSettings(function="frequency", gate_time_s=0.1, trigger_level_v=1.5))
    assert sent == ["CONF:FREQ", "SYST:ERR?"]


def test_a_new_function_resends_everything_when_the_profile_does_not_say_what_configure_keeps(tmp_path) -> None:
    text = shipped(PROFILE).read_text(encoding="utf-8")
    kept = text[text.index("[configure]"):]
    profile = load_profile(edited_copy(shipped(PROFILE), tmp_path, kept, ""))
    transport = ScriptedTransport(FakeInstrument())
    c = Counter(Session(transport, profile))
    c.configure(PERIOD)
    transport.sent.clear()
    c.configure(CounterSettings(function="frequency", gate_time_s=0.1, trigger_level_v=1.5))
    assert transport.sent == ["CONF:FREQ", *FULL_PERIOD[1:]]


def test_a_reset_makes_the_counter_send_everything_again() -> None:
    c, sent = counter()
    c.configure(PERIOD)
    c.reset()
    sent.clear()
    c.configure(PERIOD)
    assert sent == FULL_PERIOD


def test_a_refused_setting_makes_the_counter_send_everything_again() -> None:
    fake = FakeInstrument({"*IDN?": IDN[PROFILE]}, errors=('-222,"Data out of range"',))
    c, sent = counter(fake)
    with pytest.raises(InstrumentErrorQueue):
        c.configure(PERIOD)
    sent.clear()
    c.configure(PERIOD)
    assert sent == FULL_PERIOD


def test_a_timeout_while_reading_makes_the_counter_send_everything_again() -> None:
    c, sent = counter()  # FETC:PER? has no reply: the fetch times out
    c.session.max_retries = 0
    c.configure(PERIOD)
    with pytest.raises(InstrumentTimeout):
        c.read()
    sent.clear()
    c.configure(PERIOD)
    assert sent == FULL_PERIOD


def test_a_retried_query_makes_the_counter_send_everything_again() -> None:
    # The first fetch times out and is retried after a device clear: the state is no longer known.
    c, sent = counter(FakeInstrument({"*IDN?": IDN[PROFILE], "FETC:PER?": sequence(None, "+1.0E-03")}))
    c.configure(PERIOD)
    assert c.read() == 1.0e-3
    assert c.session.retries == 1
    sent.clear()
    c.configure(PERIOD)
    assert sent == FULL_PERIOD


def test_a_new_connection_or_a_new_identification_makes_the_counter_send_everything_again() -> None:
    c, sent = counter()
    c.configure(PERIOD)
    c.identify()  # a reconnect identifies the instrument again
    sent.clear()
    c.configure(PERIOD)
    assert sent == FULL_PERIOD
    replacement = ScriptedTransport(FakeInstrument(), name=c.session.transport.name)
    c.session.transport = replacement  # a reconnect that replaces the connection
    c.configure(PERIOD)
    assert replacement.sent == FULL_PERIOD


def test_forget_settings_sends_everything_again() -> None:
    c, sent = counter()
    c.configure(PERIOD)
    c.forget_settings()
    sent.clear()
    c.configure(PERIOD)
    assert sent == FULL_PERIOD


def test_supply_settings_are_sent_once_but_the_output_every_time() -> None:
    session, transport = scripted_session("tessaly-yqp26", FakeInstrument())
    supply = Supply(session)
    supply.configure(12.0, 0.1)
    supply.output(True)
    supply.configure(12.0, 0.1)
    supply.output(True)  # the unit's power: always sent
    assert transport.sent == ["SOUR:VOLT 12.0000", "SOUR:CURR 0.1000", "SYST:ERR?",
                              "OUTP:STAT 1", "SYST:ERR?", "OUTP:STAT 1", "SYST:ERR?"]
    supply.reset()
    transport.sent.clear()
    supply.configure(12.0, 0.1)
    assert transport.sent == ["SOUR:VOLT 12.0000", "SOUR:CURR 0.1000", "SYST:ERR?"]


def test_a_knob_already_at_its_stop_is_not_moved_again() -> None:
    a, sent, _ = actuator()
    a.move_both(25.0, 50.0)
    sent.clear()
    assert a.move_both(75.0, 50.0) == (pytest.approx(75.0), pytest.approx(50.0))
    # 0 % at 15 deg, 270 deg of travel (profile defaults): 75 % -> 217.5 deg; knob B stays at 150 deg
    assert sent == ["KNOB:A:MOVE 217.500", "BUSY?", "SYST:ERR?", "KNOB:A:POS?"]


def test_a_move_that_missed_and_homing_make_the_actuator_move_every_knob_again() -> None:
    fake = FakeKA2()
    a, sent, _ = actuator(fake)
    a.move_both(25.0, 50.0)
    fake.miss_deg = 5.0
    with pytest.raises(ActuatorNotInPosition):
        a.move("a", 30.0)
    fake.miss_deg = 0.0
    sent.clear()
    a.move_both(25.0, 50.0)
    assert [s for s in sent if "MOVE" in s] == ["KNOB:A:MOVE 82.500", "KNOB:B:MOVE 150.000"]
    a.home()
    sent.clear()
    a.move_both(25.0, 50.0)
    assert [s for s in sent if "MOVE" in s] == ["KNOB:A:MOVE 82.500", "KNOB:B:MOVE 150.000"]
