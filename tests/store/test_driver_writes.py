"""The hot path's driver writes store exactly what SQLAlchemy's own execution of the same statements stores.

``fixture.store.driver_writes`` runs the step, reading, heartbeat and finish statements on the
driver's cursor, with SQLAlchemy's compiled SQL and type conversions. The reference here is
SQLAlchemy itself (its Core ``insert`` executed on a Connection, the way the store wrote these
rows before): every column of every row must read back equal, on SQLite and PostgreSQL.
"""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy import insert, select

from fixture.errors import SoftwareFault
from fixture.store import Store
from fixture.store.models import DecoderCalibrationRow, MeasurementRow, RunRow, StepResultRow, table_of
from fixture.store.records import DecoderConstants, InstrumentTime, MeasurementRecord
from fixture.store.run_writes import RunWrites, measurement_columns
from tests.store.conftest import begin

T0 = dt.datetime(2026, 12, 4, 9, 30, 15, 123456, tzinfo=dt.UTC)
T1 = T0 + dt.timedelta(seconds=2.5)
READINGS = [
    MeasurementRecord("period at A 25 %", "period", 1.234e-3, "s", "pass", knob_a_pct=25.0, knob_b_pct=None,
                      tolerance_low=1.1e-3, tolerance_high=1.4e-3, acceptance_low=1.12e-3, acceptance_high=1.38e-3,
                      expanded_uncertainty=2e-6, coverage_factor=2.0, decision_rule="guarded acceptance"),
    MeasurementRecord("duty at B 50 %", "duty", 0.5, "%", "fail", knob_a_pct=50.0, knob_b_pct=50.0),
    MeasurementRecord("supply current", "supply_current", 0.012, "A", "recorded"),
]
TIMING = InstrumentTime(measuring_s=0.4, travel_s=1.25, settling_s=0.05)
CONSTANTS = DecoderConstants(1e-3, 1e-4, 0.1, 0.9, "linear", "linear", 0.2, 0.3)


def _rows(store: Store, table_row: type, where: object) -> list[dict[str, object]]:
    """The rows as the database holds them (the driver's own values: on SQLite a time is its stored text)."""
    table = table_of(table_row)
    ids = select(table.c.id).where(where).order_by(table.c.id)  # type: ignore[arg-type]
    with store.engine.connect() as connection:
        wanted = [int(i) for i in connection.execute(ids).scalars()]
        found = [connection.exec_driver_sql(f"SELECT * FROM {table.name} WHERE id = {i}").mappings().one()
                 for i in wanted]
    return [{k: v for k, v in row.items() if k not in ("id", "run_id", "step_id")} for row in found]


def _by_sqlalchemy(store: Store, run_id: int) -> int:
    """The same step written as the store wrote it through SQLAlchemy Core before the driver path."""
    step, reading = table_of(StepResultRow), table_of(MeasurementRow)
    with store.engine.begin() as connection:
        step_id = connection.execute(insert(step).values(
            run_id=run_id, index=0, name="knob stops", verdict="fail", started_at=T0, ended_at=T1,
            message="duty at B 50 %: 0.5 above 0.4", **TIMING.columns())).inserted_primary_key[0]  # type: ignore[index]
        connection.execute(insert(reading), [{"step_id": step_id, "index": i, **measurement_columns(m)}
                                             for i, m in enumerate(READINGS)])
        connection.execute(insert(table_of(DecoderCalibrationRow)).values(run_id=run_id, **vars(CONSTANTS)))
    return int(step_id)


def test_a_step_written_on_the_driver_reads_back_as_one_written_by_sqlalchemy(store: Store) -> None:
    ours = begin(store, "PW22-000001")
    reference = begin(store, "PW22-000002")
    ours_step = store.record_step(ours, 0, "knob stops", "fail", T0, T1, "duty at B 50 %: 0.5 above 0.4", READINGS,
                                  timing=TIMING, decoder=CONSTANTS)
    reference_step = _by_sqlalchemy(store, reference)
    step = table_of(StepResultRow)
    assert _rows(store, StepResultRow, step.c.id == ours_step) == _rows(store, StepResultRow,
                                                                         step.c.id == reference_step)
    reading = table_of(MeasurementRow)
    ours_readings = _rows(store, MeasurementRow, reading.c.step_id == ours_step)
    assert len(ours_readings) == len(READINGS)
    assert ours_readings == _rows(store, MeasurementRow, reading.c.step_id == reference_step)
    decoder = table_of(DecoderCalibrationRow)
    assert _rows(store, DecoderCalibrationRow, decoder.c.run_id == ours) == \
        _rows(store, DecoderCalibrationRow, decoder.c.run_id == reference)


def test_a_step_without_instrument_time_stores_it_empty(store: Store) -> None:
    run_id = begin(store)
    step_id = store.record_step(run_id, 0, "power up", "pass", T0, T1, "")
    (row,) = _rows(store, StepResultRow, table_of(StepResultRow).c.id == step_id)
    assert (row["instrument_s"], row["measuring_s"], row["travel_s"], row["settling_s"]) == (None, None, None, None)


def test_a_failed_driver_write_leaves_nothing_of_its_step(store: Store) -> None:
    run_id = begin(store)
    bad = MeasurementRecord("x", "period", 1.0, "s", "pass", decision_rule="r")
    # a second decoder row for the run breaks its unique key on both databases, after the step's
    # row and reading were inserted: they must roll back with it
    store.record_step(run_id, 0, "decoder endpoints", "pass", T0, T0, "", [bad], decoder=CONSTANTS)
    with pytest.raises(Exception):  # noqa: B017 - the driver's own IntegrityError, whichever driver
        store.record_step(run_id, 1, "decoder again", "pass", T0, T0, "", [bad], decoder=CONSTANTS)
    names = [r["name"] for r in _rows(store, StepResultRow, table_of(StepResultRow).c.run_id == run_id)]
    assert names == ["decoder endpoints"]


def test_a_naive_time_is_refused_on_the_driver_path_as_on_sqlalchemys(store: Store) -> None:
    run_id = begin(store)
    naive = {"index": 0, "name": "s", "verdict": "pass", "started_at": dt.datetime(2026, 1, 1), "ended_at": T1,
             "message": ""}
    with pytest.raises(ValueError, match="timezone-aware"):  # UtcDateTime's own refusal (models.py)
        RunWrites(store.engine).record_step(run_id, naive, None, (), None, T1)
    assert _rows(store, StepResultRow, table_of(StepResultRow).c.run_id == run_id) == []


def test_the_verdict_of_a_run_that_is_not_running_is_named(store: Store) -> None:
    run_id = begin(store)
    store.finish_run(run_id, "pass")
    with pytest.raises(SoftwareFault, match="found one with verdict 'pass'"):
        store.record_step(run_id, 0, "late", "pass", T0, T0, "")
    with pytest.raises(SoftwareFault, match="found none"):
        store.finish_run(run_id + 1000, "pass")
    run = table_of(RunRow)
    with store.engine.connect() as connection:
        assert connection.execute(select(run.c.verdict).where(run.c.id == run_id)).scalar() == "pass"
