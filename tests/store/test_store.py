"""Recording and reading runs: round trip, retest linkage, uniqueness, refusals."""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from fixture.errors import SoftwareFault, UserInputError
from fixture.store import DecoderConstants, MeasurementRecord, Store
from fixture.store.models import ProductDesignRow, UnitRow
from tests.store.conftest import DESIGN_SHA, SEQUENCE_SHA, begin, set_owner

T0 = dt.datetime(2026, 3, 2, 8, 0, tzinfo=dt.UTC)

# Arbitrary readings; values with long mantissas check that nothing is rounded on the way.
READINGS = [
    MeasurementRecord("period at A 25 %", "period", 1.2345678901234567e-3, "s", "pass", knob_a_pct=25.0,
                      knob_b_pct=50.0, tolerance_low=1.1e-3, tolerance_high=1.4e-3, acceptance_low=1.11e-3,
                      acceptance_high=1.39e-3, expanded_uncertainty=1.0e-6, coverage_factor=2.0,
                      decision_rule="guarded acceptance, w = 1 x U"),
    MeasurementRecord("duty at B 75 %", "duty", 0.7312, "1", "fail", knob_a_pct=50.0, knob_b_pct=75.0,
                      tolerance_low=None, tolerance_high=0.72, acceptance_high=0.719),
    MeasurementRecord("supply current", "supply_current", 0.0123, "A", "recorded"),
]


def test_a_run_reads_back_as_recorded(store: Store) -> None:
    run_id = begin(store, lots={"c_integrator": "L-C1", "knob_a_pot": "L-P7"}, started_at=T0,
                   expired_calibrations=["scope YQ-S47: certificate X was due 2026-01-01"])
    store.record_step(run_id, 0, "power up", "pass", T0, T0 + dt.timedelta(seconds=1), "", READINGS[2:])
    store.record_step(run_id, 1, "knob stops", "fail", T0 + dt.timedelta(seconds=1),
                      T0 + dt.timedelta(seconds=5), "duty high at B 75 %", READINGS[:2])
    constants = DecoderConstants(2.0e-3, 0.25e-3, 0.1, 0.9, "linear-in-period", "linear-in-duty", 1.5, 0.75)
    store.record_decoder_calibration(run_id, constants)
    store.finish_run(run_id, "fail", ended_at=T0 + dt.timedelta(seconds=6))

    history = store.unit("PW22-000001")
    assert (history.design_name, history.design_revision) == ("PW-22", "B")
    assert history.lots == {"c_integrator": "L-C1", "knob_a_pot": "L-P7"}
    (run,) = history.runs
    assert run.summary.verdict == "fail"
    assert run.summary.started_at == T0 and run.summary.ended_at == T0 + dt.timedelta(seconds=6)
    assert run.summary.expired_calibrations == ("scope YQ-S47: certificate X was due 2026-01-01",)
    assert (run.summary.sequence_sha256, run.summary.design_sha256) == (SEQUENCE_SHA, DESIGN_SHA)
    assert [s.name for s in run.steps] == ["power up", "knob stops"]
    assert run.steps[1].message == "duty high at B 75 %"
    # SQLite REAL is an 8-byte IEEE float (SQLite datatype docs, from memory): readings come back exactly.
    assert run.steps[0].measurements == tuple(READINGS[2:])
    assert run.steps[1].measurements == tuple(READINGS[:2])
    assert run.decoder == constants


def test_decoder_constants_commit_with_their_step_or_not_at_all(store: Store) -> None:
    # One commit for the step and the constants it measured (common practice, no source): a step the
    # store refuses (its run already ended) leaves no constants behind either.
    constants = DecoderConstants(2.0e-3, 0.25e-3, 0.1, 0.9, "linear-in-period", "linear-in-duty", 1.5, 0.75)
    run_id = begin(store, started_at=T0)
    store.record_step(run_id, 0, "decoder endpoints", "pass", T0, T0, "", READINGS[:1], decoder=constants)
    assert store.run(run_id).decoder == constants
    ended = begin(store, "PW22-000002", started_at=T0)
    store.finish_run(ended, "aborted", ended_at=T0)
    with pytest.raises(SoftwareFault, match="expected a running run"):
        store.record_step(ended, 0, "decoder endpoints", "pass", T0, T0, "", READINGS[:1], decoder=constants)
    assert store.run(ended).decoder is None and store.run(ended).steps == ()


def test_timestamps_are_stored_as_utc_instants(store: Store) -> None:
    # 10:00 at UTC+02:00 is 08:00 UTC (ISO 8601 offsets).
    local = dt.datetime(2026, 3, 2, 10, 0, tzinfo=dt.timezone(dt.timedelta(hours=2)))
    run_id = begin(store, started_at=local)
    started = store.run(run_id).summary.started_at
    assert started == T0 and started.utcoffset() == dt.timedelta(0)


def test_naive_timestamps_are_refused(store: Store) -> None:
    run_id = begin(store)
    with pytest.raises(SoftwareFault, match="timezone-aware"):
        store.record_step(run_id, 0, "s", "pass", dt.datetime(2026, 1, 1), T0, "")
    assert store.run(run_id).steps == ()


def test_a_retest_links_to_the_latest_earlier_run_of_the_serial(store: Store) -> None:
    first = begin(store)
    store.finish_run(first, "station-fault")
    other = begin(store, serial="PW22-000002")
    store.finish_run(other, "pass")
    second = begin(store)
    store.finish_run(second, "fail")
    third = begin(store)
    assert [r.retest_of for r in store.previous_runs("PW22-000001")] == [None, first, second]
    assert store.run(third).summary.retest_of == second
    assert store.run(other).summary.retest_of is None


def test_a_retest_cannot_claim_another_units_run(store: Store) -> None:
    other = begin(store, serial="PW22-000002")
    begin(store)
    with pytest.raises(UserInputError, match="retest of run"):
        begin(store, retest_of=other)


def test_design_and_sequence_are_recorded_once_per_hash(store: Store) -> None:
    assert store.record_design("PW-22", "B", "elsewhere.toml", DESIGN_SHA) == \
        store.record_design("PW-22", "B", "demo-panel.toml", DESIGN_SHA)
    assert store.record_design("PW-22", "C", "demo-panel.toml", "f" * 64) != \
        store.record_design("PW-22", "B", "demo-panel.toml", DESIGN_SHA)
    assert store.record_sequence("final test", "x.toml", SEQUENCE_SHA) == \
        store.record_sequence("final test", "final.toml", SEQUENCE_SHA)


def test_the_database_refuses_duplicate_hashes_and_serials(store: Store) -> None:
    # The unique constraints themselves, not only the API's lookups (common practice, no source).
    with pytest.raises(IntegrityError), Session(store.engine) as s, s.begin():
        s.add(ProductDesignRow(name="x", revision="x", source="x", sha256=DESIGN_SHA, recorded_at=T0))
    begin(store)
    with pytest.raises(IntegrityError), Session(store.engine) as s, s.begin():
        s.add(UnitRow(serial="PW22-000001", product_design_id=1))


def test_one_unit_row_per_serial_across_runs(store: Store) -> None:
    begin(store)
    begin(store, lots={})
    with Session(store.engine) as s:
        assert s.query(UnitRow).count() == 1


def test_a_lot_contradicting_the_units_record_is_refused(store: Store) -> None:
    begin(store, lots={"c_integrator": "L-C1"})
    with pytest.raises(UserInputError, match="expected lot L-C1 as recorded, found L-C9"):
        begin(store, lots={"c_integrator": "L-C9"})
    assert len(store.previous_runs("PW22-000001")) == 1


def test_runs_need_recorded_station_design_and_sequence(store: Store) -> None:
    with pytest.raises(UserInputError, match="station 'line-9'"):
        begin(store, station="line-9")
    with pytest.raises(UserInputError, match="design sha256"):
        store.begin_run("S", {}, "line-1", "op", "v", SEQUENCE_SHA, "e" * 64)
    with pytest.raises(UserInputError, match="sequence sha256"):
        store.begin_run("S", {}, "line-1", "op", "v", "e" * 64, DESIGN_SHA)
    assert store.runs() == []


def test_an_ended_run_takes_no_more_steps_or_verdicts(store: Store) -> None:
    run_id = begin(store)
    store.finish_run(run_id, "pass")
    with pytest.raises(SoftwareFault, match="expected a running run"):
        store.record_step(run_id, 0, "late", "pass", T0, T0, "")
    with pytest.raises(SoftwareFault, match="expected a running run"):
        store.finish_run(run_id, "fail")
    assert store.run(run_id).summary.verdict == "pass"


def test_only_our_verdict_words_are_accepted(store: Store) -> None:
    run_id = begin(store)
    with pytest.raises(SoftwareFault):
        store.finish_run(run_id, "running")
    with pytest.raises(SoftwareFault):
        store.record_step(run_id, 0, "s", "ok", T0, T0, "")
    with pytest.raises(UserInputError):
        MeasurementRecord("p", "period", float("nan"), "s", "pass")


def test_marking_incomplete_touches_only_running_runs_of_that_station(store: Store) -> None:
    store.record_station("line-2", "hall 2", "2" * 64)
    done = begin(store, serial="A")
    store.finish_run(done, "pass")
    left = begin(store, serial="B")
    elsewhere = begin(store, serial="C", station="line-2")
    # Both running runs look owned by a dead process (this pid with another start token: a reused pid).
    for run_id in (left, elsewhere):
        set_owner(store, run_id, store.owner.host, store.owner.pid, "other-boot:1", None)
    assert store.mark_incomplete_runs("line-1") == [left]
    assert store.mark_incomplete_runs("line-1") == []
    verdicts = {r.run_id: r.verdict for r in store.runs()}
    assert verdicts == {done: "pass", left: "incomplete", elsewhere: "running"}


def test_runs_lists_newest_first_within_the_limit(store: Store) -> None:
    ids = [begin(store, serial=f"S{i}") for i in range(4)]
    assert [r.run_id for r in store.runs(limit=3)] == ids[::-1][:3]
    assert [r.run_id for r in store.runs(serial="S1")] == [ids[1]]


def test_a_run_remembers_its_instruments_calibration(store: Store) -> None:
    counter = store.record_instrument("counter", "Tessaly Instruments", "YQ-C83", "SN-41", "2.1",
                                      "tessaly-yqc83", "TCPIP::sim", calibration_certificate="CAL-1",
                                      calibration_due=dt.date(2026, 1, 1), calibration_lab="lab")
    assert store.record_instrument("counter", "Tessaly Instruments", "YQ-C83", "SN-41", "2.2",
                                   calibration_certificate="CAL-2", calibration_due=dt.date(2027, 1, 1)) == counter
    run_id = begin(store, instruments=[counter])
    (use,) = store.run(run_id).instruments
    assert (use.serial, use.firmware, use.calibration_certificate, use.calibration_due) == \
        ("SN-41", "2.2", "CAL-2", dt.date(2027, 1, 1))


def test_an_unknown_serial_is_a_user_error(store: Store) -> None:
    with pytest.raises(UserInputError, match="NOPE"):
        store.unit("NOPE")
    assert store.previous_runs("NOPE") == []


@pytest.mark.parametrize(("field", "kwargs", "words"), [
    ("operator", {"operator": "o" * 201}, "operator: expected at most 200 characters, found 201"),
    ("serial", {"serial": "S" * 201}, "serial: expected at most 200 characters, found 201"),
    ("lot", {"lots": {"c_integrator": "L" * 250}}, "lot of c_integrator: expected at most 200 characters, found 250"),
])
def test_text_longer_than_its_column_is_refused_in_words_before_anything_is_written(
        store: Store, field: str, kwargs: dict, words: str) -> None:
    # PostgreSQL refuses an over-long varchar with an error quoting the SQL; SQLite stores it whole
    # (PostgreSQL docs "Character Types"; SQLite FAQ "What is the maximum size of a VARCHAR", from memory).
    # Either way the person gets one line naming the field, on both databases, and nothing is stored.
    serial = kwargs.get("serial", "PW22-000777")
    operator = kwargs.get("operator", "operator")
    lots = kwargs.get("lots", {"c_integrator": "L-C1"})
    with pytest.raises(UserInputError) as refused:
        store.begin_run(serial, lots, "line-1", operator, "0.0-test", SEQUENCE_SHA, DESIGN_SHA)
    assert str(refused.value) == words and "INSERT" not in str(refused.value)
    assert store.previous_runs(serial) == []


def test_a_unit_or_lot_row_another_station_inserted_in_between_is_found_on_the_second_attempt(
        store: Store, db_url: str) -> None:
    # Two stations starting the first units of one new lot at once both insert its component_lot row;
    # on PostgreSQL the later insert fails its unique key (found by tests/runner/test_many_stations.py).
    # Played here deterministically: the other station commits the row, then our insert fails as
    # PostgreSQL's would; begin_run must find the row on its second attempt, not fail the unit.
    if store.engine.dialect.name == "sqlite":
        pytest.skip("SQLite's BEGIN IMMEDIATE serialises the two stations: there is no race to lose")
    import fixture.store.store as store_module
    from fixture.store import open_store

    real_attach = store_module.attach_lots
    calls: list[str] = []

    def attach_after_the_other_station(cursor, writes, unit, lots):
        calls.append(unit.serial)
        if len(calls) == 1:
            with open_store(db_url) as other:
                begin(other, "PW22-000888", lots={"c_integrator": "C1-NEW"})
            # the driver's own error, as the insert on the driver's cursor raises it
            raise store.engine.dialect.loaded_dbapi.IntegrityError("duplicate key value violates unique constraint")
        return real_attach(cursor, writes, unit, lots)

    store_module.attach_lots = attach_after_the_other_station
    try:
        run_id = begin(store, "PW22-000777", lots={"c_integrator": "C1-NEW"})
    finally:
        store_module.attach_lots = real_attach
    assert calls == ["PW22-000777", "PW22-000888", "PW22-000777"]  # ours, the other station's, ours again
    assert store.unit("PW22-000777").lots == store.unit("PW22-000888").lots == {"c_integrator": "C1-NEW"}
    assert store.run(run_id).summary.serial == "PW22-000777"
