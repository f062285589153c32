"""Framework overhead of testing one simulated unit, and units per minute, on one core.

knobline's run (drivers, events, simulated world, judging, one store commit per
step) against the same SCPI traffic sent with bare pyvisa and the same rows
committed per step with plain sqlite3 (WAL, synchronous=FULL, as the store), plus
the unit, its component lots and the run row committed at the start and the
verdict at the end. The traffic is what knobline sent for one unit, recorded: since
the drivers send a setting only when it changes (issue 13), the bare path replays
that same necessary traffic, not the redundant writes knobline used to send.
Target (issue 13): at most 1.5x, goal 1.25x.

    python bench/runner.py [--units N]
"""

from __future__ import annotations

import argparse
import datetime as dt
import sqlite3
import statistics
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


def bare_bench(traffic, db: Path, path: Path):
    """The bare path's instruments (opened with pyvisa on the device file) and its sqlite3 database, kept open.

    Opened once and kept, as knobline's station and results database are: closing a pyvisa-sim
    resource manager closes the sessions knobline's station shares with it.
    """
    rm = pyvisa.ResourceManager(f"{path}@sim")
    resources = {name: rm.open_resource(name, read_termination="\n", write_termination="\n")
                 for name in {r for r, _, _ in traffic}}
    con = sqlite3.connect(db, isolation_level=None)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("PRAGMA synchronous=FULL")
    con.execute("create table if not exists step (id integer primary key, run int, name text, verdict text)")
    con.execute("create table if not exists reading (id integer primary key, step int, quantity text, "
                "value real, low real, high real, verdict text)")
    con.execute("create table if not exists run (id integer primary key, unit int, verdict text)")
    con.execute("create table if not exists unit (id integer primary key, serial text unique)")
    con.execute("create table if not exists lot (id integer primary key, part text, code text, unique (part, code))")
    con.execute("create table if not exists unit_lot (unit int, part text, lot int, primary key (unit, part))")
    return rm, resources, con


def direct(traffic, steps: list[int], lots: dict[str, str], serial: str, resources, con) -> tuple[float, float]:
    """Replay ``traffic`` with bare pyvisa and commit ``steps`` (measurement rows per step) with sqlite3."""
    per_step = max(1, len(traffic) // max(1, len(steps)))
    start, cpu = time.perf_counter(), time.process_time()
    # the unit and its lots (found or added) and the run row, committed before the first step and
    # updated at the end, as knobline's begin_run and finish_run must
    con.execute("begin immediate")
    unit_id = con.execute("insert into unit (serial) values (?)", (serial,)).lastrowid
    for part, code in lots.items():
        found = con.execute("select id from lot where part = ? and code = ?", (part, code)).fetchone()
        lot_id = found[0] if found else con.execute("insert into lot (part, code) values (?, ?)",
                                                    (part, code)).lastrowid
        con.execute("insert into unit_lot (unit, part, lot) values (?, ?, ?)", (unit_id, part, lot_id))
    run_id = con.execute("insert into run (unit, verdict) values (?, 'running')", (unit_id,)).lastrowid
    con.execute("commit")
    for i, rows in enumerate(steps):
        for resource, kind, text in traffic[i * per_step:(i + 1) * per_step]:
            (resources[resource].write if kind == "write" else resources[resource].query)(text)
        con.execute("begin immediate")
        cur = con.execute("insert into step (run, name, verdict) values (?, 'step', 'pass')", (run_id,))
        con.executemany("insert into reading (step, quantity, value, low, high, verdict) values (?,?,?,?,?,?)",
                        [(cur.lastrowid, "frequency_hz", 1.0, 0.0, 2.0, "pass")] * rows)
        con.execute("commit")
    for resource, kind, text in traffic[len(steps) * per_step:]:
        (resources[resource].write if kind == "write" else resources[resource].query)(text)
    con.execute("update run set verdict = 'pass' where id = ?", (run_id,))
    return time.perf_counter() - start, time.process_time() - cpu


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=20)
    args = parser.parse_args()
    pin_to_one_core()
    config = load_station(ROOT / "sequences/demo-station.toml")
    sequence = load_sequence(ROOT / "sequences/demo-sequence.toml", station=config)
    plan = compile_plan(sequence, sequence.design, config)
    steps = [len(s.points) for s in plan.steps]
    # a line's unit comes with a lot for every part the sequence requires (invented demo codes)
    lots = {part: f"{part.upper()}-LOT1" for part in sequence.required_lots}
    with tempfile.TemporaryDirectory() as tmp, open_store(str(Path(tmp) / "k.sqlite")) as store, \
            open_station(config, today=dt.date(2026, 12, 2)) as station, SimulatedWorld(station, seed=1) as world:
        ids = record_provenance(store, sequence, station)

        verdicts: list[str] = []

        def one(serial: str) -> None:
            world.insert(build_unit(sequence.design, serial, seed=1))
            verdicts.append(run_unit(plan, sequence, station, store, serial=serial, lots=lots, operator="bench", sleep=lambda s: None,
                     instrument_ids=ids).verdict)

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
        # Interleaved, one knobline unit then one bare unit, and medians of each: on a shared machine
        # the load drifts, and a drift must not land on one side only.
        knobline_times, direct_times, physics_times, knobline_cpu, direct_cpu = [], [], [], [], []
        with device_file() as path:
            rm, resources, con = bare_bench(traffic, Path(tmp) / "bare.sqlite", path)
            direct(traffic, steps, lots, "PW22-900001", resources, con)  # warm-up, as knobline's
            for i in range(args.units):
                before = physics["s"]
                start, cpu = time.perf_counter(), time.process_time()
                one(f"PW22-{910000 + i:06d}")
                knobline_times.append(time.perf_counter() - start)
                knobline_cpu.append(time.process_time() - cpu)
                physics_times.append(physics["s"] - before)
                wall, cpu_s = direct(traffic, steps, lots, f"PW22-{910000 + i:06d}", resources, con)
                direct_times.append(wall)
                direct_cpu.append(cpu_s)
            con.close()
            rm.close()
        knobline_s = statistics.median(knobline_times)
        physics_s = statistics.median(physics_times)
        direct_s = statistics.median(direct_times)
        cpu_ratio = statistics.median(knobline_cpu) / statistics.median(direct_cpu)
    judged = {v: verdicts.count(v) for v in sorted(set(verdicts))}
    print(f"one simulated unit: {len(plan.steps)} steps, {sum(steps)} readings, {len(traffic)} SCPI messages")
    print(f"  medians of {args.units} units each, interleaved:")
    print(f"  knobline run_unit:                          {knobline_s * 1e3:8.1f} ms/unit")
    print(f"  same traffic, bare pyvisa + sqlite3 commits: {direct_s * 1e3:8.1f} ms/unit")
    print(f"    of which the simulated unit's physics:    {physics_s * 1e3:8.1f} ms/unit (sim only)")
    print(f"  ratio:                                      {knobline_s / direct_s:8.2f}x   (target <= 1.5, goal 1.25)")
    print(f"  ratio without the simulated physics:        {(knobline_s - physics_s) / direct_s:8.2f}x")
    print(f"  ratio of CPU time (no waiting for the disk): {cpu_ratio:8.2f}x   (steadier on a loaded machine)")
    print(f"  knobline's verdicts: {judged}")
    print(f"  units per minute on one core:               {60.0 / knobline_s:8.0f}")


if __name__ == "__main__":
    main()
