"""The simulated line the runner tests share: the demo plan, a results store, an open station, a world."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import pytest

from fixture.files.sequence_file import load_sequence
from fixture.files.station_file import load_station
from fixture.runner.plan import compile_plan
from fixture.runner.plan_points import PlanStep, TestPlan
from fixture.runner.station import open_station
from fixture.runner.unit_run import run_unit
from fixture.sim.dut import Defect, build_unit
from fixture.sim.world import SimulatedWorld
from fixture.store import open_store

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def compiled():
    config = load_station(ROOT / "sequences/demo-station.toml")
    sequence = load_sequence(ROOT / "sequences/demo-sequence.toml", station=config)
    return config, sequence, compile_plan(sequence, sequence.design, config)


def with_custom_step(plan: TestPlan, call: str, **parameters: object) -> TestPlan:
    """``plan`` with a custom step calling ``call`` appended (index after the last step)."""
    step = PlanStep(index=len(plan.steps), name="custom check", kind="custom", station_fault_retries=2,
                    points=(), call=call, parameters=tuple(sorted(parameters.items())))
    return replace(plan, steps=(*plan.steps, step))


@dataclass
class Line:
    """One simulated station with a store: ``test(serial, *defects)`` runs a unit through the plan."""

    sequence: Any
    plan: TestPlan
    station: Any
    world: SimulatedWorld
    store: Any

    def test(self, serial: str, *defects: Defect, seed: int = 5, plan: TestPlan | None = None,
             reporter: Any = None, signal_path_check: str | None = None):
        self.world.insert(build_unit(self.sequence.design, serial, seed=seed, defects=defects))
        return run_unit(plan or self.plan, self.sequence, self.station, self.store, serial=serial, lots={},
                        operator="test", sleep=lambda s: None, reporter=reporter,
                        signal_path_check=signal_path_check)


def _open_line(compiled, database_url: str, roles: tuple[str, ...] | None):
    config, sequence, plan = compiled
    with open_store(database_url) as store, \
            open_station(config, today=dt.date(2026, 12, 2), roles=roles) as station, \
            SimulatedWorld(station, seed=3) as world:
        yield Line(sequence, plan, station, world, store)


@pytest.fixture()
def bench(compiled, database_url):
    """The demo station: counter, scope, supply and actuator, recording to each backend in turn."""
    yield from _open_line(compiled, database_url, None)


@pytest.fixture()
def counter_only_bench(compiled, database_url):
    """The demo station opened without its scope: no second instrument to cross-check the counter."""
    yield from _open_line(compiled, database_url, ("counter", "supply", "actuator"))


@pytest.fixture()
def line(bench):
    """``(test_unit, store, station)`` for the tests written before :class:`Line`."""
    yield bench.test, bench.store, bench.station
