"""The audit trail's costs: appends per second (one process, and several at once) and the chain walk.

    python bench/audit_chain.py [--db URL] [--appends N] [--processes P] [--walk N]

* **appends**: ``--appends`` entries by :func:`fixture.store.audit.append_audit` in one process,
  each its own committed transaction (on SQLite, fsynced: ``synchronous=FULL``);
* **several at once**: ``--processes`` processes each appending ``--appends`` entries, started
  together; entries per second over all of them, and the chain checked afterwards;
* **walk**: a valid chain of ``--walk`` entries made in bulk (hashes by the same function, one
  executemany) and :func:`fixture.store.audit_chain.check_audit_chain` timed over it.

Each part uses a fresh database: a SQLite file in a temporary folder, or with ``--db`` a URL of
an *empty* PostgreSQL database (its audit table is written to).
"""

from __future__ import annotations

import argparse
import datetime as dt
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from sqlalchemy import insert, text  # noqa: E402

from fixture.store import open_store  # noqa: E402
from fixture.store.audit import GENESIS_HASH, append_audit, canonical_detail, entry_hash_of  # noqa: E402
from fixture.store.audit_chain import check_audit_chain  # noqa: E402
from fixture.store.models import AuditEntryRow, table_of  # noqa: E402

APPENDER = """
import sys, time
from fixture.store import open_store
from fixture.store.audit import append_audit
url, start_at, me, count = sys.argv[1], float(sys.argv[2]), sys.argv[3], int(sys.argv[4])
with open_store(url) as store:
    time.sleep(max(0.0, start_at - time.time()))
    began = time.time()
    for i in range(count):
        append_audit(store, "certificate-issue", who=f"station {me}", subject=f"{me}-{i}", detail={"i": i})
    print(began, time.time())
"""


def clear(url: str) -> None:
    """Empty the audit table of a PostgreSQL database (the bench's own, named by --db), past its triggers."""
    with open_store(url) as store, store.engine.begin() as connection:
        if store.engine.dialect.name == "postgresql":
            connection.execute(text("ALTER TABLE audit_entry DISABLE TRIGGER USER"))
            connection.execute(text("DELETE FROM audit_entry"))
            connection.execute(text("ALTER TABLE audit_entry ENABLE TRIGGER USER"))


def fresh(given: str | None, folder: Path, name: str) -> str:
    if given is None:
        return f"sqlite:///{folder / name}"
    clear(given)
    return given


def appends(url: str, count: int) -> float:
    with open_store(url) as store:
        start = time.perf_counter()
        for i in range(count):
            append_audit(store, "retest", who="bench", subject=f"PW22-{i:06d}", detail={"run_id": i})
        return count / (time.perf_counter() - start)


def concurrent(url: str, processes: int, count: int) -> tuple[float, int, bool]:
    with open_store(url):
        pass
    start_at = time.time() + 8.0  # time for every process to import and connect first
    children = [subprocess.Popen([sys.executable, "-c", APPENDER, url, str(start_at), str(p), str(count)], cwd=ROOT,
                                 stdout=subprocess.PIPE, text=True) for p in range(processes)]
    spans = [tuple(map(float, child.communicate()[0].split())) for child in children]
    # from the first append begun to the last one committed, over all processes
    seconds = max(end for _, end in spans) - min(begin for begin, _ in spans)
    with open_store(url) as store:
        check = check_audit_chain(store)
    return processes * count / seconds, check.entries, check.intact


def walk(url: str, count: int) -> tuple[float, int]:
    now = dt.datetime.now(dt.UTC)
    rows, previous = [], GENESIS_HASH
    for i in range(1, count + 1):
        fields = {"id": i, "recorded_at": now + dt.timedelta(microseconds=i), "who": "bench", "action": "retest",
                  "subject": f"PW22-{i:07d}", "before_sha256": None, "after_sha256": None,
                  "detail_text": canonical_detail({"run_id": i}), "previous_hash": previous}
        previous = entry_hash_of(**fields)
        rows.append({**{k: v for k, v in fields.items() if k != "detail_text"}, "detail": fields["detail_text"],
                     "entry_hash": previous})
    with open_store(url) as store:
        with store.engine.begin() as connection:
            connection.execute(insert(table_of(AuditEntryRow)), rows)
        start = time.perf_counter()
        check = check_audit_chain(store)
        seconds = time.perf_counter() - start
    assert check.intact, check.broken
    return seconds, check.entries


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--db", help="an empty PostgreSQL database's URL (default: SQLite files in a temp folder)")
    parser.add_argument("--appends", type=int, default=300)
    parser.add_argument("--processes", type=int, default=4)
    parser.add_argument("--walk", type=int, default=100_000)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        backend = "SQLite" if args.db is None else "PostgreSQL"
        rate = appends(fresh(args.db, folder, "a.sqlite"), args.appends)
        print(f"{backend}: {args.appends} appends in one process: {rate:.0f} entries/s")
        rate, entries, intact = concurrent(fresh(args.db, folder, "c.sqlite"), args.processes, args.appends)
        print(f"{backend}: {args.processes} processes x {args.appends} appends at once: {rate:.0f} entries/s "
              f"over all; {entries} entries, chain {'intact' if intact else 'BROKEN'}")
        seconds, entries = walk(fresh(args.db, folder, "w.sqlite"), args.walk)
        print(f"{backend}: chain walk of {entries} entries: {seconds:.2f} s "
              f"({entries / seconds:,.0f} entries/s)")


if __name__ == "__main__":
    main()
