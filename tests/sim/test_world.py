"""The simulated world feeding the simulated instruments through the real drivers."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

from fixture.errors import OverflowReading
from fixture.files.design_file import load_design
from fixture.files.station_file import load_station
from fixture.instruments import CounterSettings, ScopeSettings
from fixture.model.waveform import AnalysisOptions, analyze_record
from fixture.runner.station import open_station
from fixture.sim.dut import Defect, build_unit
from fixture.sim.world import SimulatedWorld


@pytest.fixture(scope="module")
def design():
    return load_design("sequences/demo-panel.toml")


@pytest.fixture()
def bench():
    config = load_station("sequences/demo-station.toml")
    with open_station(config, today=dt.date(2026, 12, 2)) as station, SimulatedWorld(station, seed=5) as world:
        supply = station.driver("supply")
        supply.configure(12.0, 0.1)
        supply.output(True)
        yield station, world


def read(station, function: str, gate_time_s: float = 0.1) -> float:
    counter = station.driver("counter")
    counter.configure(CounterSettings(function=function, gate_time_s=gate_time_s))
    return counter.read()


def test_counter_reads_the_units_own_frequency_at_the_actuators_position(bench, design) -> None:
    station, world = bench
    unit = build_unit(design, "PW22-7", seed=2)
    world.insert(unit)
    station.driver("actuator").move_both(25.0, 90.0)
    truth = unit.wave(25.0, 90.0)
    assert read(station, "frequency") == pytest.approx(1 / truth.period_s, rel=1e-5)
    assert read(station, "duty") == pytest.approx(100 * truth.duty, abs=0.05)
    station.driver("actuator").move_both(100.0, 90.0)
    assert read(station, "frequency") == pytest.approx(1 / unit.wave(100.0, 90.0).period_s, rel=1e-5)


def test_measurement_noise_grows_as_the_gate_time_shrinks(bench, design) -> None:
    # Reciprocal counting averages N = gate/T periods: scatter ~ 1/N (common practice).
    station, world = bench
    world.insert(build_unit(design, "PW22-8", seed=3))
    station.driver("actuator").move_both(50.0, 50.0)
    short = np.std([read(station, "period", 1e-3) for _ in range(60)])
    long = np.std([read(station, "period", 1.0) for _ in range(60)])
    assert short > 20 * long


def test_an_unpowered_unit_gives_no_signal_and_the_counter_says_overflow(bench, design) -> None:
    station, world = bench
    world.insert(build_unit(design, "PW22-9", seed=4))
    station.driver("supply").output(False)
    with pytest.raises(OverflowReading):
        read(station, "frequency")


def test_supply_current_includes_an_injected_leak(bench, design) -> None:
    station, world = bench
    world.insert(build_unit(design, "PW22-10", seed=6, defects=[Defect("supply-current", current_a=0.04)]))
    assert station.driver("supply").measure_current() > 0.04


def test_scope_record_of_a_unit_analyses_to_its_true_signal(bench, design) -> None:
    station, world = bench
    unit = build_unit(design, "PW22-11", seed=7)
    world.insert(unit)
    station.driver("actuator").move_both(75.0, 10.0)
    scope = station.driver("scope")
    scope.configure(ScopeSettings(sample_rate_hz=1e6, record_length=20_000, range_v=16.0, offset_v=6.0,
                                  trigger_level_v=5.0))
    truth = unit.wave(75.0, 10.0)
    result = analyze_record(scope.acquire(), AnalysisOptions(expected_levels_v=(truth.low_v, truth.high_v)))
    assert result.ok
    assert result.period_s == pytest.approx(truth.period_s, rel=1e-4)
    assert result.duty == pytest.approx(truth.duty, abs=2e-3)


def test_a_stuck_output_shows_as_stuck_on_the_scope(bench, design) -> None:
    station, world = bench
    unit = build_unit(design, "PW22-12", seed=8, defects=[Defect("stuck-output", level="high")])
    world.insert(unit)
    scope = station.driver("scope")
    scope.configure(ScopeSettings(sample_rate_hz=1e6, record_length=10_000, range_v=16.0, offset_v=6.0,
                                  trigger_level_v=5.0))
    truth = unit.wave(50.0, 50.0)
    result = analyze_record(scope.acquire(), AnalysisOptions(expected_levels_v=(truth.low_v, truth.high_v)))
    assert result.diagnosis.value == "stuck-high"


def test_the_same_seeds_give_the_same_readings(design) -> None:
    config = load_station("sequences/demo-station.toml")
    runs = []
    for _ in range(2):
        with open_station(config, today=dt.date(2026, 12, 2)) as station, SimulatedWorld(station, seed=11) as world:
            station.driver("supply").configure(12.0, 0.1)
            station.driver("supply").output(True)
            world.insert(build_unit(design, "PW22-13", seed=9))
            station.driver("actuator").move_both(50.0, 50.0)
            runs.append([read(station, "period", 1e-3) for _ in range(5)])
    assert runs[0] == runs[1]
