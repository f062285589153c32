"""Alembic migrations of the results store: an empty database reaches head, and head is the models."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import inspect, text

from fixture.store import current_revision, head_revision, make_engine, open_store, upgrade_to_head
from fixture.store.engine import WRITE_OPTION
from fixture.store.migrate import alembic_config, shipped_head
from fixture.store.models import Base


def test_an_empty_database_migrates_to_head(db_url: str) -> None:
    engine = make_engine(db_url)
    try:
        # Alembic reports no revision for a database without alembic_version (Alembic docs, from memory).
        assert current_revision(engine) is None
        upgrade_to_head(engine)
        assert current_revision(engine) == head_revision()
        assert set(Base.metadata.tables) <= set(inspect(engine).get_table_names())
    finally:
        engine.dispose()


def test_migrated_schema_matches_the_models(db_url: str) -> None:
    # compare_metadata lists what autogenerate would emit to bring the database to the models;
    # empty means the shipped migrations build exactly the models' schema (Alembic autogenerate docs).
    with open_store(db_url) as store, store.engine.connect() as connection:
        context = MigrationContext.configure(connection, opts={"compare_type": True})
        assert compare_metadata(context, Base.metadata) == []


def test_opening_a_migrated_database_again_keeps_its_data(db_url: str) -> None:
    with open_store(db_url) as store:
        design_id = store.record_design("PW-22", "B", "x.toml", "0" * 64)
    with open_store(db_url) as store:
        assert current_revision(store.engine) == head_revision()
        assert store.record_design("PW-22", "B", "x.toml", "0" * 64) == design_id


def test_a_run_recorded_before_ownership_keeps_its_data_and_is_judged_by_age(db_url: str) -> None:
    engine = make_engine(db_url)
    try:
        with engine.execution_options(**{WRITE_OPTION: True}).begin() as connection:
            command.upgrade(alembic_config(connection=connection), "0001")
        with engine.begin() as connection:
            for statement in (
                "INSERT INTO product_design VALUES (1, 'PW-22', 'C', 'x', 'd', NULL, '2026-12-01 08:00:00')",
                "INSERT INTO sequence VALUES (1, 'final', 'x', 's', NULL, '2026-12-01 08:00:00')",
                "INSERT INTO station VALUES (1, 'line-1', 'hall', 'h', '', '2026-12-01 08:00:00')",
                "INSERT INTO unit VALUES (1, 'OLD-1', 1)",
                "INSERT INTO run VALUES (1, 1, 1, 'op', '0.0', 's', 'd', '2026-12-01 08:00:00', NULL, 'running', "
                "NULL, '[]')",
                # A step refers to the run: revision 0002 rebuilds `run` in batch mode on SQLite, and a rebuild
                # that dropped a table other rows refer to would fail with foreign keys on (see the test below).
                "INSERT INTO step_result VALUES (1, 1, 0, 'power up', 'pass', '2026-12-01 08:00:01', "
                "'2026-12-01 08:00:02', '')"):
                connection.execute(text(statement))
    finally:
        engine.dispose()
    with open_store(db_url) as store:  # migrates 0001 -> head
        assert current_revision(store.engine) == head_revision()
        summary = store.previous_runs("OLD-1")[0]
        assert (summary.verdict, summary.self_check_id) == ("running", None)
        assert [st.name for st in store.run(1).steps] == ["power up"]
        # No owner was recorded: a run started two days ago with no heartbeat is long gone.
        assert store.mark_incomplete_runs("line-1") == [1]


STARTER = """
import sys, time
from fixture.store import open_store
time.sleep(max(0.0, float(sys.argv[2]) - time.time()))  # all start at one moment
with open_store(sys.argv[1]) as store:
    store.record_design("PW-22", "B", "x.toml", "0" * 64)
print("opened")
"""


def test_stations_opening_a_new_database_together_all_start(db_url: str) -> None:
    # The failure this pins: two processes migrating one new PostgreSQL database both created
    # alembic_version and one died on a unique-key violation. Six processes released at one instant
    # (common practice, no source: a start barrier by wall clock) must all open it.
    import subprocess
    import sys
    import time

    start_at = time.time() + 5.0
    children = [subprocess.Popen([sys.executable, "-c", STARTER, db_url, str(start_at)],
                                 stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True) for _ in range(6)]
    results = [child.communicate(timeout=120) for child in children]
    assert [child.returncode for child in children] == [0] * 6, [err[-800:] for _, err in results]
    assert all(out.strip() == "opened" for out, _ in results)
    with open_store(db_url) as store:
        assert current_revision(store.engine) == head_revision()


def test_a_database_with_tested_units_migrates_across_the_released_programs_revision(db_url: str) -> None:
    # The failure this pins: revision 0006 added run.not_for_shipment in batch mode, which on SQLite
    # copies `run` and DROPs the old table; with foreign keys on, SQLite refuses the DROP once steps
    # refer to runs (SQLite "ALTER TABLE" docs, from memory), so every line database that had tested a
    # unit failed to open. Played here: a run with a step and a reading, taken down to 0005 and back up.
    import datetime as dt

    from fixture.store import MeasurementRecord
    from tests.store.conftest import DESIGN_SHA, SEQUENCE_SHA, STATION_SHA

    with open_store(db_url) as store:
        store.record_design("PW-22", "C", "d.toml", DESIGN_SHA)
        store.record_sequence("final", "s.toml", SEQUENCE_SHA)
        store.record_station("line-1", "hall 2", STATION_SHA, "st.toml")
        run_id = store.begin_run("PW22-000001", {"c_integrator": "C1-1"}, "line-1", "op", "0", SEQUENCE_SHA,
                                 DESIGN_SHA)
        now = dt.datetime.now(dt.UTC)
        store.record_step(run_id, 0, "frequency", "pass", now, now, "",
                          [MeasurementRecord("f", "frequency_hz", 300.0, "Hz", "pass", 1.0, 1.0,
                                             acceptance_low=200.0, acceptance_high=400.0)])
        store.finish_run(run_id, "pass")
    engine = make_engine(db_url)
    try:
        for target in ("0005", "head"):
            with engine.execution_options(**{WRITE_OPTION: True}).begin() as connection:
                command.downgrade(alembic_config(connection=connection), target) if target != "head" else \
                    command.upgrade(alembic_config(connection=connection), target)
        assert current_revision(engine) == head_revision()
    finally:
        engine.dispose()
    with open_store(db_url) as store:
        kept = store.run(run_id)
        assert kept.summary.verdict == "pass" and [m.value for m in kept.steps[0].measurements] == [300.0]


def test_instrument_time_columns_go_down_to_0006_and_back_keeping_the_steps(db_url: str) -> None:
    # Migration 0007 adds the step's instrument time as plain ADD COLUMNs (no table copy, see the
    # 0006 test above): a step stored with its time keeps its row going down to 0006 (columns gone)
    # and comes back up with the columns empty (the time went with them), its readings intact.
    import datetime as dt

    from fixture.store import InstrumentTime, MeasurementRecord
    from tests.store.conftest import DESIGN_SHA, SEQUENCE_SHA, STATION_SHA

    timing = InstrumentTime(measuring_s=0.25, travel_s=1.5, settling_s=0.05)
    with open_store(db_url) as store:
        store.record_design("PW-22", "C", "d.toml", DESIGN_SHA)
        store.record_sequence("final", "s.toml", SEQUENCE_SHA)
        store.record_station("line-1", "hall 2", STATION_SHA, "st.toml")
        run_id = store.begin_run("PW22-000002", {}, "line-1", "op", "0", SEQUENCE_SHA, DESIGN_SHA)
        now = dt.datetime.now(dt.UTC)
        store.record_step(run_id, 0, "frequency", "pass", now, now + dt.timedelta(seconds=2), "",
                          [MeasurementRecord("f", "frequency_hz", 300.0, "Hz", "pass", 1.0, 1.0,
                                             acceptance_low=200.0, acceptance_high=400.0)], timing=timing)
        store.finish_run(run_id, "pass")
        step = store.run(run_id).steps[0]
        assert step.instrument == timing and step.instrument.instrument_s == pytest.approx(1.8)
        assert step.wall_s == pytest.approx(2.0)
    engine = make_engine(db_url)
    try:
        with engine.execution_options(**{WRITE_OPTION: True}).begin() as connection:
            command.downgrade(alembic_config(connection=connection), "0006")
        columns = {c["name"] for c in inspect(engine).get_columns("step_result")}
        assert not columns & {"instrument_s", "measuring_s", "travel_s", "settling_s"}
        with engine.execution_options(**{WRITE_OPTION: True}).begin() as connection:
            command.upgrade(alembic_config(connection=connection), "head")
        columns = {c["name"] for c in inspect(engine).get_columns("step_result")}
        assert {"instrument_s", "measuring_s", "travel_s", "settling_s"} <= columns
    finally:
        engine.dispose()
    with open_store(db_url) as store:
        kept = store.run(run_id)
        assert kept.steps[0].instrument is None  # not recorded: shown as such, never as zero
        assert [m.value for m in kept.steps[0].measurements] == [300.0]


def test_the_head_read_from_the_scripts_text_is_alembics_head() -> None:
    # The fast "already at head" check of open_store trusts this reading; Alembic's ScriptDirectory is the reference.
    assert shipped_head() == head_revision()


OPEN_CURRENT = """
import sys
from fixture.store import open_store
with open_store(sys.argv[1]) as store:
    store.record_design("PW-22", "B", "x.toml", "0" * 64)
print(sorted(m for m in sys.modules if m == "alembic" or m.startswith("alembic.")))
"""


def test_opening_a_database_at_head_does_not_import_alembic(db_url: str) -> None:
    # Alembic's import is ~0.2 s of every one-unit `knobline test` (bench/startup.py); a current schema needs none.
    with open_store(db_url):
        pass  # migrated to head here
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
    done = subprocess.run([sys.executable, "-c", OPEN_CURRENT, db_url], env=env, capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "[]"


def test_sealed_limits_columns_go_down_to_0008_and_back_keeping_the_approvals(db_url: str, tmp_path: Path) -> None:
    # Migration 0009 adds a sequence release's sealed limits as plain nullable ADD COLUMNs. Approvals stored
    # before (format knobline-release/1) keep verifying; a format-2 approval taken down to 0008 loses its seal,
    # and back at head it does not verify (its signature covers the seal), never reads as format 1.
    import hashlib

    from fixture.reporting.release_signature import release_problem
    from fixture.store.programs import person, program_by_hash, programs
    from tests.programs import release_file

    design = tmp_path / "d.toml"
    design.write_text("a design's bytes\n", encoding="utf-8")
    with open_store(db_url) as store:
        release_file(store, "design", design, tmp_path / "people")
        release_file(store, "sequence", Path(__file__).parents[2] / "sequences" / "demo-sequence.toml",
                     tmp_path / "people")
    engine = make_engine(db_url)
    columns = {"limits_sha256", "limits_computed_by", "limits_rows"}
    try:
        with engine.execution_options(**{WRITE_OPTION: True}).begin() as connection:
            command.downgrade(alembic_config(connection=connection), "0008")
        assert not columns & {c["name"] for c in inspect(engine).get_columns("program_approval")}
        with engine.connect() as connection:
            assert connection.execute(text("SELECT count(*) FROM program_approval")).scalar_one() == 2
        with engine.execution_options(**{WRITE_OPTION: True}).begin() as connection:
            command.upgrade(alembic_config(connection=connection), "head")
        assert columns <= {c["name"] for c in inspect(engine).get_columns("program_approval")}
    finally:
        engine.dispose()
    with open_store(db_url) as store:
        d = program_by_hash(store, "design", hashlib.sha256(design.read_bytes()).hexdigest())
        assert d is not None and d.approval is not None and d.approval.limits is None
        assert release_problem(d, person(store, d.approval.approver), person(store, d.registered_by)) is None
        s = next(p for p in programs(store) if p.kind == "sequence")
        assert s.approval is not None and s.approval.limits is None
        assert "does not verify" in (release_problem(s, person(store, s.approval.approver),
                                                     person(store, s.registered_by)) or "")
