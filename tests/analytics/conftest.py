"""A fresh results database per test, filled through the real Store API."""

from __future__ import annotations

import datetime as dt
import hashlib
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pytest

from fixture.analytics.part_fit import Reading
from fixture.sim.readings import counter_reading
from fixture.store import MeasurementRecord, Store, open_store

# Hashes of made-up file contents; the store only needs them to be distinct.
DESIGN_SHA = hashlib.sha256(b"design file").hexdigest()
OTHER_DESIGN_SHA = hashlib.sha256(b"another design file").hexdigest()
SEQUENCE_SHA = hashlib.sha256(b"sequence file").hexdigest()
T0 = dt.datetime(2026, 3, 2, 8, 0, tzinfo=dt.UTC)


@pytest.fixture
def db_url(database_url: str) -> str:
    return database_url


@pytest.fixture
def store(db_url: str) -> Iterator[Store]:
    with open_store(db_url) as opened:
        opened.record_design("PW-22", "B", "demo-panel.toml", DESIGN_SHA)
        opened.record_design("PW-30", "A", "other-panel.toml", OTHER_DESIGN_SHA)
        opened.record_sequence("final test", "final.toml", SEQUENCE_SHA)
        for name in ("line-1", "line-2"):
            opened.record_station(name, "hall 2", hashlib.sha256(name.encode()).hexdigest(), f"{name}.toml")
        yield opened


@dataclass
class Run:
    """One run to record: its verdict, station, start, and the readings of its one step."""

    verdict: str
    station: str = "line-1"
    started_at: dt.datetime = T0
    readings: Sequence[MeasurementRecord] = field(default_factory=tuple)


def record_unit(store: Store, serial: str, lots: Mapping[str, str], runs: Sequence[Run],
                design_sha: str = DESIGN_SHA) -> list[int]:
    """Record every run of one unit as the runner would (begin, one step, finish); returns the run ids."""
    ids = []
    for run in runs:
        run_id = store.begin_run(serial, lots, run.station, "operator", "0.0-test", SEQUENCE_SHA, design_sha,
                                 started_at=run.started_at)
        if run.verdict != "running":
            step_verdict = "fail" if run.verdict == "fail" else "pass" if run.verdict == "pass" else run.verdict
            store.record_step(run_id, 0, "frequency at knob A stops", step_verdict, run.started_at,
                              run.started_at + dt.timedelta(seconds=2), "", list(run.readings))
        if run.verdict in ("pass", "fail", "station-fault", "aborted"):
            store.finish_run(run_id, run.verdict, ended_at=run.started_at + dt.timedelta(seconds=3))
        ids.append(run_id)
    return ids


def frequency(value_hz: float, knob_a_pct: float = 50.0, verdict: str = "pass") -> MeasurementRecord:
    """A frequency reading at knob A ``knob_a_pct`` with invented limits 900..1100 Hz."""
    return MeasurementRecord(f"counter {knob_a_pct:g}", "frequency_hz", value_hz, "Hz", verdict,
                             knob_a_pct=knob_a_pct, knob_b_pct=50.0, tolerance_low=900.0, tolerance_high=1100.0,
                             acceptance_low=905.0, acceptance_high=1095.0)


def counter_readings(unit, design, rng: np.random.Generator) -> list[Reading]:
    """What the demo sequence reads of a simulated unit through the simulated counter (100 ms gate,
    100 ps resolution): frequency at every knob A stop (B held), duty at every knob B stop (A held),
    as bench/lot_error_rates.py reads them."""
    a, b = design.knobs["a"], design.knobs["b"]
    out = [Reading(s, b.hold_pct, "frequency_hz", counter_reading(unit.wave(s, b.hold_pct), "frequency", 0.1,
                                                                  100e-12, rng)) for s in a.stops_pct]
    out += [Reading(a.hold_pct, s, "duty_pct", counter_reading(unit.wave(a.hold_pct, s), "duty", 0.1, 100e-12, rng))
            for s in b.stops_pct]
    return out
