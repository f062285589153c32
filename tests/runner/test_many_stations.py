"""Many stations, one line database: stations started together all record every unit, once.

Each child process is one station of its own name testing its own serials through the real runner
and store (the simulated bench, as ``knobline test`` wires it); they share one results database.
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
from collections import Counter

from sqlalchemy import func, select

from fixture.model.verdicts import FINAL_VERDICTS
from fixture.reporting.certificate import certificate_number
from fixture.store import open_store
from fixture.store.models import RunRow, StationRow, UnitRow

STATIONS = 8
UNITS_PER_STATION = 50

STATION_PROCESS = r"""
import dataclasses, datetime as dt, json, sys, time
from pathlib import Path
from fixture.files.sequence_file import load_sequence
from fixture.files.station_file import load_station
from fixture.runner.ownership import hold_station
from fixture.runner.plan import compile_plan
from fixture.runner.station import open_station
from fixture.runner.unit_run import run_unit
from fixture.sim.dut import build_unit
from fixture.sim.world import SimulatedWorld
from fixture.store import open_store
from tests.demo_lots import DEMO_LOTS

db_url, index, units, start_at = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), float(sys.argv[4])
root = Path.cwd() / "sequences"
config = load_station(root / "demo-station.toml")
config = dataclasses.replace(config, name=f"line station {index}", content_sha256=f"{index:064x}")
sequence = load_sequence(root / "demo-sequence.toml", station=config)
plan = compile_plan(sequence, sequence.design, config)
time.sleep(max(0.0, start_at - time.time()))  # every station starts at one moment
verdicts = []
with open_store(db_url) as store, hold_station(store, config.name, lock_dir=Path(sys.argv[5])), \
        open_station(config, today=dt.date(2026, 12, 2)) as station, SimulatedWorld(station, seed=index) as world:
    for n in range(1, units + 1):
        serial = f"PW22-{index:02d}{n:04d}"
        world.insert(build_unit(sequence.design, serial, seed=index * 1000 + n))
        outcome = run_unit(plan, sequence, station, store, serial=serial, lots=DEMO_LOTS, operator=f"op{index}",
                           sleep=lambda s: None)
        verdicts.append([serial, outcome.run_id, str(outcome.verdict)])
print(json.dumps(verdicts))
"""


def test_eight_stations_started_together_record_every_unit_once(database_url: str, tmp_path) -> None:
    # The claim (issue 12, common practice for a shared line database, no source): N writers started at
    # one instant lose nothing, duplicate nothing and never surface a lock error to the operator.
    with open_store(database_url):
        pass  # the database exists and is migrated before the stations race (start-up races: test_migrations)
    start_at = time.time() + 8.0
    children = [subprocess.Popen([sys.executable, "-c", STATION_PROCESS, database_url, str(k), str(UNITS_PER_STATION),
                                  str(start_at), str(tmp_path / "locks")],
                                 stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
                for k in range(1, STATIONS + 1)]
    results = [child.communicate(timeout=900) for child in children]
    assert [c.returncode for c in children] == [0] * STATIONS, [err[-1500:] for _, err in results]
    assert not any("lock" in err.lower() for _, err in results), [err[-500:] for _, err in results]
    reported = [row for out, _ in results for row in json.loads(out)]
    assert len(reported) == STATIONS * UNITS_PER_STATION

    with open_store(database_url) as store, store.engine.connect() as connection:
        runs = connection.execute(select(RunRow.id, UnitRow.serial, RunRow.verdict, StationRow.name)
                                  .join(UnitRow, UnitRow.id == RunRow.unit_id)
                                  .join(StationRow, StationRow.id == RunRow.station_id)).all()
        units = connection.scalar(select(func.count()).select_from(UnitRow))
        database_id = store.database_id
    # 400 runs, none lost, none twice: one run per serial, each with the run id its station was told
    assert len(runs) == STATIONS * UNITS_PER_STATION and units == len(runs)
    assert sorted((serial, run_id) for run_id, serial, _, _ in runs) == sorted((s, r) for s, r, _ in reported)
    assert all(verdict in FINAL_VERDICTS for _, _, verdict, _ in runs)
    assert Counter(name for *_, name in runs) == {f"line station {k}": UNITS_PER_STATION
                                                  for k in range(1, STATIONS + 1)}
    numbers = {certificate_number(name, run_id, database_id) for run_id, _, _, name in runs}
    assert len(numbers) == len(runs)  # certificate numbers unique across the stations
