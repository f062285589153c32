"""Recording station self-checks and finding the one testing may rely on now."""

from __future__ import annotations

import datetime as dt

import pytest

from fixture.errors import SoftwareFault
from fixture.store import Store
from fixture.store.self_checks import (
    SelfCheckReading,
    current_self_check,
    latest_self_check,
    record_self_check,
)
from tests.store.conftest import STATION_SHA, begin

T0 = dt.datetime(2026, 12, 3, 6, 0, tzinfo=dt.UTC)
SHIFT_S = 8 * 3600.0
GOOD = SelfCheckReading("frequency", 50.0, 50.0, 353.5, "Hz", 353.6, 350.0, 357.2)
BAD = SelfCheckReading("frequency", 50.0, 50.0, 340.0, "Hz", 353.6, 350.0, 357.2)


def check(store: Store, verdict: str, at: dt.datetime, readings=(GOOD,), station: str = "line-1",
          sha: str | None = None) -> int:
    return record_self_check(store, station, operator="op", reference="golden unit G1", started_at=at,
                             ended_at=at, valid_for_s=SHIFT_S, verdict=verdict, message=verdict,
                             readings=readings, station_sha256=sha).id


def test_a_self_check_reads_back_with_every_reading_and_its_limits(store: Store) -> None:
    record = record_self_check(store, "line-1", operator="op", reference="golden unit G1", started_at=T0,
                               ended_at=T0, valid_for_s=SHIFT_S, verdict="fail", message="off",
                               readings=[GOOD, BAD])
    assert (record.station, record.operator, record.verdict, record.message) == ("line-1", "op", "fail", "off")
    assert record.readings == (GOOD, BAD)
    assert [r.verdict for r in record.readings] == ["pass", "fail"]
    assert record.valid_until == T0 + dt.timedelta(hours=8)


def test_a_pass_covers_testing_until_its_validity_ends(store: Store) -> None:
    passed = check(store, "pass", T0)
    assert current_self_check(store, "line-1", T0 + dt.timedelta(hours=7, minutes=59)).id == passed
    assert current_self_check(store, "line-1", T0 + dt.timedelta(hours=8)) is None
    assert current_self_check(store, "line-1", T0 - dt.timedelta(minutes=1)) is None  # not yet made


def test_a_later_failed_check_withdraws_an_earlier_pass(store: Store) -> None:
    check(store, "pass", T0)
    check(store, "station-fault", T0 + dt.timedelta(hours=1), readings=())
    assert current_self_check(store, "line-1", T0 + dt.timedelta(hours=2)) is None
    assert latest_self_check(store, "line-1").verdict == "station-fault"
    again = check(store, "pass", T0 + dt.timedelta(hours=3))
    assert current_self_check(store, "line-1", T0 + dt.timedelta(hours=4)).id == again


def test_a_check_counts_only_for_its_own_station_and_station_file(store: Store) -> None:
    store.record_station("line-2", "hall 2", "2" * 64)
    check(store, "pass", T0, station="line-2")
    assert current_self_check(store, "line-1", T0) is None
    mine = check(store, "pass", T0, sha=STATION_SHA)
    assert current_self_check(store, "line-1", T0, station_sha256=STATION_SHA).id == mine
    assert current_self_check(store, "line-1", T0, station_sha256="9" * 64) is None  # the file was edited since


def test_a_pass_with_a_reading_outside_its_limits_is_refused(store: Store) -> None:
    with pytest.raises(SoftwareFault, match="every reading within its limits"):
        check(store, "pass", T0, readings=(GOOD, BAD))
    with pytest.raises(SoftwareFault):
        check(store, "pass", T0, readings=())
    with pytest.raises(SoftwareFault):
        check(store, "ok", T0)


def test_a_run_records_the_self_check_it_relies_on(store: Store) -> None:
    passed = check(store, "pass", T0)
    covered, uncovered = begin(store, serial="A", self_check_id=passed), begin(store, serial="B")
    assert store.run(covered).summary.self_check_id == passed
    assert store.run(uncovered).summary.self_check_id is None


def test_the_description_names_the_reference_the_settings_and_the_validity(store: Store) -> None:
    record = current_self_check(store, "line-1", T0) if check(store, "pass", T0) else None
    assert record is not None
    assert record.describe() == ("The station read its golden unit G1 within limits at 1 knob setting at "
                                 "2026-12-03 06:00 UTC (self-check 1, valid until 2026-12-03 14:00 UTC).")
