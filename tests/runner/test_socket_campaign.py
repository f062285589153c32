"""The fault campaign over TCP sockets in CI: faults on the wire never give a wrong verdict (issue 13, item 2).

A sample of tests/runner/socket_campaign.py's grid: every socket fault (a reply past the timeout,
split across packets, a connection dropped mid-reply, an instrument reboot, garbage bytes, the
reply to another query) once on the counter, supply and actuator of a good unit, and each fault
on every reading query of one instrument for a defective unit; bench/fault_campaign.py --bench tcp
runs the full grid. Goals as in the in-process campaign (a verdict is a claim about the unit; a
station that cannot judge must say so; common practice, no source): no run stored pass with a step
missing, no good unit failed, no defective unit passed, nothing raised out of a run. A fault given
once must be recovered (reconnect and re-identify included) within the step's retry bound.
"""

from __future__ import annotations

import threading
from pathlib import Path

import pytest

from fixture.sim.socket_faults import SocketFault

from .socket_campaign import ROLES, SocketCampaignResult, SocketCase, ci_sample, run_socket_campaign, served_line


@pytest.fixture(scope="module")
def campaign() -> SocketCampaignResult:
    before = set(threading.enumerate())
    result = run_socket_campaign(ci_sample())
    result.leftover_threads = [t.name for t in set(threading.enumerate()) - before]  # type: ignore[attr-defined]
    return result


def test_the_sample_covers_every_socket_fault_on_every_role_and_both_modes(campaign) -> None:
    once = {(r.case.role, r.case.kind) for r in campaign.results if r.case.mode == "once"}
    assert once == {(role, kind) for role in ROLES for kind in SocketFault}
    assert {r.case.kind for r in campaign.results if r.case.mode == "persistent"} == set(SocketFault)


def test_no_run_over_sockets_is_stored_pass_with_a_step_missing(campaign) -> None:
    assert campaign.pass_incomplete() == [], campaign.summary()


def test_no_good_unit_is_failed_and_no_defective_unit_passed_by_a_fault_on_the_wire(campaign) -> None:
    assert campaign.good_failed() == [], campaign.summary()
    assert campaign.defective_passed() == [], campaign.summary()


def test_no_exception_escapes_a_run_over_sockets(campaign) -> None:
    assert campaign.escaped() == [], campaign.summary()


def test_a_socket_fault_given_once_is_recovered_and_the_good_unit_passes(campaign) -> None:
    # reconnect after a drop or a reboot, re-identify, clear by a new connection, retry
    once = [r for r in campaign.results if r.case.mode == "once"]
    assert [r.case.label for r in once if r.verdict != "pass"] == []


def test_the_campaign_leaves_no_server_thread_running(campaign) -> None:
    assert [n for n in campaign.leftover_threads if n.startswith("bench-server")] == []


def test_a_supply_that_restarts_after_power_up_leaves_the_unit_unjudged(tmp_path: Path) -> None:
    # The supply's third error-queue read is the one after the switch-off at the end of the run (one
    # after setting it, one after switching it on): the supply restarts there. It may have restarted
    # earlier for all the run knows, leaving the unit unpowered: not a verdict on the unit.
    with served_line(tmp_path) as run:
        result = run(SocketCase("supply", SocketFault.REBOOT, "once", "good", match=r"SYST:ERR\?", after=2),
                     "PW22-900001")
    assert result.verdict == "station-fault" and result.steps_passed == run.planned_steps


def test_a_timed_out_error_queue_read_is_followed_by_a_clear_so_the_next_query_gets_its_own_reply(
        tmp_path: Path) -> None:
    # SYST:ERR? is never retried (each read removes an entry); its late reply must not answer the
    # power-up step's retry. The retried step then passes on a new connection.
    with served_line(tmp_path) as run:
        result = run(SocketCase("supply", SocketFault.DELAY, "once", "good", match=r"SYST:ERR\?", after=1),
                     "PW22-900002")
        assert run.station.supply().session.reopened >= 1
    assert result.verdict == "pass"


def test_a_supply_connection_opened_again_after_power_up_leaves_the_unit_unjudged(tmp_path: Path) -> None:
    # The supply's connection is replaced while the unit is powered (as a retry after a timeout does):
    # every exchange still succeeds, but the supply may have restarted in between, leaving the unit
    # unpowered, so the run ends station fault and the output is switched off on the new connection.
    from fixture.instruments.events import MOVED

    with served_line(tmp_path) as run:
        supply = run.station.supply().session
        done = []

        def replace_supply_connection(event) -> None:
            if event.name == MOVED and not done:
                done.append(True)
                supply.transport.clear()  # a raw socket: a new connection

        unsubscribe = run.station.actuator().events.subscribe(replace_supply_connection)
        try:
            result = run(SocketCase("supply", SocketFault.SPLIT, "once", "good", match="NEVER"), "PW22-900003")
        finally:
            unsubscribe()
        assert done and supply.transport.query("OUTP:STAT?") == "0"
    assert result.verdict == "station-fault" and result.steps_passed == run.planned_steps
