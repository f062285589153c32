"""The drivers against knobline's pyvisa-sim device file, end to end, and sim/hardware traffic parity.

Each test copies the device file to its own temporary path: pyvisa-sim caches device state by
the literal path string, so a fresh path is a fresh bench.
"""

from __future__ import annotations

import shutil
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest

from fixture.errors import ConnectionLost, InstrumentErrorQueue, InstrumentFault, InstrumentTimeout, OverflowReading
from fixture.instruments import (
    DRIVERS,
    Actuator,
    Counter,
    CounterSettings,
    Driver,
    RecordingTransport,
    Scope,
    ScopeSettings,
    ScriptedTransport,
    Session,
    Supply,
    VisaTransport,
    load_profile,
    open_instrument,
)
from fixture.sim.devices import RESOURCES, device_file

from .fakes import IDN, FakeInstrument
from .test_actuator import FakeKA2

PROFILES = {"counter": "tessaly-yqc83", "scope": "tessaly-yqs47", "supply": "tessaly-yqp26",
            "actuator": "knobline-ka2"}
FAST_S = 0.2   # a missing reply in the device file should fail the test quickly


@pytest.fixture
def backend(tmp_path: Path) -> str:
    with device_file() as shipped:
        path = shutil.copyfile(shipped, tmp_path / "bench.yaml")
    return f"{path}@sim"


@pytest.fixture
def world(backend: str) -> Iterator[Callable[[str], VisaTransport]]:
    """Second sessions to the simulated devices, as the simulated world opens them."""
    opened: list[VisaTransport] = []

    def session_to(role: str) -> VisaTransport:
        opened.append(VisaTransport(RESOURCES[role], backend, timeout_s=FAST_S))
        return opened[-1]

    yield session_to
    for t in opened:
        t.close()


def driver(role: str, backend: str, **options) -> Driver:
    return open_instrument(role, RESOURCES[role], backend, PROFILES[role], timeout_s=FAST_S, **options)


@pytest.mark.parametrize("role", sorted(RESOURCES))
def test_every_simulated_instrument_identifies_as_its_profile_says(role: str, backend: str) -> None:
    with driver(role, backend) as d:
        ident = d.identify()
        d.reset()
        d.session.check_errors()
    assert ident.model == load_profile(PROFILES[role]).idn_models[0]


@pytest.mark.parametrize("function, setter, value", [
    ("frequency", "SIM:FREQ", 1234.5678), ("period", "SIM:PER", 8.1e-4),
    ("pulse_width", "SIM:PWID", 2.0e-4), ("duty", "SIM:DCYC", 37.25)])
def test_counter_reads_back_what_the_world_injects_before_the_fetch(function, setter, value, backend, world) -> None:
    sim = world("counter")
    with driver("counter", backend) as counter:
        assert isinstance(counter, Counter)
        counter.identify()
        counter.configure(CounterSettings(function=function, gate_time_s=0.02, trigger_level_v=1.5))
        # The world reads the configured function and gate back through its own session...
        assert sim.query("CONF?") == {"frequency": "FREQ", "period": "PER", "pulse_width": "PWID",
                                      "duty": "DCYC"}[function]
        assert float(sim.query("SENS:FREQ:APER?")) == 0.02
        # ...and injects the true value when the driver is about to fetch.
        counter.events.subscribe(lambda e: sim.write(f"{setter} {value!r}") if e.name == "before_fetch" else None)
        assert counter.read() == value


def test_simulated_counter_fed_nothing_reads_no_signal(backend: str) -> None:
    with driver("counter", backend) as counter:
        counter.configure(CounterSettings(function="period", gate_time_s=0.1))
        with pytest.raises(OverflowReading):
            counter.read()


def test_simulated_counter_refuses_a_gate_beyond_its_range(backend: str) -> None:
    # The device file limits the gate to 10 s; like a SCPI instrument it queues -100 and stays silent.
    with driver("counter", backend) as counter:
        with pytest.raises(InstrumentErrorQueue, match='-100,"Command error"'):
            counter.configure(CounterSettings(function="period", gate_time_s=20.0))


def test_scope_record_round_trip(backend, world) -> None:
    sim = world("scope")
    volts = [0.0, 0.01, 3.29, 3.3, 3.31, 0.02, -0.01, 0.0]
    with driver("scope", backend) as scope:
        assert isinstance(scope, Scope)
        scope.configure(ScopeSettings(sample_rate_hz=2e6, record_length=len(volts), range_v=8.0, t0_s=-2e-6,
                                      trigger_level_v=1.65))
        assert int(sim.query("SENS:SWE:POIN?")) == len(volts)
        assert float(sim.query("TRIG:LEV?")) == 1.65
        scope.events.subscribe(lambda e: sim.write("SIM:CURV " + ",".join(f"{v:.4E}" for v in volts))
                               if e.name == "before_fetch" else None)
        record = scope.acquire()
    assert record.volts.tolist() == volts
    assert record.sample_interval_s == 5e-7 and record.t0_s == -2e-6


def test_simulated_scope_refuses_binary_transfer(backend: str) -> None:
    with driver("scope", backend) as scope:
        with pytest.raises(InstrumentErrorQueue):
            scope.configure(ScopeSettings(sample_rate_hz=1e6, record_length=100, range_v=8.0, encoding="int16"))


def test_supply_measures_what_the_world_injects(backend, world) -> None:
    sim = world("supply")
    with driver("supply", backend) as supply:
        assert isinstance(supply, Supply)
        supply.configure(12.0, 0.2)
        supply.output(True)
        assert sim.query("OUTP:STAT?") == "1" and float(sim.query("SOUR:VOLT?")) == 12.0
        supply.events.subscribe(lambda e: sim.write("SIM:CURR 0.0315") if e.name == "before_measure" else None)
        assert supply.measure_current() == 0.0315


def test_actuator_positions_are_visible_to_the_world(backend, world) -> None:
    sim = world("actuator")
    with driver("actuator", backend) as actuator:
        assert isinstance(actuator, Actuator)
        actuator.home()
        assert actuator.move_both(10.0, 90.0) == (pytest.approx(10.0), pytest.approx(90.0))
        assert actuator.travel_limits("a") == (0.0, 300.0)
    assert sim.query("KNOB:A:POS?") == "42.000" and sim.query("KNOB:B:POS?") == "258.000"  # 15 + 0.1/0.9 * 270


def test_visa_timeout_is_an_instrument_timeout_naming_resource_and_code(backend: str) -> None:
    with VisaTransport(RESOURCES["counter"], backend, timeout_s=0.05) as t:
        with pytest.raises(InstrumentTimeout, match=r"sim-counter.*VI_ERROR_TMO, VISA code -1073807339"):
            t.query("FETC:VOLT?")     # not in the device file: no reply


def test_closed_visa_transport_has_lost_its_connection(backend: str) -> None:
    t = VisaTransport(RESOURCES["counter"], backend)
    t.close()
    with pytest.raises(ConnectionLost, match="sim-counter"):
        t.query("*IDN?")


def test_missing_device_file_is_an_instrument_fault(tmp_path: Path) -> None:
    with pytest.raises(InstrumentFault, match="cannot load the VISA backend"):
        VisaTransport(RESOURCES["counter"], f"{tmp_path / 'none.yaml'}@sim")


# -- parity: the same driver call, the same SCPI traffic, simulated or scripted --------------------------

def scenario(role: str) -> Callable[[Driver], None]:
    def counter(d: Counter) -> None:
        d.identify()
        d.reset()
        d.configure(CounterSettings(function="period", gate_time_s=0.01, trigger_level_v=1.0, coupling="ac"))
        d.read()

    def scope(d: Scope) -> None:
        d.identify()
        d.configure(ScopeSettings(sample_rate_hz=1e6, record_length=4, range_v=8.0))
        d.acquire()

    def supply(d: Supply) -> None:
        d.identify()
        d.configure(5.0, 0.1)
        d.output(True)
        d.measure_current()
        d.output(False)

    def actuator(d: Actuator) -> None:
        d.identify()
        d.home()
        d.move_both(10.0, 90.0)
        d.position_pct("a")

    return {"counter": counter, "scope": scope, "supply": supply, "actuator": actuator}[role]


SCRIPTED_REPLIES = {
    "counter": {"FETC:PER?": "1.0E-03"},
    "scope": {"*OPC?": "1", "TRAC:DATA? CH1": "0,1,1,0", "SENS:SWE:TINT?": "1E-6", "SENS:SWE:OFFS:TIME?": "0"},
    "supply": {"MEAS:CURR?": "0.02"},
}


@pytest.mark.parametrize("role", sorted(RESOURCES))
def test_sim_and_scripted_instruments_see_identical_scpi_traffic(role: str, backend: str, world) -> None:
    profile = load_profile(PROFILES[role])
    sim = world(role)
    injections = {"counter": "SIM:PER 1.0E-03", "scope": "SIM:CURV 0,1,1,0", "supply": "SIM:CURR 0.02"}
    if role in injections:
        sim.write(injections[role])

    simulated = RecordingTransport(VisaTransport(RESOURCES[role], backend, timeout_s=FAST_S))
    handler = FakeKA2() if role == "actuator" else FakeInstrument({"*IDN?": IDN[PROFILES[role]],
                                                                   **SCRIPTED_REPLIES.get(role, {})})
    scripted = RecordingTransport(ScriptedTransport(handler))
    for transport in (simulated, scripted):
        d = DRIVERS[role](Session(transport, profile))
        with d:
            scenario(role)(d)

    assert simulated.sent == scripted.sent
    assert [m.direction for m in simulated.traffic] == [m.direction for m in scripted.traffic]
    assert "clear" not in [m.direction for m in simulated.traffic]   # no retry was needed on the simulated bench


def test_closing_one_transport_leaves_another_on_the_same_backend_working(backend: str) -> None:
    # pyvisa shares one resource manager per VISA library; closing it would close every session.
    first = VisaTransport(RESOURCES["counter"], backend)
    with VisaTransport(RESOURCES["supply"], backend, timeout_s=FAST_S) as second:
        first.close()
        assert second.query("*IDN?").startswith("TESSALY INSTRUMENTS,YQ-P26")


BLOCK_DEVICE = r'''spec: "1.1"
devices:
  blocks:
    eom:
      TCPIP INSTR: {q: "\n", r: "\n"}
    dialogues:
      - {q: "DEF?", r: "#17ab\ncd#e"}
      - {q: "INDEF?", r: "#0xyz"}
      - {q: "SHORT?", r: "#19abc"}
resources:
  TCPIP0::sim-blocks::inst0::INSTR: {device: blocks}
'''


def test_visa_block_read_counts_bytes_past_a_newline_in_the_payload(tmp_path: Path) -> None:
    # A definite block's payload may hold the terminator byte; the header's length decides (IEEE 488.2
    # §8.7.9, from memory). pyvisa-sim carries 7-bit bytes, enough for a newline and a '#'.
    path = tmp_path / "blocks.yaml"
    path.write_text(BLOCK_DEVICE, encoding="utf-8")
    with VisaTransport("TCPIP0::sim-blocks::inst0::INSTR", f"{path}@sim", timeout_s=FAST_S) as t:
        assert t.query_block("DEF?") == b"#17ab\ncd#e\n"
        assert t.query_block("INDEF?") == b"#0xyz\n"
        with pytest.raises(InstrumentTimeout):
            t.query_block("SHORT?")          # 9 bytes announced, 4 sent (3 + the terminator): the read times out
