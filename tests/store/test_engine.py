"""Where the database is and how SQLite connections are set up."""

from __future__ import annotations

from pathlib import Path

import pytest
from sqlalchemy import text
from sqlalchemy.exc import IntegrityError

from fixture.store import Store, default_db_path, make_engine, resolve_url


def test_sqlite_connections_use_wal_full_sync_and_foreign_keys(store: Store) -> None:
    # PRAGMA semantics from the SQLite documentation (from memory): journal_mode answers the mode in
    # lower case, foreign_keys 1 = on, synchronous 2 = FULL, busy_timeout in milliseconds.
    with store.engine.connect() as connection:
        assert connection.execute(text("PRAGMA journal_mode")).scalar() == "wal"
        assert connection.execute(text("PRAGMA foreign_keys")).scalar() == 1
        assert connection.execute(text("PRAGMA synchronous")).scalar() == 2
        assert connection.execute(text("PRAGMA busy_timeout")).scalar() > 0


def test_foreign_keys_are_enforced(store: Store) -> None:
    # SQLite ignores REFERENCES unless foreign_keys is on (SQLite foreign key docs, from memory).
    with pytest.raises(IntegrityError), store.engine.begin() as connection:
        connection.execute(text("INSERT INTO unit (serial, product_design_id) VALUES ('X', 999)"))


def test_a_url_is_taken_as_given_and_a_path_becomes_a_sqlite_url(tmp_path: Path) -> None:
    assert resolve_url("postgresql://line@db/results") == "postgresql://line@db/results"
    assert resolve_url(str(tmp_path / "r.sqlite")) == f"sqlite:///{tmp_path / 'r.sqlite'}"


def test_the_environment_variable_names_the_database(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    monkeypatch.setenv("KNOBLINE_DB", str(tmp_path / "env.sqlite"))
    assert resolve_url(None) == f"sqlite:///{tmp_path / 'env.sqlite'}"
    assert resolve_url("sqlite:///other.sqlite") == "sqlite:///other.sqlite"


def test_the_default_file_follows_xdg_data_home(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    # XDG Base Directory Specification: $XDG_DATA_HOME, defaulting to ~/.local/share (from memory).
    monkeypatch.delenv("KNOBLINE_DB", raising=False)
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    assert default_db_path() == tmp_path / "data" / "knobline" / "results.sqlite"
    monkeypatch.delenv("XDG_DATA_HOME")
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    assert default_db_path() == tmp_path / "home" / ".local" / "share" / "knobline" / "results.sqlite"


def test_the_folder_of_a_new_sqlite_file_is_created(tmp_path: Path) -> None:
    engine = make_engine(str(tmp_path / "a" / "b" / "r.sqlite"))
    try:
        with engine.connect() as connection:
            connection.execute(text("SELECT 1"))
        assert (tmp_path / "a" / "b" / "r.sqlite").exists()
    finally:
        engine.dispose()
