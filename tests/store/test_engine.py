"""Where the database is and how SQLite connections are set up."""

from __future__ import annotations

from pathlib import Path

import pytest
from sqlalchemy import text
from sqlalchemy.exc import IntegrityError

from fixture.store import Store, default_db_path, make_engine, resolve_url


def test_sqlite_connections_use_wal_full_sync_and_foreign_keys(tmp_path: Path) -> None:
    # PRAGMA semantics from the SQLite documentation (from memory): journal_mode answers the mode in
    # lower case, foreign_keys 1 = on, synchronous 2 = FULL, busy_timeout in milliseconds.
    with make_engine(str(tmp_path / "r.sqlite")).connect() as connection:
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


def _fifo(tmp_path: Path) -> Path:
    import os
    path = tmp_path / "pipe.sqlite"
    os.mkfifo(path)
    return path


@pytest.mark.parametrize(("make", "found"), [
    (lambda tmp: tmp, "a directory"),
    (_fifo, "a FIFO"),
    (lambda tmp: Path("/dev/zero"), "a device"),
    (lambda tmp: (tmp / "notes.sqlite", (tmp / "notes.sqlite").write_text("shopping list\n"))[0], "not a SQLite"),
    (lambda tmp: tmp / ("a" * 300 + ".sqlite"), "too long"),
])
def test_a_database_path_that_is_not_a_sqlite_file_is_bad_input(tmp_path: Path, make, found: str) -> None:
    # SQLite opens only regular files (sqlite.org "file is not a database", from memory); a directory,
    # FIFO or device given as --db must be the user's mistake (exit 2), named, never a hang or an
    # internal error. Linux limits one path component to 255 bytes (NAME_MAX, limits.h).
    from fixture.errors import UserInputError
    from fixture.store import open_store
    path = make(tmp_path)
    with pytest.raises(UserInputError, match=found) as caught:
        open_store(str(path)).close()
    assert "\n" not in str(caught.value)


@pytest.mark.parametrize("url", ["bogus://x", "postgresql+nodriver://line@db/results"])
def test_a_database_url_of_an_unknown_kind_is_bad_input(url: str) -> None:
    # SQLAlchemy raises NoSuchModuleError for a dialect or driver it cannot load (SQLAlchemy docs, engines).
    from fixture.errors import UserInputError
    from fixture.store import open_store
    with pytest.raises(UserInputError, match="database"):
        open_store(url).close()


def test_a_database_url_that_cannot_be_parsed_is_bad_input() -> None:
    # "://" has no dialect name: SQLAlchemy's make_url raises ArgumentError (SQLAlchemy docs, engines).
    from fixture.errors import UserInputError
    with pytest.raises(UserInputError, match="database ://: expected a SQLAlchemy URL"):
        resolve_url("://")
