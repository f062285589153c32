"""Who owns a run or a station: process identity, the station lease, and which runs count as left behind."""

from __future__ import annotations

import datetime as dt
import os
import subprocess
import sys
from collections.abc import Iterator

import pytest
from sqlalchemy import text

from fixture.store import Store
from fixture.store.lease import LeaseHolder, beat, claim_lease, lease_holder, release_lease
from fixture.store.owner import ProcessIdentity, owner_gone, process_start_token
from tests.store.conftest import begin, set_owner

NOW = dt.datetime(2026, 12, 3, 6, 30, tzinfo=dt.UTC)
OTHER_HOST = "line3-pc-that-is-not-this-one"


@pytest.fixture
def sleeper() -> Iterator[subprocess.Popen[bytes]]:
    """A live process on this host that is not the test process."""
    child = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        yield child
    finally:
        child.kill()
        child.wait(timeout=30)


def identity_of(pid: int) -> ProcessIdentity:
    return ProcessIdentity(ProcessIdentity.current().host, pid, process_start_token(pid) or "")


def dead_pid() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait(timeout=30)
    return child.pid


# -- process identity ----------------------------------------------------------------------
def test_this_process_is_alive_and_a_reused_pid_is_not_the_same_process() -> None:
    me = ProcessIdentity.current()
    assert me.alive_here()
    # Same pid, another start token: what a pid reused after its owner died looks like (proc(5) starttime).
    assert not ProcessIdentity(me.host, me.pid, "another-boot:12345").alive_here()


def test_a_process_that_exited_is_gone() -> None:
    pid = dead_pid()
    assert process_start_token(pid) is None
    assert not ProcessIdentity(ProcessIdentity.current().host, pid, "").alive_here()


def test_each_process_has_its_own_start_token(sleeper: subprocess.Popen[bytes]) -> None:
    # proc(5): field 22 starttime differs for processes started at different ticks; boot id prefixes it.
    mine, theirs = process_start_token(os.getpid()), process_start_token(sleeper.pid)
    assert mine and theirs and mine != theirs
    assert process_start_token(sleeper.pid) == theirs  # stable while the process lives


def test_an_owner_on_another_host_is_gone_only_after_the_stale_timeout() -> None:
    # Common practice, no source: a remote owner is judged by its heartbeat alone.
    remote = ProcessIdentity(OTHER_HOST, 4711, "x:1")
    assert not owner_gone(remote, NOW - dt.timedelta(seconds=119), NOW, stale_after_s=120)
    assert owner_gone(remote, NOW - dt.timedelta(seconds=121), NOW, stale_after_s=120)
    assert owner_gone(remote, None, NOW)
    # A run recorded before owners were kept is judged by age the same way.
    assert not owner_gone(None, NOW - dt.timedelta(seconds=10), NOW, stale_after_s=120)
    assert owner_gone(None, NOW - dt.timedelta(hours=1), NOW, stale_after_s=120)


def test_a_local_owner_is_judged_by_its_pid_not_its_heartbeat() -> None:
    me = ProcessIdentity.current()
    assert not owner_gone(me, NOW - dt.timedelta(days=3), NOW)  # a long operator prompt: still alive
    assert owner_gone(ProcessIdentity(me.host, dead_pid(), ""), NOW, NOW)


# -- runs --------------------------------------------------------------------------------------
def test_a_run_records_its_owner_and_a_heartbeat_renewed_at_each_step(store: Store) -> None:
    run_id = begin(store)
    set_owner(store, run_id, store.owner.host, store.owner.pid, store.owner.started, NOW - dt.timedelta(days=1))
    store.record_step(run_id, 0, "power-up", "pass", NOW, NOW, "")
    with store.engine.connect() as connection:
        row = connection.execute(text(
            "SELECT owner_host, owner_pid, owner_started, heartbeat_at FROM run WHERE id = :id"), {"id": run_id}).one()
    assert (row[0], row[1], row[2]) == (store.owner.host, os.getpid(), store.owner.started)
    assert str(row[3]) > str((NOW - dt.timedelta(days=1)).replace(tzinfo=None))


def test_a_live_owners_run_is_never_marked_incomplete(store: Store, sleeper: subprocess.Popen[bytes]) -> None:
    mine = begin(store, serial="A")
    theirs = begin(store, serial="B")
    other = identity_of(sleeper.pid)
    set_owner(store, theirs, other.host, other.pid, other.started, NOW - dt.timedelta(days=1))
    assert store.mark_incomplete_runs("line-1") == []
    sleeper.kill()
    sleeper.wait(timeout=30)
    assert store.mark_incomplete_runs("line-1") == [theirs]
    assert {r.run_id: r.verdict for r in store.runs()} == {mine: "running", theirs: "incomplete"}


def test_a_remote_owners_run_is_marked_incomplete_only_when_its_heartbeat_is_stale(store: Store) -> None:
    fresh, stale = begin(store, serial="A"), begin(store, serial="B")
    set_owner(store, fresh, OTHER_HOST, 10, "x:1", NOW - dt.timedelta(seconds=30))
    set_owner(store, stale, OTHER_HOST, 11, "x:2", NOW - dt.timedelta(minutes=10))
    assert store.mark_incomplete_runs("line-1", now=NOW, stale_after_s=120) == [stale]


# -- the station lease --------------------------------------------------------------------------
def test_a_free_station_is_claimed_and_released(store: Store) -> None:
    me = store.owner
    assert claim_lease(store, "line-1", me) is None
    holder = lease_holder(store, "line-1")
    assert holder is not None and holder.owner == me
    assert claim_lease(store, "line-1", me) is None  # renewing one's own lease
    release_lease(store, "line-1", me)
    assert lease_holder(store, "line-1") is None


def test_a_live_holder_keeps_the_station_and_is_named(store: Store, sleeper: subprocess.Popen[bytes]) -> None:
    other = identity_of(sleeper.pid)
    assert claim_lease(store, "line-1", other) is None
    refused = claim_lease(store, "line-1", store.owner)
    assert isinstance(refused, LeaseHolder) and refused.owner == other
    release_lease(store, "line-1", store.owner)  # not ours: left alone
    assert lease_holder(store, "line-1") == refused


def test_a_stale_lease_of_a_dead_pid_is_taken_over(store: Store) -> None:
    dead = ProcessIdentity(store.owner.host, dead_pid(), "")
    assert claim_lease(store, "line-1", dead) is None
    assert claim_lease(store, "line-1", store.owner) is None
    holder = lease_holder(store, "line-1")
    assert holder is not None and holder.owner == store.owner


def test_a_remote_lease_is_taken_over_only_after_the_stale_timeout(store: Store) -> None:
    remote = ProcessIdentity(OTHER_HOST, 4711, "x:1")
    assert claim_lease(store, "line-1", remote, now=NOW) is None
    assert claim_lease(store, "line-1", store.owner, now=NOW + dt.timedelta(seconds=60), stale_after_s=120) \
        is not None
    assert claim_lease(store, "line-1", store.owner, now=NOW + dt.timedelta(seconds=180), stale_after_s=120) \
        is None


def test_two_stations_hold_their_own_leases(store: Store, sleeper: subprocess.Popen[bytes]) -> None:
    assert claim_lease(store, "line-1", identity_of(sleeper.pid)) is None
    assert claim_lease(store, "line-2", store.owner) is None


def test_a_heartbeat_renews_the_lease_and_the_owners_running_runs(store: Store) -> None:
    run_id = begin(store)
    claim_lease(store, "line-1", store.owner, now=NOW)
    set_owner(store, run_id, store.owner.host, store.owner.pid, store.owner.started, NOW)
    later = NOW + dt.timedelta(minutes=5)
    assert beat(store, "line-1", store.owner, now=later)
    holder = lease_holder(store, "line-1")
    assert holder is not None and holder.heartbeat_at == later
    # The run's heartbeat moved too: a remote reader at `later` + 1 min would not call it stale.
    assert store.mark_incomplete_runs("line-1", now=later + dt.timedelta(minutes=1), stale_after_s=120) == []
    assert not beat(store, "line-1", ProcessIdentity(OTHER_HOST, 1, "x"), now=later)


def test_the_holder_is_described_in_one_line() -> None:
    holder = LeaseHolder("PW-22 end-of-line bench 2", ProcessIdentity("line3-pc", 4711, "b:1"),
                         acquired_at=dt.datetime(2026, 12, 3, 6, 12, tzinfo=dt.UTC), heartbeat_at=NOW)
    assert holder.describe(NOW) == "process 4711 on host line3-pc since 06:12 UTC"
    assert holder.describe(NOW + dt.timedelta(days=1)) == "process 4711 on host line3-pc since 2026-12-03 06:12 UTC"
