"""Every injected fault kind on every reading role ends in a named station fault, or in a recovered reading.

The drivers run on scripted instruments (tests/instruments/fakes.py) with the fault harness of
fixture/sim/faults.py between them. What is pinned: a fault never escapes as another exception,
never comes back as a non-finite or impossible value, always names the role and the command;
a fault given once is recovered, by the session's retry of an idempotent query or on the next call.
"""

from __future__ import annotations

import itertools
import math
import pickle
import re

import pytest

from fixture.errors import (
    ConnectionLost,
    FixtureFault,
    ImpossibleReading,
    InstrumentFault,
    InstrumentTimeout,
    OverflowReading,
    StaleReading,
    StationFault,
    UnparsableReply,
)
from fixture.instruments import Actuator, Counter, CounterSettings, Supply
from fixture.sim.faults import FaultKind, FaultyTransport, command_pattern, install_fault, remove_fault
from tests.instruments.fakes import IDN, FakeInstrument, scripted_session

ROLES = ("counter", "supply", "actuator")
#: Angle the actuator is sent to for knob A at 50 %: zero 15 deg + 50 % of 270 deg (profile defaults).
KNOB_A_50_DEG = 150.0


def counter_readings():
    # A live signal's readings differ in their last digits from gate to gate (edge jitter).
    n = itertools.count(1)
    return lambda: f"+1.00000{next(n) % 10_000_000:07d}E+03"


def make(role: str):
    """(driver, take_a_reading, is_true_value, command texts the fault targets)."""
    if role == "counter":
        session, _ = scripted_session("tessaly-yqc83", FakeInstrument({"FETC:FREQ?": counter_readings()}))
        counter = Counter(session)
        counter.configure(CounterSettings(function="frequency", gate_time_s=0.1))
        return counter, counter.read, lambda v: 1000.0 <= v < 1000.01, {"FETC:FREQ?"}
    if role == "supply":
        session, _ = scripted_session("tessaly-yqp26", FakeInstrument({"*IDN?": IDN["tessaly-yqp26"],
                                                                        "MEAS:CURR?": "6.500000E-03"}))
        supply = Supply(session)
        return supply, supply.measure_current, lambda v: v == 6.5e-3, {"MEAS:CURR?"}
    session, _ = scripted_session("knobline-ka2", FakeInstrument({"BUSY?": "0", "KNOB:A:POS?": f"{KNOB_A_50_DEG:.3f}"}))
    actuator = Actuator(session)
    return actuator, lambda: actuator.move("a", 50.0), lambda v: v == 50.0, {"KNOB:A:POS?"}


def assert_named(exc: BaseException, role: str, commands: set[str]) -> None:
    assert isinstance(exc, (InstrumentFault, FixtureFault)), repr(exc)
    assert exc.role == role and exc.command in commands, (exc.role, exc.command, exc.message)
    assert exc.message.startswith(f"{role} (") and exc.command in exc.message, exc.message


#: Fault replies that are possible readings: a supply reading 0 A is what an unpowered or open unit
#: draws. The supply cannot tell; the runner must cross-check (a unit putting out a wave draws current).
POSSIBLE = {("supply", FaultKind.ZERO)}
#: Faults that leave the value right: "150.000" losing its last three characters still reads 150 deg.
HARMLESS = {("actuator", FaultKind.TRUNCATED)}


@pytest.mark.parametrize(("role", "kind"), [(r, k) for r in ROLES for k in FaultKind if (r, k) not in POSSIBLE],
                         ids=lambda x: x if isinstance(x, str) else x.value)
def test_a_persistent_fault_ends_in_a_station_fault_naming_role_and_command(role: str, kind: FaultKind) -> None:
    driver, reading, is_true, commands = make(role)
    install_fault(driver, kind)
    try:
        value = reading()
    except StationFault as exc:
        assert_named(exc, role, commands)
        return
    assert (role, kind) in HARMLESS, f"{kind.value} on the {role} came back as the value {value!r}"
    assert is_true(value)


def test_a_possible_fault_reply_is_returned_as_the_reading_it_is() -> None:
    supply, reading, _, _ = make("supply")
    install_fault(supply, FaultKind.ZERO)
    assert reading() == 0.0


@pytest.mark.parametrize("kind", list(FaultKind), ids=lambda k: k.value)
@pytest.mark.parametrize("role", ROLES)
def test_a_fault_given_once_is_recovered_and_never_returns_a_wrong_value(role: str, kind: FaultKind) -> None:
    driver, reading, is_true, commands = make(role)
    faulty = install_fault(driver, kind, times=1)
    if (role, kind) in POSSIBLE:
        reading()  # the possible, wrong reading is taken; the next one is right
    try:
        value = reading()
    except StationFault as exc:
        assert_named(exc, role, commands)
        value = reading()  # the instrument has recovered: the next reading is good
    assert faulty.hits == 1
    assert math.isfinite(value) and is_true(value), value


@pytest.mark.parametrize("kind", [FaultKind.GARBAGE, FaultKind.EMPTY, FaultKind.NAN, FaultKind.HUGE,
                                  FaultKind.NEGATIVE_TINY, FaultKind.ZERO, FaultKind.MINUS_ONE, FaultKind.TIMEOUT,
                                  FaultKind.PLUS_INFINITY, FaultKind.TRUNCATED, FaultKind.WRONG_QUERY,
                                  FaultKind.STALE], ids=lambda k: k.value)
def test_a_bad_counter_reply_once_is_asked_again_within_the_reading(kind: FaultKind) -> None:
    # FETCh? returns the last reading again without a new measurement (SCPI-1999, from memory),
    # so asking again is safe; the retry happens inside one read() call.
    counter, reading, is_true, _ = make("counter")
    install_fault(counter, kind, times=1)
    assert is_true(reading())
    assert counter.session.retries == 1


def test_overflow_from_the_counter_stays_an_overflow_reading_for_the_runner_to_cross_check() -> None:
    counter, reading, _, _ = make("counter")
    install_fault(counter, FaultKind.OVERFLOW)
    with pytest.raises(OverflowReading):
        reading()


@pytest.mark.parametrize("role", ["supply", "actuator"])
@pytest.mark.parametrize("kind", [FaultKind.OVERFLOW, FaultKind.PLUS_INFINITY, FaultKind.MINUS_INFINITY],
                         ids=lambda k: k.value)
def test_a_sentinel_from_a_supply_or_actuator_is_never_an_overflow_reading(role: str, kind: FaultKind) -> None:
    # An OverflowReading could be read as the unit's missing signal; these instruments measure no signal.
    driver, reading, _, _ = make(role)
    install_fault(driver, kind)
    with pytest.raises(ImpossibleReading) as caught:
        reading()
    assert not isinstance(caught.value, OverflowReading)


def test_a_reset_socket_becomes_connection_lost_and_is_not_retried() -> None:
    supply, reading, _, _ = make("supply")
    faulty = install_fault(supply, FaultKind.CONNECTION_RESET)
    with pytest.raises(ConnectionLost, match=r"MEAS:CURR\?: connection lost \(ConnectionResetError"):
        reading()
    assert faulty.hits == 1


def test_a_timeout_is_asked_again_then_named_with_the_attempts() -> None:
    supply, reading, _, _ = make("supply")
    faulty = install_fault(supply, FaultKind.TIMEOUT)
    with pytest.raises(InstrumentTimeout, match=r"MEAS:CURR\?: .*\(after 3 attempts\)"):
        reading()
    assert faulty.hits == 3


def test_the_counter_refuses_a_reading_repeated_to_the_last_digit() -> None:
    session, _ = scripted_session("tessaly-yqc83", FakeInstrument({"FETC:FREQ?": "+1.000000123456E+03"}))
    counter = Counter(session)
    counter.configure(CounterSettings(function="frequency", gate_time_s=0.1))
    assert counter.read() == 1000.000123456
    with pytest.raises(StaleReading, match=r"FETC:FREQ\?: answered '\+1.000000123456E\+03', the previous"):
        counter.read()


def test_a_coarse_reading_may_repeat() -> None:
    # Five digits can honestly repeat between gates; only 10+ digit repeats are called stale.
    session, _ = scripted_session("tessaly-yqc83", FakeInstrument({"FETC:FREQ?": "1.0000E+03"}))
    counter = Counter(session)
    counter.configure(CounterSettings(function="frequency", gate_time_s=0.1))
    assert counter.read() == counter.read() == 1000.0


def test_only_the_targeted_queries_are_hit_and_removing_the_fault_restores_the_transport() -> None:
    supply, reading, _, _ = make("supply")
    inner = supply.session.transport
    faulty = install_fault(supply, FaultKind.GARBAGE)
    assert supply.identify().model == "YQ-P26"  # *IDN? is not a reading query: untouched
    assert faulty.hits == 0
    remove_fault(supply)
    assert supply.session.transport is inner and reading() == 6.5e-3


def test_the_pattern_is_built_from_the_profile_templates() -> None:
    actuator, *_ = make("actuator")
    pattern = command_pattern(actuator.profile, ["position"])
    assert pattern.fullmatch("KNOB:A:POS?") and pattern.fullmatch("KNOB:B:POS?")
    assert not pattern.fullmatch("KNOB:A:LIM?") and not pattern.fullmatch("BUSY?")


def test_a_wrong_query_reply_is_the_instruments_identity() -> None:
    counter, *_ = make("counter")
    faulty = install_fault(counter, FaultKind.WRONG_QUERY)
    assert isinstance(faulty, FaultyTransport)
    assert faulty.query("FETC:FREQ?") == "TESSALY INSTRUMENTS,YQ-C83,0,1.0"
    assert re.fullmatch(r"TESSALY INSTRUMENTS,YQ-C83,\w+,[\d.]+", IDN["tessaly-yqc83"])


@pytest.mark.parametrize("exc", [
    UnparsableReply("counter (x): FETC:FREQ?: nonsense", role="counter", command="FETC:FREQ?"),
    ImpossibleReading("supply (x): MEAS:CURR?: -1", role="supply", command="MEAS:CURR?"),
    ConnectionLost("actuator: gone"),
])
def test_faults_keep_role_and_command_across_processes(exc: InstrumentFault) -> None:
    back = pickle.loads(pickle.dumps(exc))
    assert (type(back), back.message, back.role, back.command) == (type(exc), exc.message, exc.role, exc.command)
