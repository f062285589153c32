"""The audit trail: the documented hash, the chain catching edited, deleted and inserted entries, the
PostgreSQL triggers, and appends from several processes at once."""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import sqlite3
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
from sqlalchemy import insert, text
from sqlalchemy.engine import make_url
from sqlalchemy.exc import DBAPIError

from fixture.errors import SoftwareFault, UserInputError
from fixture.store import Store, open_store
from fixture.store.audit import GENESIS_HASH, append_audit, audit_trail, entry_hash_of
from fixture.store.audit_actions import AuditAction
from fixture.store.audit_chain import BreakKind, check_audit_chain, verify_audit_chain
from fixture.store.models import AuditEntryRow, table_of
from tests.store.conftest import begin

FILE_BEFORE = hashlib.sha256(b"sequence revision A").hexdigest()
FILE_AFTER = hashlib.sha256(b"sequence revision B").hexdigest()


def five_entries(store: Store) -> None:
    for n in range(1, 6):
        append_audit(store, AuditAction.LIMIT_CHANGE, who=f"engineer {n}", subject=FILE_AFTER,
                     before_sha256=FILE_BEFORE, after_sha256=FILE_AFTER, detail={"n": n, "reason": "new lot"})


@contextmanager
def plain_client(store: Store) -> Iterator[Callable[..., None]]:
    """SQL as someone with a plain client would run it, past the audit table's triggers.

    SQLite: Python's sqlite3 module on the file, after dropping the triggers (anyone with the file
    can). PostgreSQL: the table owner disabling the triggers with ALTER TABLE (PostgreSQL docs,
    ALTER TABLE ... DISABLE TRIGGER, from memory). Values go in as ``:name`` parameters (both take them).
    """
    if store.engine.dialect.name == "sqlite":
        connection = sqlite3.connect(str(make_url(str(store.engine.url)).database))
        try:
            connection.execute("DROP TRIGGER IF EXISTS knobline_keep_audit_entry_update")
            connection.execute("DROP TRIGGER IF EXISTS knobline_keep_audit_entry_delete")
            yield lambda sql, **values: connection.execute(sql, values) and None
            connection.commit()
        finally:
            connection.close()
    else:
        with store.engine.begin() as connection:
            connection.execute(text("ALTER TABLE audit_entry DISABLE TRIGGER USER"))
            yield lambda sql, **values: connection.execute(text(sql), values) and None
            connection.execute(text("ALTER TABLE audit_entry ENABLE TRIGGER USER"))


def test_an_entry_hash_is_sha256_of_the_documented_serialisation(store: Store) -> None:
    # The serialisation of fixture/store/audit.py's docstring written out by hand (sorted keys, no
    # whitespace, UTF-8, timestamp with six fractional digits and Z), hashed with hashlib (SHA-256,
    # FIPS 180-4). Non-ASCII in `who` pins "characters as themselves", not \u escapes.
    first = append_audit(store, "certificate-issue", who="Zoë Brandt", subject="KL-CERT-1",
                         after_sha256=FILE_AFTER, detail={"serial": "PW22-1", "run_id": 7})
    second = append_audit(store, AuditAction.RETEST, who="Ann", subject="PW22-1")
    stored = audit_trail(store)
    assert [e.entry_hash for e in stored] == [first.entry_hash, second.entry_hash]
    t = stored[0].recorded_at.astimezone(dt.UTC)
    when = f"{t.year:04d}-{t.month:02d}-{t.day:02d}T{t.hour:02d}:{t.minute:02d}:{t.second:02d}.{t.microsecond:06d}Z"
    by_hand = ('{"action":"certificate-issue","after_sha256":"' + FILE_AFTER + '","before_sha256":null,'
               '"detail":"{\\"run_id\\":7,\\"serial\\":\\"PW22-1\\"}","id":1,"previous_hash":"' + "0" * 64 + '",'
               '"recorded_at":"' + when + '","subject":"KL-CERT-1","who":"Zoë Brandt"}')
    assert stored[0].entry_hash == hashlib.sha256(by_hand.encode("utf-8")).hexdigest()
    assert stored[0].detail_text == '{"run_id":7,"serial":"PW22-1"}'
    # Entry 1 chains from 64 zeros; entry 2 from entry 1's hash.
    assert (stored[0].previous_hash, stored[1].previous_hash) == (GENESIS_HASH, first.entry_hash)
    assert GENESIS_HASH == "0" * 64


def test_the_recorded_instant_survives_the_database_to_the_microsecond(store: Store) -> None:
    # The hash covers microseconds: the stored instant must read back exactly as hashed (else every
    # entry would look edited). Common practice, no source.
    made = [append_audit(store, AuditAction.RETEST, who="Ann", subject=f"PW22-{n}") for n in range(20)]
    assert [e.recorded_at for e in audit_trail(store)] == [e.recorded_at for e in made]
    assert verify_audit_chain(store) is None


def test_an_intact_trail_verifies_and_reports_its_latest_hash(store: Store) -> None:
    assert check_audit_chain(store).intact and check_audit_chain(store).entries == 0
    five_entries(store)
    check = check_audit_chain(store)
    assert (check.entries, check.broken) == (5, None)
    assert check.head_hash == audit_trail(store)[-1].entry_hash


@pytest.mark.parametrize("column, value", [("detail", '{"n":3,"reason":"old lot"}'), ("who", "someone else")])
def test_an_entry_edited_with_a_plain_client_breaks_the_chain_at_that_entry(store: Store, column: str,
                                                                             value: str) -> None:
    five_entries(store)
    with plain_client(store) as run:
        run(f"UPDATE audit_entry SET {column} = :value WHERE id = 3", value=value)
    assert getattr(audit_trail(store, subject=FILE_AFTER)[2], "detail_text" if column == "detail" else column) == value
    broken = verify_audit_chain(store)
    assert broken is not None
    assert (broken.entry_id, broken.kind) == (3, BreakKind.EDITED)
    assert "entry 3 was changed after it was recorded" in broken.message


def test_a_deleted_entry_is_named_as_missing(store: Store) -> None:
    five_entries(store)
    with plain_client(store) as run:
        run("DELETE FROM audit_entry WHERE id = 2")
    broken = verify_audit_chain(store)
    assert broken is not None and (broken.entry_id, broken.kind) == (2, BreakKind.MISSING)
    assert "entry 2 missing" in broken.message


def test_deleting_and_renumbering_is_caught_by_the_link(store: Store) -> None:
    five_entries(store)
    with plain_client(store) as run:
        run("DELETE FROM audit_entry WHERE id = 2")
        run("UPDATE audit_entry SET id = id - 1 WHERE id > 2")
    broken = verify_audit_chain(store)
    assert broken is not None and (broken.entry_id, broken.kind) == (2, BreakKind.UNLINKED)


def forge(store: Store, entry_id: int, previous_hash: str) -> str:
    """Insert an entry whose own hash is right (only the chain can tell); returns that hash."""
    when = dt.datetime.now(dt.UTC)
    fields = {"id": entry_id, "recorded_at": when, "who": "intruder", "action": "approval", "subject": FILE_AFTER,
              "before_sha256": None, "after_sha256": None, "detail_text": "{}", "previous_hash": previous_hash}
    digest = entry_hash_of(**fields)
    with store.engine.begin() as connection:
        if store.engine.dialect.name == "postgresql":
            connection.execute(text("ALTER TABLE audit_entry DISABLE TRIGGER USER"))
        connection.execute(insert(table_of(AuditEntryRow)).values(
            id=entry_id, recorded_at=when, who="intruder", action="approval", subject=FILE_AFTER,
            before_sha256=None, after_sha256=None, detail="{}", previous_hash=previous_hash, entry_hash=digest))
        if store.engine.dialect.name == "postgresql":
            connection.execute(text("ALTER TABLE audit_entry ENABLE TRIGGER USER"))
    return digest


def test_an_entry_inserted_mid_trail_with_a_correct_hash_of_its_own_breaks_the_chain_after_it(store: Store) -> None:
    five_entries(store)
    entries = audit_trail(store)
    with plain_client(store) as run:  # make room for a forged entry 3: shift 3..5 up by one, then free the link
        run("UPDATE audit_entry SET id = id + 1000 WHERE id >= 3")
        run("UPDATE audit_entry SET id = id - 999 WHERE id >= 1000")
        run("UPDATE audit_entry SET previous_hash = 'freed' WHERE id = 4")
    forged = forge(store, 3, entries[1].entry_hash)
    broken = verify_audit_chain(store)  # old entry 3, now 4, links to entry 2: not to the forged entry
    assert broken is not None and (broken.entry_id, broken.kind) == (4, BreakKind.UNLINKED)
    assert "entry 4 does not chain from entry 3" in broken.message
    with plain_client(store) as run:  # point it at the forged entry: its own hash no longer fits
        run("UPDATE audit_entry SET previous_hash = :forged WHERE id = 4", forged=forged)
    broken = verify_audit_chain(store)
    assert broken is not None and (broken.entry_id, broken.kind) == (4, BreakKind.EDITED)


def test_an_entry_added_at_the_end_that_does_not_chain_from_the_last_is_named(store: Store) -> None:
    five_entries(store)
    forge(store, 6, hashlib.sha256(b"not the last entry").hexdigest())
    broken = verify_audit_chain(store)
    assert broken is not None and (broken.entry_id, broken.kind) == (6, BreakKind.UNLINKED)
    assert "entry 6 does not chain from entry 5" in broken.message


def test_an_entry_rewritten_with_its_hash_recomputed_breaks_the_next_link(store: Store) -> None:
    five_entries(store)
    third = audit_trail(store)[2]
    fields = {"id": 3, "recorded_at": third.recorded_at, "who": "someone else", "action": third.action,
              "subject": third.subject, "before_sha256": third.before_sha256, "after_sha256": third.after_sha256,
              "detail_text": third.detail_text, "previous_hash": third.previous_hash}
    with plain_client(store) as run:
        run("UPDATE audit_entry SET who = 'someone else', entry_hash = :digest WHERE id = 3",
            digest=entry_hash_of(**fields))
    broken = verify_audit_chain(store)
    assert broken is not None and (broken.entry_id, broken.kind) == (4, BreakKind.UNLINKED)


def test_entries_removed_from_the_end_show_only_against_a_noted_hash(store: Store) -> None:
    five_entries(store)
    noted = check_audit_chain(store).head_hash
    assert verify_audit_chain(store, noted=audit_trail(store)[2].entry_hash) is None  # any entry still there
    with plain_client(store) as run:
        run("DELETE FROM audit_entry WHERE id >= 4")
    assert verify_audit_chain(store) is None  # the chain alone cannot tell
    broken = verify_audit_chain(store, noted=noted)
    assert broken is not None and (broken.entry_id, broken.kind) == (4, BreakKind.SHORTENED)
    assert "now ends at entry 3" in broken.message


def test_the_database_takes_every_action_word_and_no_other(store: Store) -> None:
    # The migration's word list is frozen apart from the enum; they must agree (common practice, no source).
    for action in AuditAction:
        append_audit(store, action, who="Ann", subject=str(action))
    assert [e.action for e in audit_trail(store)] == [str(a) for a in AuditAction]
    with pytest.raises(DBAPIError), store.engine.begin() as connection:
        connection.execute(insert(table_of(AuditEntryRow)).values(
            id=99, recorded_at=dt.datetime.now(dt.UTC), who="Ann", action="shred", subject="x", detail="{}",
            previous_hash="1" * 64, entry_hash="2" * 64))


def test_the_trail_filters_by_action_subject_and_time(store: Store) -> None:
    five_entries(store)
    middle = dt.datetime.now(dt.UTC)
    append_audit(store, AuditAction.RETEST, who="Ann", subject="PW22-000001")
    assert [e.id for e in audit_trail(store, action="retest")] == [6]
    assert [e.id for e in audit_trail(store, subject=FILE_AFTER)] == [1, 2, 3, 4, 5]
    assert [e.id for e in audit_trail(store, since=middle)] == [6]
    assert [e.id for e in audit_trail(store, until=middle)] == [1, 2, 3, 4, 5]
    assert [e.id for e in audit_trail(store, limit=2)] == [5, 6]  # the newest, oldest first


def test_an_append_refuses_what_is_not_an_entry(store: Store) -> None:
    with pytest.raises(SoftwareFault, match="audit action"):
        append_audit(store, "shred", who="Ann", subject="x")
    with pytest.raises(UserInputError, match="audit person"):
        append_audit(store, AuditAction.RETEST, who="Ann\x1b[2J", subject="x")
    with pytest.raises(UserInputError, match="audit person"):
        append_audit(store, AuditAction.RETEST, who="  ", subject="x")
    with pytest.raises(UserInputError, match="audit subject"):
        append_audit(store, AuditAction.RETEST, who="Ann", subject="x" * 201)
    with pytest.raises(SoftwareFault, match="before_sha256"):
        append_audit(store, AuditAction.RETEST, who="Ann", subject="x", before_sha256="ABC")
    with pytest.raises(SoftwareFault, match="audit detail"):
        append_audit(store, AuditAction.RETEST, who="Ann", subject="x", detail={"u": float("nan")})
    assert audit_trail(store) == []


def test_a_retest_is_on_the_trail_and_a_first_test_is_not(store: Store) -> None:
    first = begin(store)
    assert audit_trail(store, action=AuditAction.RETEST) == []
    store.finish_run(first, "fail")
    second = begin(store)
    (entry,) = audit_trail(store, action=AuditAction.RETEST)
    assert (entry.action, entry.who, entry.subject) == ("retest", "operator", "PW22-000001")
    assert entry.detail == {"run_id": second, "retest_of": first, "earlier_verdict": "fail", "station": "line-1",
                            "design_sha256": entry.detail["design_sha256"]}


def test_a_retest_whose_audit_entry_cannot_be_written_is_not_stored_either(store: Store, monkeypatch) -> None:
    # Contemporaneous and complete records (the ALCOA principles as README's audit section cites them,
    # from memory): a retest run stored without its audit entry would be an action the trail does not show.
    import fixture.store.store as store_module

    first = begin(store)
    store.finish_run(first, "fail")

    def failing(connection, run_id):
        raise RuntimeError("audit table unavailable")

    monkeypatch.setattr(store_module, "retest_entry_in", failing)
    with pytest.raises(RuntimeError, match="audit table unavailable"):
        begin(store)
    with store.engine.connect() as connection:
        assert connection.execute(text("SELECT COUNT(*) FROM run")).scalar_one() == 1


# -- PostgreSQL: the triggers --------------------------------------------------------------------------
def refused(store: Store, sql: str) -> str:
    with pytest.raises(DBAPIError) as caught, store.engine.begin() as connection:
        connection.execute(text(sql))
    return str(caught.value.orig)


def test_on_sqlite_the_audit_rows_refuse_update_and_delete_through_knobline(store: Store) -> None:
    if store.engine.dialect.name != "sqlite":
        pytest.skip("SQLite's own triggers")
    five_entries(store)
    assert "kept as recorded" in refused(store, "UPDATE audit_entry SET who = 'x' WHERE id = 1")
    assert "kept as recorded" in refused(store, "DELETE FROM audit_entry WHERE id = 5")
    assert verify_audit_chain(store) is None


def test_on_postgresql_triggers_refuse_changing_audit_rows_and_results(store: Store) -> None:
    if store.engine.dialect.name != "postgresql":
        pytest.skip("the triggers are PostgreSQL's (migration 0005)")
    five_entries(store)
    now = dt.datetime.now(dt.UTC)
    run_id = begin(store)
    store.record_step(run_id, 0, "power up", "pass", now, now, "")
    store.finish_run(run_id, "pass")
    for sql in ("UPDATE audit_entry SET who = 'x' WHERE id = 1", "DELETE FROM audit_entry WHERE id = 5",
                "TRUNCATE audit_entry", f"DELETE FROM step_result WHERE run_id = {run_id}",
                "UPDATE step_result SET verdict = 'fail'", "DELETE FROM unit_lot", "DELETE FROM run",
                "UPDATE unit SET serial = 'PW22-000010'"):
        assert "refused" in refused(store, sql), sql
    message = refused(store, f"UPDATE run SET operator = 'eve' WHERE id = {run_id}")
    assert f"run {run_id} refused: its verdict pass is decided" in message
    assert verify_audit_chain(store) is None and len(audit_trail(store)) == 5
    assert store.previous_runs("PW22-000001")[0].verdict == "pass"


def test_on_postgresql_a_running_run_takes_its_heartbeat_and_verdict_but_keeps_what_it_tests(store: Store) -> None:
    if store.engine.dialect.name != "postgresql":
        pytest.skip("the triggers are PostgreSQL's (migration 0005)")
    run_id = begin(store)
    assert "only its verdict, end, heartbeat and owner" in refused(
        store, f"UPDATE run SET operator = 'eve' WHERE id = {run_id}")
    with store.engine.begin() as connection:
        connection.execute(text("UPDATE run SET heartbeat_at = now() WHERE id = :id"), {"id": run_id})
    store.finish_run(run_id, "aborted")
    assert store.previous_runs("PW22-000001")[0].verdict == "aborted"


# -- several stations at once ---------------------------------------------------------------------------
APPENDER = """
import sys, time
from fixture.store import open_store
from fixture.store.audit import append_audit
url, start_at, me, count = sys.argv[1], float(sys.argv[2]), sys.argv[3], int(sys.argv[4])
with open_store(url) as store:
    time.sleep(max(0.0, start_at - time.time()))  # all start appending at one moment
    for i in range(count):
        append_audit(store, "certificate-issue", who=f"station {me}", subject=f"{me}-{i}", detail={"i": i})
print("appended")
"""


def test_several_processes_appending_at_once_lose_nothing_and_keep_one_chain(db_url: str) -> None:
    # Without the lock two appends read the same last entry and one dies on the primary key (or, with
    # ids from a sequence, the chain forks). A wall-clock start barrier (common practice, no source).
    processes, each = 4, 40
    with open_store(db_url):
        pass  # migrated once up front: the race under test is the appends, not the migration
    start_at = time.time() + 4.0
    children = [subprocess.Popen([sys.executable, "-c", APPENDER, db_url, str(start_at), str(p), str(each)],
                                 stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                                 cwd=Path(__file__).resolve().parents[2]) for p in range(processes)]
    results = [child.communicate(timeout=300) for child in children]
    assert [child.returncode for child in children] == [0] * processes, [err[-800:] for _, err in results]
    with open_store(db_url) as store:
        entries = audit_trail(store)
        check = check_audit_chain(store)
    assert check.broken is None and check.entries == processes * each
    assert [e.id for e in entries] == list(range(1, processes * each + 1))
    assert sorted(e.subject for e in entries) == sorted(f"{p}-{i}" for p in range(processes) for i in range(each))
    # Interleaved, not one process after another: the test did race.
    assert len({e.who for e in entries[: processes * each // 2]}) > 1
    assert json.loads(entries[0].detail_text).keys() == {"i"}
