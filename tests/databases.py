"""The results databases the store, runner and analytics tests run against: a SQLite file and PostgreSQL.

PostgreSQL is the line's database once a line outgrows one machine, so the tests that write and read
results run against both. ``.ci/run`` starts a throwaway PostgreSQL server (``.ci/postgres-up``) and
exports its URL as ``$KNOBLINE_TEST_POSTGRES`` (a user allowed to create databases, on its maintenance
database); each test gets a database of its own, created empty and dropped afterwards. Without the
variable the PostgreSQL cases are skipped, with the reason given; with ``$KNOBLINE_REQUIRE_POSTGRES``
set (CI sets it) a missing server fails them instead, so CI can never pass by skipping.
"""

from __future__ import annotations

import os
import secrets
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
from sqlalchemy import Connection, create_engine, text
from sqlalchemy.engine import make_url

#: the backends a ``database_url`` fixture is parametrised over
BACKENDS = ("sqlite", "postgresql")
POSTGRES_ENV = "KNOBLINE_TEST_POSTGRES"
REQUIRE_ENV = "KNOBLINE_REQUIRE_POSTGRES"


def postgres_admin_url() -> str:
    """The test server's URL, or skip (fail when PostgreSQL is required) when there is none."""
    url = os.environ.get(POSTGRES_ENV)
    if url:
        return url
    message = (f"no PostgreSQL server for the tests: set {POSTGRES_ENV} to a URL of a user who may create "
               "databases, or run `source .ci/postgres-up` first")
    if os.environ.get(REQUIRE_ENV):
        pytest.fail(message)
    pytest.skip(message)


@contextmanager
def postgres_database(name: str | None = None, admin: str | None = None) -> Iterator[str]:
    """A new empty PostgreSQL database (``name``, else a random one) for one test or bench; its URL.

    On the server of ``admin`` (default: :func:`postgres_admin_url`). A database of that name left
    by an interrupted run is dropped first. Dropped afterwards, connections and all.
    """
    admin_url = make_url(admin or postgres_admin_url())
    name = name or f"knobline_test_{secrets.token_hex(6)}"
    engine = create_engine(admin_url, isolation_level="AUTOCOMMIT")
    try:
        with engine.connect() as connection:
            connection.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
            connection.execute(text(f'CREATE DATABASE "{name}"'))
        try:
            yield admin_url.set(database=name).render_as_string(hide_password=False)
        finally:
            with engine.connect() as connection:
                # FORCE (PostgreSQL 13+) ends connections a test's engine pool still holds.
                connection.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
    finally:
        engine.dispose()


@contextmanager
def fresh_database(backend: str, folder: Path) -> Iterator[str]:
    """A URL of a new, empty results database of ``backend`` (a SQLite file lives in ``folder``)."""
    if backend == "sqlite":
        yield f"sqlite:///{folder / 'results.sqlite'}"
    elif backend == "postgresql":
        with postgres_database() as url:
            yield url
    else:
        raise ValueError(f"unknown backend {backend!r}; expected one of {', '.join(BACKENDS)}")


@contextmanager
def past_result_triggers(connection: Connection, table: str) -> Iterator[None]:
    """Let a test change stored results of ``table`` inside ``connection``'s transaction (an older
    database, a hand edit): on PostgreSQL migration 0005's triggers refuse it, so the table owner
    disables them (ALTER TABLE ... DISABLE TRIGGER USER) and enables them again; SQLite has none."""
    postgres = connection.dialect.name == "postgresql"
    if postgres:
        connection.execute(text(f'ALTER TABLE "{table}" DISABLE TRIGGER USER'))
    yield
    if postgres:
        connection.execute(text(f'ALTER TABLE "{table}" ENABLE TRIGGER USER'))
