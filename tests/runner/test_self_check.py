"""The station self-check on the simulated bench: the golden unit read through the station's own drivers."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest

from fixture.errors import SelfCheckMissing
from fixture.files.design_file import load_design
from fixture.files.station_file import load_station
from fixture.runner.self_check import require_self_check, run_self_check
from fixture.runner.station import open_station
from fixture.runner.unit_run import record_station
from fixture.sim.dut import Defect, build_unit
from fixture.sim.golden import golden_unit
from fixture.sim.world import SimulatedWorld
from fixture.store import open_store
from fixture.store.self_checks import current_self_check

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def bench(tmp_path):
    """A required-self-check copy of the demo station, open on the simulated bench, with a store."""
    text = (ROOT / "sequences/demo-station.toml").read_text(encoding="utf-8")
    path = tmp_path / "bench.toml"
    path.write_text(text.replace("required = false", "required = true")
                    .replace('design = "demo-panel.toml"', f'design = "{ROOT / "sequences/demo-panel.toml"}"'),
                    encoding="utf-8")
    config = load_station(path)
    design = load_design(ROOT / "sequences/demo-panel.toml")
    with open_store(str(tmp_path / "r.sqlite")) as store, \
            open_station(config, today=dt.date(2026, 12, 3)) as station, SimulatedWorld(station, seed=1) as world:
        record_station(store, station)
        yield store, station, world, design, config


def test_the_golden_unit_passes_and_every_reading_is_recorded_with_its_limits(bench) -> None:
    store, station, world, design, config = bench
    world.insert(golden_unit(design, "PW22-GOLDEN-01"))
    record = run_self_check(store, station, design, operator="shift lead")
    assert record.verdict == "pass", record.message
    assert [(r.quantity, r.knob_a_pct, r.knob_b_pct) for r in record.readings] == [
        ("frequency", 50, 50), ("duty", 50, 50), ("frequency", 100, 20), ("duty", 100, 20)]
    assert all(r.low <= r.value <= r.high for r in record.readings)
    assert record.operator == "shift lead" and record.reference == "golden unit PW22-GOLDEN-01"
    assert require_self_check(store, config).id == record.id


def test_a_golden_unit_reading_off_fails_the_check_and_nothing_is_covered(bench) -> None:
    store, station, world, design, config = bench
    # A 20 % larger integrator capacitor lowers the frequency by 1/1.2 (f ~ 1/RC, any integrator-Schmitt
    # oscillator; from memory): far outside a 1 % tolerance.
    world.insert(build_unit(design, "PW22-GOLDEN-01", defects=[Defect("wrong-part", part="c_integrator",
                                                                      factor=1.2)]))
    record = run_self_check(store, station, design, operator="op")
    assert record.verdict == "fail"
    assert "Frequency at knob A 50 %, B 50 %" in record.message and "Hz, outside" in record.message
    assert current_self_check(store, config.name, dt.datetime.now(dt.UTC)) is None


def test_a_check_that_cannot_read_is_a_station_fault_and_covers_nothing(bench) -> None:
    store, station, world, design, config = bench
    world.remove()  # an empty fixture: the counter reads overflow
    record = run_self_check(store, station, design, operator="op")
    assert record.verdict == "station-fault" and record.readings == ()
    assert "OverflowReading" in record.message
    with pytest.raises(SelfCheckMissing, match="ended station-fault"):
        require_self_check(store, config)


def test_a_station_that_requires_a_check_refuses_without_one_and_says_what_to_do(bench) -> None:
    store, _, _, _, config = bench
    with pytest.raises(SelfCheckMissing) as info:
        require_self_check(store, config)
    message = info.value.message
    assert "\n" not in message
    assert f"station {config.name!r} requires a passed self-check within 8 h" in message
    assert f"knobline station {config.source} --self-check" in message


def test_an_expired_pass_no_longer_covers_testing(bench) -> None:
    store, station, world, design, config = bench
    world.insert(golden_unit(design, "PW22-GOLDEN-01"))
    record = run_self_check(store, station, design, operator="op")
    assert require_self_check(store, config, record.valid_until - dt.timedelta(seconds=1)).id == record.id
    with pytest.raises(SelfCheckMissing, match="the last pass expired"):
        require_self_check(store, config, record.valid_until)
