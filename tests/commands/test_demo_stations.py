"""knobline demo --stations N: one batch tested by N simulated station processes at once on one database."""

from __future__ import annotations

import json
import os
from collections import Counter
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from sqlalchemy import select

from fixture.cli import main
from fixture.commands import _stations
from fixture.reporting.certificate import certificate_number
from fixture.store import open_store
from fixture.store.models import RunRow, StationRow, UnitRow

LANES = ("PW-22 end-of-line bench 2, lane 1", "PW-22 end-of-line bench 2, lane 2", "PW-22 end-of-line bench 2, lane 3")


def _stored_runs(db: Path | str) -> list[tuple[int, str, str, str]]:
    """(run id, serial, verdict, station name) of every run in the database at ``db`` (a path or URL)."""
    with open_store(str(db)) as store, store.engine.connect() as connection:
        return [tuple(row) for row in connection.execute(
            select(RunRow.id, UnitRow.serial, RunRow.verdict, StationRow.name)
            .join(UnitRow, UnitRow.id == RunRow.unit_id).join(StationRow, StationRow.id == RunRow.station_id)).all()]


def test_three_stations_test_every_planned_serial_once_and_their_yields_add_up_to_the_batch(
        tmp_path: Path, database_url: str) -> None:
    # The claim (issue 12): stations sharing one line database split a batch without losing or repeating
    # a unit. First-pass yield = units passed at first test / units (common practice, no source), so the
    # stations' passes and units add up to the batch's.
    # on SQLite and on PostgreSQL (database_url: both, tests/conftest.py)
    result = CliRunner().invoke(main, ["demo", "--stations", "3", "--units", "12", "--seed", "5", "--out",
                                       str(tmp_path), "--db", database_url, "--no-reports", "--json"],
                                catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    planned = [f"PW22-{n:06d}" for n in range(1, 13)]  # the demo sequence's pattern PW22-[0-9]{6}, from 1
    assert [r["serial"] for r in data["runs"]] == planned and data["not_tested"] == []
    assert Counter(r["station"] for r in data["runs"]) == {name: 4 for name in LANES}
    stations = data["stations"]
    assert [s["name"] for s in stations] == list(LANES) and all(s["fault"] is None for s in stations)
    assert sum(s["units"] for s in stations) == sum(s["tested"] for s in stations) == 12
    for verdict, count in data["verdicts"].items():
        assert sum(s["verdicts"][verdict] for s in stations) == count
    passed = sum(s["first_pass_yield"] * s["units"] for s in stations)
    assert passed == pytest.approx(data["first_pass_yield"] * 12)
    # every station started with its own self-check, recorded under its own name
    assert all(s["self_check"] and s["self_check"]["verdict"] == "pass" for s in stations)
    assert len({s["self_check"]["id"] for s in stations}) == 3
    # the database agrees: one run per serial, each on the station the summary says
    stored = _stored_runs(database_url)
    assert sorted((serial, name, run_id) for run_id, serial, _, name in stored) == \
        sorted((r["serial"], r["station"], r["run_id"]) for r in data["runs"])


def test_a_three_station_batch_report_shows_each_station_and_certificate_numbers_are_unique(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "empty"))
    monkeypatch.delenv("KNOBLINE_KEY", raising=False)
    result = CliRunner().invoke(main, ["demo", "--stations", "3", "--units", "6", "--seed", "5", "--out",
                                       str(tmp_path), "--json"], catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    html = Path(data["batch_report"]).read_text(encoding="utf-8")
    by_station = html.split("<h3>By station</h3>", 1)[1].split("<h3>", 1)[0]
    for station in data["stations"]:
        row = by_station.split(f"<td>{station['name']}</td>", 1)[1].split("</tr>", 1)[0]
        assert f'<td class="n">{station["units"]}</td>' in row  # its units, as the summary counts them
    judged = data["verdicts"]["pass"] + data["verdicts"]["fail"]
    assert data["certificate_count"] == judged == len(list((tmp_path / "certificates").glob("*.html")))
    with open_store(str(tmp_path / "results.sqlite")) as store:
        numbers = {certificate_number(name, run_id, store.database_id)
                   for run_id, _, _, name in _stored_runs(tmp_path / "results.sqlite")}
    assert len(numbers) == 6


def lane_two_dies(order: _stations.LaneOrder, reports: Any) -> None:
    """A station process that ends at once without a word (as a killed or crashed process does); lanes
    other than 2 are the real station."""
    if order.lane == 2:
        os._exit(70)
    _stations.run_lane(order, reports)


def test_a_station_process_that_dies_makes_the_demo_a_station_fault_naming_it_and_its_untested_units(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # Fail safe (RULES.md): an early end is never a pass. A lane that dies leaves its units untested,
    # said as such, and the demo exits 3 (station fault) naming the station.
    monkeypatch.setattr(_stations, "lane_target", lane_two_dies)
    result = CliRunner().invoke(main, ["demo", "--stations", "3", "--units", "9", "--seed", "5", "--out",
                                       str(tmp_path), "--no-reports", "--json"], catch_exceptions=False)
    assert result.exit_code == 3, result.output
    assert LANES[1] in result.stderr and "exit code 70" in result.stderr
    data = json.loads(result.stdout)
    lost = ["PW22-000002", "PW22-000005", "PW22-000008"]  # units 2, 5, 8: dealt to lane 2
    assert data["not_tested"] == lost and data["stations"][1]["not_tested"] == lost
    assert data["stations"][1]["fault"] and data["stations"][1]["tested"] == 0
    assert sum(data["verdicts"].values()) == 6 and data["first_pass_yield"] <= 6 / 9
    assert not {serial for _, serial, _, _ in _stored_runs(tmp_path / "results.sqlite")} & set(lost)
