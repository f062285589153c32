"""A station process killed mid-run loses nothing it had recorded, and the database stays sound."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap

from sqlalchemy import text

from fixture.store import Store, open_store
from tests.store.conftest import DESIGN_SHA, SEQUENCE_SHA

# The child records two steps, says so, then waits to be killed before it can finish the run.
CHILD = textwrap.dedent("""
    import datetime as dt, sys, time
    from fixture.store import MeasurementRecord, open_store
    store = open_store(sys.argv[1])
    run_id = store.begin_run("PW22-CRASH", {}, "line-1", "op", "0.0-test", sys.argv[2], sys.argv[3])
    now = dt.datetime.now(dt.UTC)
    for index in range(2):
        reading = MeasurementRecord("period", "period", 1.25e-3 + index, "s", "pass")
        store.record_step(run_id, index, f"step {index}", "pass", now, now, "", [reading])
    print(run_id, flush=True)
    time.sleep(60)
""")


def test_a_killed_run_keeps_its_steps_and_is_marked_incomplete(store: Store, db_url: str) -> None:
    child = subprocess.Popen([sys.executable, "-c", CHILD, db_url, SEQUENCE_SHA, DESIGN_SHA],
                             stdout=subprocess.PIPE, text=True)
    try:
        assert child.stdout is not None
        run_id = int(child.stdout.readline())
        os.kill(child.pid, signal.SIGKILL)
    finally:
        child.wait(timeout=30)
        if child.stdout is not None:
            child.stdout.close()
    assert child.returncode == -signal.SIGKILL

    with open_store(db_url) as after:
        assert after.previous_runs("PW22-CRASH")[0].verdict == "running"
        assert after.mark_incomplete_runs("line-1") == [run_id]
        detail = after.run(run_id)
        assert detail.summary.verdict == "incomplete"
        assert [s.name for s in detail.steps] == ["step 0", "step 1"]
        assert [s.measurements[0].value for s in detail.steps] == [1.25e-3, 1.25e-3 + 1]
        # PRAGMA integrity_check answers the single row 'ok' for a sound database (SQLite docs, from memory).
        # PostgreSQL has no such check to ask; its own recovery is the server's business.
        with after.engine.connect() as connection:
            if connection.dialect.name != "sqlite":
                return
            assert connection.execute(text("PRAGMA integrity_check")).scalars().all() == ["ok"]
