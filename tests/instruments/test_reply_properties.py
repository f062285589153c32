"""Property-based: whatever an instrument answers, a driver returns a possible reading or raises a station fault.

Random reply strings for the counter, supply and actuator reading queries and random records
(ASCII text and binary blocks) for the scope. Pinned: the value a driver returns is finite and
physically possible for the quantity (a frequency above 0 Hz, a duty strictly between 0 and
100 % by the definition of duty, inside the range the instrument's profile states: its
datasheet), or the driver raises an InstrumentFault/FixtureFault naming its role; never another
exception, never OverflowReading from an instrument that measures no signal.
"""

from __future__ import annotations

import math
import struct

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from fixture.errors import FixtureFault, InstrumentFault, OverflowReading
from fixture.instruments import Actuator, Counter, CounterSettings, Scope, ScopeSettings, Session, Supply
from fixture.instruments import ScriptedTransport, load_profile
from fixture.instruments.ieee4882 import build_block

from .fakes import FakeInstrument

PROFILES = {name: load_profile(name) for name in ("tessaly-yqc83", "tessaly-yqp26", "knobline-ka2", "tessaly-yqs47")}
SENTINELS = ["9.91E37", "9.9E37", "-9.9E37", "+9.91E+37", "1E999", "-1E999", "-1E300", "1E-400", "NAN", "nan", "INF",
             "-inf", "0", "-0", "+0.0", "-1", "", " ", "1_000", "0x10", "1e3 Hz", "+1.000000000000E+03",
             "TESSALY INSTRUMENTS,YQ-C83,T1,1.0", '+0,"No error"', "1,2", "\u00e9", "1.5E", "."]


def numbers() -> st.SearchStrategy[str]:
    """Number-like text in every SCPI numeric form and a few that are not (from memory: IEEE 488.2 NRf)."""
    floats = st.floats(allow_nan=True, allow_infinity=True)
    return st.one_of(
        floats.map(repr), floats.map(lambda v: f"{v:+.12E}"), floats.map(lambda v: f"{v:.6E}"),
        floats.map(lambda v: f"{v:.3f}"), st.integers(-10**40, 10**40).map(str),
        st.builds(lambda m, e: f"{m}E{e:+d}", st.integers(-10**13, 10**13), st.integers(-420, 420)),
    )


REPLIES = st.one_of(st.sampled_from(SENTINELS), numbers(), st.text(max_size=24))
SAMPLE_EXAMPLES = settings(max_examples=40, deadline=None, derandomize=True)


def session(profile: str, replies: dict[str, str | bytes]) -> Session:
    # No retries: each example is one reply, and the property holds for every single reply.
    fake = FakeInstrument(replies)
    return Session(ScriptedTransport(fake, name="TCPIP0::prop::inst0::INSTR"), PROFILES[profile], max_retries=0)


def assert_named_fault(exc: BaseException, role: str) -> None:
    assert isinstance(exc, (InstrumentFault, FixtureFault)), f"{type(exc).__name__}: {exc}"
    assert exc.role == role and exc.message.startswith(role), exc.message


@settings(max_examples=60, deadline=None, derandomize=True)
@given(function=st.sampled_from(["frequency", "period", "pulse_width", "duty"]), reply=REPLIES)
def test_a_counter_reading_is_possible_or_a_named_fault(function: str, reply: str) -> None:
    query = {"frequency": "FETC:FREQ?", "period": "FETC:PER?", "pulse_width": "FETC:PWID?", "duty": "FETC:DCYC?"}
    counter = Counter(session("tessaly-yqc83", {query[function]: reply}))
    counter.configure(CounterSettings(function=function, gate_time_s=0.1))
    try:
        value = counter.read()
    except Exception as exc:  # noqa: BLE001 - the property is about every exception
        assert_named_fault(exc, "counter")
        return
    low_hz, high_hz = 1.0e-3, 350.0e6  # the YQ-C83 profile's stated range (its fictional datasheet)
    assert math.isfinite(value)
    if function == "frequency":
        assert low_hz <= value <= high_hz
    elif function == "period":
        assert 1 / high_hz <= value <= 1 / low_hz
    elif function == "pulse_width":
        assert 0 < value <= 1 / low_hz
    else:
        assert 0 < value < 100  # a duty is a fraction of one period, in percent


@SAMPLE_EXAMPLES
@given(reply=REPLIES)
def test_a_supply_current_is_possible_or_a_named_fault_and_never_an_overflow(reply: str) -> None:
    supply = Supply(session("tessaly-yqp26", {"MEAS:CURR?": reply}))
    try:
        value = supply.measure_current()
    except Exception as exc:  # noqa: BLE001
        assert_named_fault(exc, "supply")
        assert not isinstance(exc, OverflowReading)
        return
    assert math.isfinite(value) and -0.05 <= value <= 5.25  # YQ-P26: 5 A rated, 1 % below / 5 % above


@SAMPLE_EXAMPLES
@given(reply=REPLIES)
def test_an_actuator_position_is_inside_its_travel_or_a_named_fault(reply: str) -> None:
    actuator = Actuator(session("knobline-ka2", {"BUSY?": "0", "KNOB:B:POS?": reply}))
    try:
        angle_pct = actuator.position_pct("b")
    except Exception as exc:  # noqa: BLE001
        assert_named_fault(exc, "actuator")
        assert not isinstance(exc, OverflowReading)
        return
    # KA-2 travel 0..300 deg (+-0.2 deg tolerance), knob zero at 15 deg, 270 deg for 100 %.
    assert math.isfinite(angle_pct) and (-0.2 - 15) / 270 * 100 <= angle_pct <= (300.2 - 15) / 270 * 100


SCOPE = dict(sample_rate_hz=1e6, record_length=8, range_v=8.0)
SCOPE_BASE = {"*OPC?": "1", "SENS:SWE:TINT?": "1.000000E-06", "SENS:SWE:OFFS:TIME?": "0.0"}


def assert_usable_record(record, settings_: ScopeSettings) -> None:
    assert record.volts.size >= settings_.record_length / 2 and np.all(np.isfinite(record.volts))
    assert math.isfinite(record.sample_interval_s) and record.sample_interval_s > 0 and math.isfinite(record.t0_s)


@SAMPLE_EXAMPLES
@given(text=st.one_of(st.text(max_size=60),
                      st.lists(st.one_of(numbers(), st.sampled_from(SENTINELS)), max_size=12).map(",".join),
                      st.lists(st.floats(-4, 4), max_size=12).map(lambda v: ",".join(f"{x:.4f}" for x in v))))
def test_an_ascii_scope_record_is_usable_or_a_named_fault(text: str) -> None:
    scope = Scope(session("tessaly-yqs47", {**SCOPE_BASE, "TRAC:DATA? CH1": text}))
    wanted = ScopeSettings(**SCOPE)
    scope.configure(wanted)
    try:
        record = scope.acquire()
    except Exception as exc:  # noqa: BLE001
        assert_named_fault(exc, "scope")
        assert not isinstance(exc, OverflowReading)
        return
    assert_usable_record(record, wanted)


@SAMPLE_EXAMPLES
@given(payload=st.one_of(st.binary(max_size=40),
                         st.lists(st.floats(allow_nan=True, allow_infinity=True, width=32), max_size=10)
                         .map(lambda v: struct.pack(f">{len(v)}f", *v))),
       preamble=st.one_of(st.just("8,1.0E-06,0,0.01,0,0"), st.text(max_size=30),
                          st.lists(numbers(), min_size=6, max_size=6).map(",".join)),
       framed=st.booleans())
def test_a_binary_scope_record_is_usable_or_a_named_fault(payload: bytes, preamble: str, framed: bool) -> None:
    block = build_block(payload) if framed else payload
    scope = Scope(session("tessaly-yqs47", {**SCOPE_BASE, "TRAC:PRE? CH1": preamble, "TRAC:DATA? CH1": block}))
    wanted = ScopeSettings(**SCOPE, encoding="float32")
    scope.configure(wanted)
    try:
        record = scope.acquire()
    except Exception as exc:  # noqa: BLE001
        assert_named_fault(exc, "scope")
        assert not isinstance(exc, OverflowReading)
        return
    assert_usable_record(record, wanted)
