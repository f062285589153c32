"""Opening the station from its file, on the simulated bench."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest

from fixture.errors import CalibrationExpired
from fixture.files.station_file import load_station
from fixture.runner.station import open_station

TODAY = dt.date(2026, 12, 2)


def test_demo_station_opens_every_role_and_identifies_it() -> None:
    config = load_station("sequences/demo-station.toml")
    with open_station(config, today=TODAY) as station:
        assert set(station.drivers) == {"counter", "scope", "supply", "actuator"}
        assert station.identities["counter"].model == "YQ-C83"
        assert station.simulated
        assert station.expired_calibrations == []


def test_an_expired_instrument_stops_the_station_before_anything_is_opened(monkeypatch) -> None:
    config = load_station("sequences/demo-station.toml")
    opened = []
    monkeypatch.setattr("fixture.runner.station.open_instrument", lambda *a, **k: opened.append(a))
    with pytest.raises(CalibrationExpired):
        open_station(config, today=dt.date(2028, 3, 1))
    assert opened == []


def test_a_manual_actuator_asks_the_operator(tmp_path) -> None:
    text = Path("sequences/demo-station.toml").read_text(encoding="utf-8").replace(
        'kind = "motorized"', 'kind = "manual"')
    path = tmp_path / "manual.toml"
    path.write_text(text, encoding="utf-8")
    asked: list[str] = []
    with open_station(load_station(path), today=TODAY, roles=("actuator",),
                      ask=lambda text: asked.append(text) or True) as station:
        station.driver("actuator").move_both(25.0, 75.0)
    assert asked and "25" in asked[0]


def test_typed_role_accessors_give_each_driver_and_a_missing_role_is_a_fixture_fault() -> None:
    # fail safe (RULES.md): a step asking for an instrument the station did not open is a station fault
    from fixture.errors import FixtureFault
    from fixture.instruments import Counter, Supply

    config = load_station("sequences/demo-station.toml")
    with open_station(config, today=TODAY, roles=("counter", "supply")) as station:
        assert isinstance(station.counter(), Counter) and isinstance(station.supply(), Supply)
        with pytest.raises(FixtureFault, match="no scope"):
            station.scope()


def test_an_expired_instrument_outside_the_sequences_roles_is_opened_and_identified_for_the_record() -> None:
    # The scope (due 2028-02-28) is past due on 2028-03-01; a counter sequence does not use it, so the
    # station opens, identifies the scope (its identity and calibration are recorded with each run) and
    # marks it unused; the counter is still in date.
    config = load_station("sequences/demo-station.toml")
    with open_station(config, today=dt.date(2028, 3, 1), uses=("counter", "supply", "actuator")) as station:
        assert [(s.role, s.used) for s in station.expired_calibrations] == [("scope", False)]
        assert station.identities["scope"].model == "YQ-S47"
