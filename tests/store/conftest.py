"""A fresh results database per test, with one design, sequence and station recorded."""

from __future__ import annotations

import datetime as dt
import hashlib
from collections.abc import Iterator

import pytest

from fixture.store import Store, open_store
from fixture.store.models import RunRow

# Hashes of made-up file contents; the store only needs them to be distinct.
DESIGN_SHA = hashlib.sha256(b"design file").hexdigest()
SEQUENCE_SHA = hashlib.sha256(b"sequence file").hexdigest()
STATION_SHA = hashlib.sha256(b"station file").hexdigest()


@pytest.fixture
def db_url(database_url: str) -> str:
    return database_url


@pytest.fixture
def store(db_url: str) -> Iterator[Store]:
    with open_store(db_url) as opened:
        opened.record_design("PW-22", "B", "demo-panel.toml", DESIGN_SHA)
        opened.record_sequence("final test", "final.toml", SEQUENCE_SHA)
        opened.record_station("line-1", "hall 2", STATION_SHA, "line-1.toml")
        yield opened


def begin(store: Store, serial: str = "PW22-000001", station: str = "line-1", **kwargs: object) -> int:
    """Begin a run with the fixture's design and sequence."""
    lots = kwargs.pop("lots", {"c_integrator": "L-C1"})
    return store.begin_run(serial, lots, station, "operator", "0.0-test", SEQUENCE_SHA, DESIGN_SHA,
                           **kwargs)  # type: ignore[arg-type]


def set_owner(store: Store, run_id: int, host: str, pid: int, started: str,
              heartbeat_at: dt.datetime | None) -> None:
    """Make run ``run_id`` look owned by another process (the store stamps runs with its own)."""
    run = RunRow.__table__
    with store.engine.begin() as connection:
        connection.execute(run.update().where(run.c.id == run_id).values(
            owner_host=host, owner_pid=pid, owner_started=started, heartbeat_at=heartbeat_at))
