"""The bench server: the simulated instruments on real TCP sockets on 127.0.0.1 (ports chosen by the system).

The raw-socket SCPI convention checked here (one message per line, a reply only to a query) is
common practice for LAN instruments (port 5025 by custom), no source. Parity is against the
pyvisa-sim bench itself: both answer from the same device file.
"""

from __future__ import annotations

import socket
import threading
import time

import pytest
import pyvisa

from fixture.errors import ConnectionLost, InstrumentTimeout, UnparsableReply, UsageError
from fixture.instruments.backends import shipped_device_file
from fixture.instruments.connect import open_session
from fixture.instruments.visa import VisaTransport
from fixture.sim.bench_server import DEFAULT_PORTS, BenchServer, FaultTiming, served_station_text
from fixture.sim.socket_faults import FaultSchedule, ScheduledFault, SocketFault, parse_fault

ROLES = tuple(DEFAULT_PORTS)
FREE = {role: 0 for role in ROLES}


@pytest.fixture
def server():
    schedule = FaultSchedule()
    with BenchServer(FREE, faults=schedule, timing=FaultTiming(delay_s=1.0, reboot_s=0.3, split_pause_s=0.01)) as s:
        yield s


def _transport(server: BenchServer, role: str, timeout_s: float = 0.3) -> VisaTransport:
    return VisaTransport(server.resource(role), "@py", timeout_s=timeout_s)


def test_each_instrument_listens_on_its_own_port_chosen_by_the_system(server) -> None:
    ports = server.ports
    assert set(ports) == set(ROLES) and len(set(ports.values())) == 4 and 0 not in ports.values()
    assert server.resource("counter") == f"TCPIP0::127.0.0.1::{ports['counter']}::SOCKET"


def test_the_server_answers_every_message_as_the_pyvisa_sim_bench_does(server) -> None:
    messages = ["*IDN?", "CONF:PER", "CONF?", "SENS:FREQ:APER 0.25", "SENS:FREQ:APER?", "SIM:FREQ 1234.5",
                "FETC:FREQ?", "NO:SUCH:COMMAND", "SYST:ERR?", "SYST:ERR?", "*OPC?"]
    with shipped_device_file() as path:
        # a path spelling of its own: pyvisa-sim caches device state by the literal string
        manager = pyvisa.ResourceManager(f"{path.parent}/../devices/{path.name}@sim")
        sim = manager.open_resource("TCPIP0::sim-counter::inst0::INSTR", read_termination="\n",
                                    write_termination="\n")
        with _transport(server, "counter") as tcp:
            for text in messages:
                if "?" in text:
                    assert tcp.query(text) == sim.query(text), text
                else:
                    tcp.write(text)
                    sim.write(text)
        manager.close()


def test_an_unknown_query_gets_no_reply_and_the_client_times_out(server) -> None:
    with _transport(server, "counter", timeout_s=0.1) as tcp, pytest.raises(InstrumentTimeout):
        tcp.query("NO:SUCH:QUERY?")


def test_connections_to_one_instrument_share_its_state_as_the_world_needs(server) -> None:
    with _transport(server, "supply") as world, _transport(server, "supply") as driver:
        world.write("SIM:CURR 0.0125")
        assert world.query("*OPC?") == "1"
        assert float(driver.query("MEAS:CURR?")) == 0.0125


def test_a_reply_split_across_packets_is_read_whole(server) -> None:
    with _transport(server, "counter") as tcp:
        tcp.write("SIM:FREQ 777.25")
        server.faults.add(ScheduledFault("counter", SocketFault.SPLIT))
        assert float(tcp.query("FETC:FREQ?")) == 777.25
        assert server.faults.hits == 1


def test_garbage_bytes_are_an_unparsable_reply(server) -> None:
    server.faults.add(ScheduledFault("counter", SocketFault.GARBAGE))
    with _transport(server, "counter") as tcp, pytest.raises(UnparsableReply):
        tcp.query("FETC:FREQ?")


def test_a_wrong_reply_answers_another_query(server) -> None:
    server.faults.add(ScheduledFault("counter", SocketFault.WRONG_REPLY, match=r"FETC:.*"))
    with _transport(server, "counter") as tcp:
        assert tcp.query("FETC:FREQ?").startswith("TESSALY INSTRUMENTS,YQ-C83")
        assert tcp.query("FETC:FREQ?") == "9.910000000000E+37"  # once: the next one is answered


def test_a_delayed_reply_times_out_and_a_clear_leaves_no_late_reply_for_the_next_query(server) -> None:
    server.faults.add(ScheduledFault("counter", SocketFault.DELAY, match=r"\*IDN\?"))
    with _transport(server, "counter", timeout_s=0.2) as tcp:
        with pytest.raises(InstrumentTimeout):
            tcp.query("*IDN?")
        tcp.clear()  # a raw socket has no clear message: a new connection
        assert tcp.reopens == 1
        time.sleep(1.1)  # the late reply is sent meanwhile, to the old connection
        assert tcp.query("CONF?") == "FREQ"


def test_a_reply_dropped_mid_way_is_retried_on_a_new_connection(server) -> None:
    with _transport(server, "counter") as world:
        world.write("SIM:FREQ 50.5")
        assert world.query("*OPC?") == "1"
        server.faults.add(ScheduledFault("counter", SocketFault.DROP, match=r"FETC:.*"))
        with open_session(server.resource("counter"), "@py", "tessaly-yqc83", timeout_s=0.3) as session:
            assert session.query_float("fetch_frequency") == 50.5
            assert (session.retries, session.reopened, server.faults.hits) == (1, 1, 1)


def test_a_rebooted_instrument_refuses_connections_then_comes_back_with_its_settings_cleared(server) -> None:
    with _transport(server, "counter") as tcp:
        tcp.write("CONF:PER")
        assert tcp.query("CONF?") == "PER"
        server.faults.add(ScheduledFault("counter", SocketFault.REBOOT))
        with pytest.raises((ConnectionLost, InstrumentTimeout)):
            tcp.query("CONF?")
    with pytest.raises(ConnectionRefusedError):
        socket.create_connection(("127.0.0.1", server.ports["counter"]), timeout=1.0).close()
    assert server.wait_ready(5.0)
    with _transport(server, "counter") as tcp:
        assert tcp.query("CONF?") == "FREQ"  # the power-on default of bench.yaml


def test_a_session_reconnects_after_a_reboot_and_re_identifies_the_instrument(server) -> None:
    # timeout 0.1 s, reboot 0.3 s: the query that meets the reboot fails, and so does a reconnect
    # tried within the timeout while the instrument still refuses; once it is back, the next one works
    with open_session(server.resource("actuator"), "@py", "knobline-ka2", timeout_s=0.1) as session:
        session.identify()
        server.faults.add(ScheduledFault("actuator", SocketFault.REBOOT, match=r"KNOB:A:POS\?"))
        with pytest.raises(ConnectionLost):
            session.query_float("position", axis="A")
        with pytest.raises(ConnectionLost, match="reconnecting failed within 0.1 s"):
            session.query_float("position", axis="A")
        assert server.wait_ready(5.0)
        session.identity = None
        assert session.query_float("position", axis="A") == 0.0  # back with its power-on state
        assert session.reconnects == 1 and session.identity is not None


def test_stopping_closes_every_socket_and_thread_and_frees_the_ports() -> None:
    before = set(threading.enumerate())
    server = BenchServer(FREE).start()
    ports = server.ports
    with _transport(server, "scope") as tcp:
        assert tcp.query("*OPC?") == "1"
        server.stop()
    assert [t.name for t in set(threading.enumerate()) - before] == []
    again = BenchServer(ports)  # the same ports bind again
    again.stop()


def test_a_fault_on_the_command_line_reads_role_kind_query_and_count() -> None:
    fault = parse_fault("supply:reboot:3:0", ROLES)
    assert (fault.role, fault.kind, fault.after, fault.times) == ("supply", SocketFault.REBOOT, 2, None)
    assert [fault.due("MEAS:CURR?") for _ in range(4)] == [False, False, True, True]
    for bad in ("meter:delay", "counter:slow", "counter:delay:0", "counter:delay:x", "counter"):
        with pytest.raises(UsageError, match="expected ROLE:KIND"):
            parse_fault(bad, ROLES)


def test_a_station_file_is_pointed_at_the_ports_served() -> None:
    text = 'resource = "TCPIP0::127.0.0.1::5025::SOCKET"\nresource = "TCPIP0::127.0.0.1::5028::SOCKET"'
    assert served_station_text(text, {"counter": 40001, "actuator": 40004}) == (
        'resource = "TCPIP0::127.0.0.1::40001::SOCKET"\nresource = "TCPIP0::127.0.0.1::40004::SOCKET"')
