"""``knobline user``: passwords from a prompt or standard input (never an argument), stored as argon2id."""

from __future__ import annotations

import json

from click.testing import CliRunner

from fixture.cli import main
from fixture.store import open_store
from fixture.store.web_users import find_web_user
from fixture.web.passwords import check_password


def _run(args: list[str], stdin: str = ""):
    return CliRunner().invoke(main, args, input=stdin, catch_exceptions=False)


def test_a_user_added_with_the_password_on_standard_input_can_log_in_with_it(tmp_path) -> None:
    db = str(tmp_path / "r.sqlite")
    added = _run(["user", "add", "Olwen Price", "--role", "operator", "--db", db], "a long secret\n")
    assert added.exit_code == 0, added.output
    assert "a long secret" not in added.output
    with open_store(db) as store:
        user = find_web_user(store, "Olwen Price")
    assert user is not None and user.role == "operator"
    assert user.password_hash.startswith("$argon2id$") and check_password(user.password_hash, "a long secret")
    listed = _run(["user", "list", "--db", db, "--json"])
    assert json.loads(listed.stdout)["users"][0]["name"] == "Olwen Price"


def test_a_new_password_replaces_the_old_one(tmp_path) -> None:
    db = str(tmp_path / "r.sqlite")
    _run(["user", "add", "eli", "--role", "engineer", "--db", db], "first password\n")
    assert _run(["user", "password", "eli", "--db", db], "second password\n").exit_code == 0
    with open_store(db) as store:
        user = find_web_user(store, "eli")
    assert user is not None
    assert check_password(user.password_hash, "second password")
    assert not check_password(user.password_hash, "first password")


def test_a_short_password_an_unknown_user_and_a_password_argument_are_refused(tmp_path) -> None:
    db = str(tmp_path / "r.sqlite")
    short = _run(["user", "add", "eli", "--role", "engineer", "--db", db], "short\n")
    assert short.exit_code == 2 and "at least 8 characters" in short.output  # NIST SP 800-63B 5.1.1.2
    unknown = _run(["user", "password", "nobody", "--db", db], "long enough\n")
    assert unknown.exit_code == 2
    argument = _run(["user", "add", "eli", "--role", "engineer", "--password", "long enough", "--db", db])
    assert argument.exit_code == 2  # there is no such option: a password never goes on the command line
    with open_store(db) as store:
        assert find_web_user(store, "eli") is None
