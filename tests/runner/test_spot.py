"""Spot readings through the whole chain: station file, drivers, simulated bench, analysis."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest

from fixture.files.design_file import load_design
from fixture.files.station_file import load_station
from fixture.runner.spot import spot_reading
from fixture.runner.station import open_station
from fixture.sim.dut import build_unit
from fixture.sim.world import SimulatedWorld


def station_file(tmp_path: Path, instrument: str) -> Path:
    text = Path("sequences/demo-station.toml").read_text(encoding="utf-8")
    path = tmp_path / f"{instrument}.toml"
    path.write_text(text.replace('instrument = "counter"', f'instrument = "{instrument}"'), encoding="utf-8")
    return path


@pytest.mark.parametrize("instrument", ["counter", "scope"])
def test_counter_and_scope_stations_read_the_same_unit_alike(tmp_path: Path, instrument: str) -> None:
    design = load_design("sequences/demo-panel.toml")
    config = load_station(station_file(tmp_path, instrument))
    with open_station(config, today=dt.date(2026, 12, 2)) as station, SimulatedWorld(station, seed=2) as world:
        unit = build_unit(design, "SPOT-1", seed=12)
        world.insert(unit)
        reading = spot_reading(station, design, 50.0, 10.0)
        truth = unit.wave(50.0, 10.0)
        assert reading.instrument == instrument
        assert reading.frequency_hz == pytest.approx(1 / truth.period_s, rel=2e-4)
        assert reading.duty_pct == pytest.approx(100 * truth.duty, abs=0.3)
        assert world.powered is False  # the supply is switched off again after the reading
