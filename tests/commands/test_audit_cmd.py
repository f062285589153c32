"""``knobline audit``: the trail real events leave (a certificate issue, a retest), and ``--verify``."""

from __future__ import annotations

import hashlib
import json
import shutil
import sqlite3
from pathlib import Path

import pytest
from click.testing import CliRunner

from tests.demo_lots import LOT_OPTIONS
from fixture.cli import main
from fixture.reporting.signing import station_key
from fixture.store import DB_ENV_VAR
from tests.json_keys import all_keys, documented_json_keys
from tests.programs import release_demo_programs

SERIAL = "PW22-000901"
#: entries before the units were tested: the three demo files released, an approval and a release each
BASE = 6


@pytest.fixture(scope="module")
def tested(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A database where one unit was tested twice with ``--certificates``: a retest, two certificates."""
    folder = tmp_path_factory.mktemp("audit")
    key = station_key(folder / "keys" / "station-key.pem", create_missing=True)
    # certificates are for runs of released programs (README "Released test programs")
    release_demo_programs(str(folder / "r.sqlite"), folder / "people")
    for operator in ("ana", "ben"):
        result = CliRunner().invoke(main, ["test", "--serial", SERIAL, *LOT_OPTIONS,
                                           "--db", str(folder / "r.sqlite"), "--operator", operator,
                                           "--certificates", str(folder / "certs"), "--key", str(key.path)],
                                    catch_exceptions=False)
        assert result.exit_code == 0, result.stderr
    return folder


@pytest.fixture
def db(tested: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """A copy of the tested database for one test (some tests tamper with it)."""
    monkeypatch.delenv(DB_ENV_VAR, raising=False)
    shutil.copy(tested / "r.sqlite", tmp_path / "r.sqlite")
    return tmp_path / "r.sqlite"


def audit(*args: str):
    return CliRunner().invoke(main, ["audit", *args], catch_exceptions=False)


def test_a_certificate_issue_and_a_retest_are_on_the_trail_in_order(db: Path, tested: Path) -> None:
    result = audit("--db", str(db), "--json")
    assert result.exit_code == 0, result.stderr
    entries = json.loads(result.stdout)["entries"]
    assert [e["action"] for e in entries[:BASE]] == ["approval", "release"] * 3
    entries = entries[BASE:]
    assert [(e["id"], e["action"]) for e in entries] == [(BASE + 1, "certificate-issue"), (BASE + 2, "retest"),
                                                        (BASE + 3, "certificate-issue")]
    first_cert, retest, second_cert = entries
    assert (retest["who"], retest["subject"], retest["detail"]["retest_of"]) == ("ben", SERIAL, 1)
    assert retest["before_sha256"] == retest["after_sha256"]  # the same sequence file both times
    # The entry names the certificate file by its number and its SHA-256 (hashlib, FIPS 180-4).
    html = tested / "certs" / f"{second_cert['subject']}.html"
    assert second_cert["after_sha256"] == hashlib.sha256(html.read_bytes()).hexdigest()
    assert (first_cert["detail"]["run_id"], second_cert["detail"]["run_id"]) == (1, 2)
    assert second_cert["previous_hash"] == retest["entry_hash"]
    # Attributable (README's audit section): a certificate issued with the run names the run's operator.
    assert (first_cert["who"], second_cert["who"]) == ("ana", "ben")


def test_the_text_trail_is_in_words_oldest_first(db: Path) -> None:
    result = audit("--db", str(db), "--limit", "3")
    assert result.exit_code == 0, result.stderr
    lines = result.stdout.splitlines()
    assert lines[0].startswith(f"entry {BASE + 1}  ") and "certificate issued by" in lines[0]
    assert lines[2].startswith(f"entry {BASE + 2}  ") and lines[2].endswith("unit retested by ben")
    assert lines[3].startswith(f"  about {SERIAL}: SHA-256 before ")
    assert "retest of 1" in lines[3] and "earlier verdict pass" in lines[3]
    assert "retest_of" not in result.stdout  # keys are turned into words


def test_the_trail_filters_by_action_subject_since_and_limit(db: Path) -> None:
    def ids(*args: str) -> list[int]:
        result = audit("--db", str(db), "--json", *args)
        assert result.exit_code == 0, result.stderr
        return [e["id"] for e in json.loads(result.stdout)["entries"]]

    assert ids("--action", "retest") == [BASE + 2]
    assert ids("--subject", SERIAL) == [BASE + 2]
    assert ids("--limit", "2") == [BASE + 2, BASE + 3]
    assert ids("--action", "release") == [2, 4, 6]
    assert ids("--since", "2000-01-01") == list(range(1, BASE + 4))
    assert ids("--since", "2999-01-01T00:00") == []
    assert "no audit entries match" in audit("--db", str(db), "--action", "retirement").stdout


def test_verify_says_intact_with_the_latest_hash_and_exits_0(db: Path) -> None:
    result = audit("--db", str(db), "--verify")
    assert result.exit_code == 0, result.stderr
    head = json.loads(audit("--db", str(db), "--json").stdout)["entries"][-1]["entry_hash"]
    assert result.stdout.startswith(f"audit trail intact: {BASE + 3} entries")
    assert head in result.stdout


@pytest.mark.parametrize("statement, entry, kind", [
    (f"UPDATE audit_entry SET who = 'mallory' WHERE id = {BASE + 2}", BASE + 2, "edited"),
    (f"UPDATE audit_entry SET detail = '{{}}' WHERE id = {BASE + 1}", BASE + 1, "edited"),
    ("UPDATE audit_entry SET detail = '{}' WHERE id = 1", 1, "edited"),
    (f"DELETE FROM audit_entry WHERE id = {BASE + 2}", BASE + 2, "missing"),
])
def test_verify_names_the_first_broken_link_after_a_plain_sqlite_client_changed_the_trail(
        db: Path, statement: str, entry: int, kind: str) -> None:
    break_trail(db, statement)  # anyone with the file can drop SQLite's triggers; the chain still tells
    result = audit("--db", str(db), "--verify")
    assert result.exit_code == 1, result.stdout + result.stderr
    assert result.stdout.startswith(f"AUDIT TRAIL BROKEN at entry {entry}: ")
    data = json.loads(audit("--db", str(db), "--verify", "--json").stdout)
    assert (data["intact"], data["broken"]["entry_id"], data["broken"]["kind"]) == (False, entry, kind)


def break_trail(db: Path, statement: str) -> None:
    """Change the trail as anyone with the file can: drop SQLite's triggers, then plain SQL."""
    connection = sqlite3.connect(db)
    with connection:
        connection.execute("DROP TRIGGER knobline_keep_audit_entry_update")
        connection.execute("DROP TRIGGER knobline_keep_audit_entry_delete")
        connection.execute(statement)
    connection.close()


def test_json_keys_are_the_ones_the_help_lists(db: Path) -> None:
    documented = documented_json_keys(audit("--help").stdout, {"or", "null", "with", "verify", "is", "edited",
                                                               "missing", "unlinked", "shortened"})
    listed = json.loads(audit("--db", str(db), "--json").stdout)
    intact = json.loads(audit("--db", str(db), "--verify", "--json").stdout)
    break_trail(db, "DELETE FROM audit_entry WHERE id = 1")
    broken = json.loads(audit("--db", str(db), "--verify", "--json").stdout)
    detail_keys = {k for e in listed["entries"] for k in e["detail"]}  # the detail is the action's own
    assert (all_keys(listed) - detail_keys) | all_keys(intact) | all_keys(broken) == documented


def test_verify_with_a_noted_hash_finds_entries_removed_from_the_end(db: Path) -> None:
    noted = json.loads(audit("--db", str(db), "--verify", "--json").stdout)["head_hash"]
    assert audit("--db", str(db), "--verify", "--noted", noted).exit_code == 0
    break_trail(db, f"DELETE FROM audit_entry WHERE id = {BASE + 3}")
    assert audit("--db", str(db), "--verify").exit_code == 0  # the chain alone cannot tell
    result = audit("--db", str(db), "--verify", "--noted", noted.upper())
    assert result.exit_code == 1
    assert result.stdout.startswith(f"AUDIT TRAIL BROKEN at entry {BASE + 3}: no entry has the noted hash {noted}")
    assert audit("--db", str(db), "--noted", noted).exit_code == 2  # without --verify
    assert audit("--db", str(db), "--verify", "--noted", "abc").exit_code == 2


def test_verify_with_a_filter_or_without_a_database_is_bad_input(db: Path, tmp_path: Path) -> None:
    result = audit("--db", str(db), "--verify", "--action", "retest")
    assert result.exit_code == 2
    assert result.stderr.startswith("knobline: error: --verify walks the whole trail")
    result = audit("--db", str(tmp_path / "none.sqlite"), "--verify")
    assert result.exit_code == 2 and "found no file" in result.stderr
    assert not (tmp_path / "none.sqlite").exists()
