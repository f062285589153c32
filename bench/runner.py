"""Framework overhead of testing one simulated unit, and units per minute, on one core.

knobline's run (drivers, events, simulated world, judging, one store commit per
step) against the same SCPI traffic sent with bare pyvisa and the same rows
committed per step with plain sqlite3 (WAL, synchronous=FULL, as the store), plus
the run row committed at the start and updated at the end.
Target (issue 4): at most 1.25x.

    python bench/runner.py [--units N]
"""

from __future__ import annotations

import argparse
import datetime as dt
import sqlite3
import tempfile
import time
from pathlib import Path

import pyvisa
from timing import pin_to_one_core

from fixture.files.sequence_file import load_sequence
from fixture.files.station_file import load_station
from fixture.instruments.visa import VisaTransport
from fixture.runner.plan import compile_plan
from fixture.runner.station import open_station
from fixture.runner.unit_run import record_provenance, run_unit
from fixture.sim.devices import device_file
from fixture.sim.dut import build_unit
from fixture.sim.world import SimulatedWorld
from fixture.store import open_store

ROOT = Path(__file__).resolve().parent.parent


def record_traffic(run) -> list[tuple[str, str, str]]:
    """(resource, "write"|"query", text) of everything sent through any VisaTransport during ``run()``."""
    traffic: list[tuple[str, str, str]] = []
    real_write, real_query = VisaTransport.write, VisaTransport.query

    def write(self, text):
        traffic.append((self.name, "write", text))
        return real_write(self, text)

    def query(self, text):
        traffic.append((self.name, "query", text))
        return real_query(self, text)

    VisaTransport.write, VisaTransport.query = write, query
    try:
        run()
    finally:
        VisaTransport.write, VisaTransport.query = real_write, real_query
    return traffic


def direct(traffic, steps: list[int], db: Path, path: Path) -> float:
    """Replay ``traffic`` with bare pyvisa and commit ``steps`` (measurement rows per step) with sqlite3."""
    rm = pyvisa.ResourceManager(f"{path}@sim")
    resources = {}
    for name in {r for r, _, _ in traffic}:
        resources[name] = rm.open_resource(name, read_termination="\n", write_termination="\n")
    con = sqlite3.connect(db, isolation_level=None)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("PRAGMA synchronous=FULL")
    con.execute("create table if not exists step (id integer primary key, run int, name text, verdict text)")
    con.execute("create table if not exists reading (id integer primary key, step int, quantity text, "
                "value real, low real, high real, verdict text)")
    con.execute("create table if not exists run (id integer primary key, serial text, verdict text)")
    per_step = max(1, len(traffic) // max(1, len(steps)))
    start = time.perf_counter()
    # the run row is committed before the first step and updated at the end, as knobline must
    run_id = con.execute("insert into run (serial, verdict) values ('PW22-0', 'running')").lastrowid
    for i, rows in enumerate(steps):
        for resource, kind, text in traffic[i * per_step:(i + 1) * per_step]:
            (resources[resource].write if kind == "write" else resources[resource].query)(text)
        con.execute("begin immediate")
        cur = con.execute("insert into step (run, name, verdict) values (1, 'step', 'pass')")
        con.executemany("insert into reading (step, quantity, value, low, high, verdict) values (?,?,?,?,?,?)",
                        [(cur.lastrowid, "frequency_hz", 1.0, 0.0, 2.0, "pass")] * rows)
        con.execute("commit")
    for resource, kind, text in traffic[len(steps) * per_step:]:
        (resources[resource].write if kind == "write" else resources[resource].query)(text)
    con.execute("update run set verdict = 'pass' where id = ?", (run_id,))
    elapsed = time.perf_counter() - start
    con.close()
    for r in resources.values():
        r.close()
    rm.close()
    return elapsed


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=20)
    args = parser.parse_args()
    pin_to_one_core()
    config = load_station(ROOT / "sequences/demo-station.toml")
    sequence = load_sequence(ROOT / "sequences/demo-sequence.toml", station=config)
    plan = compile_plan(sequence, sequence.design, config)
    steps = [len(s.points) for s in plan.steps]
    with tempfile.TemporaryDirectory() as tmp, open_store(str(Path(tmp) / "k.sqlite")) as store, \
            open_station(config, today=dt.date(2026, 12, 2)) as station, SimulatedWorld(station, seed=1) as world:
        ids = record_provenance(store, sequence, station)

        def one(serial: str) -> None:
            world.insert(build_unit(sequence.design, serial, seed=1))
            run_unit(plan, sequence, station, store, serial=serial, lots={}, operator="bench", sleep=lambda s: None,
                     instrument_ids=ids)

        one("PW22-900000")  # warm-up: imports, caches, first instrument records
        traffic = record_traffic(lambda: one("PW22-900001"))
        physics = {"s": 0.0}
        on_event = world._on_event

        def timed_physics(event):  # the simulated unit's physics is the bench's, not the framework's
            start = time.perf_counter()
            try:
                on_event(event)
            finally:
                physics["s"] += time.perf_counter() - start

        for driver in station.drivers.values():
            driver.events.subscribe(timed_physics)
        world.close()
        world._transports = {role: VisaTransport(station.config.instruments[role].resource, station.backends[role])
                             for role in ("counter", "scope", "supply")}
        start = time.perf_counter()
        for i in range(args.units):
            one(f"PW22-{910000 + i:06d}")
        knobline_s = (time.perf_counter() - start) / args.units
        physics_s = physics["s"] / args.units
        with device_file() as path:
            direct_s = min(direct(traffic, steps, Path(tmp) / f"d{i}.sqlite", path) for i in range(3))
    print(f"one simulated unit: {len(plan.steps)} steps, {sum(steps)} readings, {len(traffic)} SCPI messages")
    print(f"  knobline run_unit:                          {knobline_s * 1e3:8.1f} ms/unit")
    print(f"  same traffic, bare pyvisa + sqlite3 commits: {direct_s * 1e3:8.1f} ms/unit")
    print(f"    of which the simulated unit's physics:    {physics_s * 1e3:8.1f} ms/unit (sim only)")
    print(f"  ratio:                                      {knobline_s / direct_s:8.2f}x   (target <= 1.25)")
    print(f"  ratio without the simulated physics:        {(knobline_s - physics_s) / direct_s:8.2f}x")
    print(f"  units per minute on one core:               {60.0 / knobline_s:8.0f}")


if __name__ == "__main__":
    main()
