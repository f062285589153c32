"""Web users in the store: one row per name, a role the web knows, the hash only (both databases)."""

from __future__ import annotations

import pytest
from sqlalchemy import text
from sqlalchemy.exc import IntegrityError

from fixture.errors import UserInputError
from fixture.store import open_store
from fixture.store.web_users import add_web_user, find_web_user, set_web_password, web_users


def test_a_user_is_added_found_and_given_a_new_hash(database_url: str) -> None:
    with open_store(database_url) as store:
        add_web_user(store, "olwen", "operator", "$argon2id$first")
        set_web_password(store, "olwen", "$argon2id$second")
        found = find_web_user(store, "olwen")
        assert found is not None and found.role == "operator" and found.password_hash == "$argon2id$second"
        assert find_web_user(store, "nobody") is None
        assert [u.name for u in web_users(store)] == ["olwen"]


def test_a_name_is_added_once_and_a_role_must_be_the_webs(database_url: str) -> None:
    with open_store(database_url) as store:
        add_web_user(store, "olwen", "operator", "h")
        with pytest.raises(UserInputError, match="already added"):
            add_web_user(store, "olwen", "quality", "h")
        with pytest.raises(UserInputError, match="role"):
            add_web_user(store, "eli", "approver", "h")
        with pytest.raises(UserInputError, match="no such|expected a user"):
            set_web_password(store, "nobody", "h")


def test_the_database_itself_refuses_a_role_the_web_does_not_know(database_url: str) -> None:
    # the CHECK constraint of migration 0008, whoever writes the table
    with open_store(database_url) as store, pytest.raises(IntegrityError):
        with store.engine.begin() as con:
            con.execute(text("INSERT INTO web_user (name, role, password_hash, added_at, password_set_at) "
                             "VALUES (:n, :r, :h, :t, :t)"),
                        {"n": "x", "r": "admin", "h": "h", "t": "2026-12-04 10:00:00"})
