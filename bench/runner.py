"""Framework overhead of testing one simulated unit, and units per minute, on one core.

knobline's run (drivers, events, judging, one store commit per step) against a bare path:
the same SCPI traffic sent with bare pyvisa, and the same rows committed per step with plain
sqlite3. Since the drivers send a setting only when it changes (issue 13), the bare path replays
that same necessary traffic, not the redundant writes knobline used to send.

Two bare paths are timed in the same run, interleaved:

* **same rows** (the yardstick of the target): the station's own traffic (not the simulated
  unit's value injections, which the simulation sends on its own connections) and, with plain
  sqlite3, the very rows knobline wrote for a unit (unit, lots, run, instruments, steps,
  readings, decoder constants, heartbeat and verdict updates) in knobline's own tables, made by
  its migrations, with its pragmas. The simulated unit's physics (its computing and its value
  injections) is timed and taken off knobline's side.
* **toy rows** (the yardstick until 2026-12-04): all recorded traffic, the injections included,
  and a few rows into seven-column tables without indexes or foreign keys. knobline's physics
  stays on its side. Kept for comparison with the figures published before.

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


def record_traffic(run, simulation=()) -> tuple[list[tuple[str, str, str]], list[tuple[str, str, str]]]:
    """(resource, "write"|"query", text) sent through any VisaTransport during ``run()``: all of it, and
    the station's alone (without what went through the ``simulation``'s transports)."""
    traffic: list[tuple[str, str, str]] = []
    station: list[tuple[str, str, str]] = []
    real_write, real_query = VisaTransport.write, VisaTransport.query

    def write(self, text):
        traffic.append((self.name, "write", text))
        if not any(self is t for t in simulation):
            station.append((self.name, "write", text))
        return real_write(self, text)

    def query(self, text):
        traffic.append((self.name, "query", text))
        if not any(self is t for t in simulation):
            station.append((self.name, "query", text))
        return real_query(self, text)

    VisaTransport.write, VisaTransport.query = write, query
    try:
        run()
    finally:
        VisaTransport.write, VisaTransport.query = real_write, real_query
    return traffic, station


def unit_rows(db: Path, serial: str) -> dict[str, object]:
    """Every row knobline wrote for the unit ``serial``'s first run, by table (ids left out), read with sqlite3."""
    con = sqlite3.connect(db)
    con.row_factory = sqlite3.Row

    def rows(sql: str, *args: object) -> list[dict[str, object]]:
        return [{k: r[k] for k in r.keys() if k != "id"} for r in con.execute(sql, args)]
    (unit,) = rows("select * from unit where serial = ?", serial)
    unit_id = con.execute("select id from unit where serial = ?", (serial,)).fetchone()[0]
    run_id = con.execute("select min(id) from run where unit_id = ?", (unit_id,)).fetchone()[0]
    steps = []
    for (step_id,) in con.execute("select id from step_result where run_id = ? order by id", (run_id,)).fetchall():
        steps.append((rows("select * from step_result where id = ?", step_id)[0],
                      rows("select * from measurement where step_id = ? order by id", step_id)))
    found = {"unit": unit,
             "lots": [(r["part_key"], r["lot_code"]) for r in con.execute(
                 "select l.part_key, l.lot_code from unit_lot u join component_lot l on l.id = u.lot_id "
                 "where u.unit_id = ?", (unit_id,))],
             "run": rows("select * from run where id = ?", run_id)[0],
             "instruments": rows("select * from run_instrument where run_id = ?", run_id),
             "steps": steps,
             "decoder": rows("select * from decoder_calibration where run_id = ?", run_id)}
    con.close()
    return found


def _insert(table: str, row: dict[str, object]) -> str:
    columns = ", ".join('"' + c + '"' for c in row)
    return f"insert into {table} ({columns}) values ({', '.join('?' * len(row))})"


def same_rows_database(source: Path, db: Path) -> sqlite3.Connection:
    """A copy of knobline's database ``source`` (its tables, made by its migrations, and the design, station and
    instruments its rows refer to), opened with plain sqlite3 and knobline's pragmas."""
    with sqlite3.connect(source) as src, sqlite3.connect(db) as dst:
        src.backup(dst)
    con = sqlite3.connect(db, isolation_level=None)
    for pragma in ("busy_timeout = 10000", "journal_mode = WAL", "synchronous = FULL", "foreign_keys = ON"):
        con.execute(f"PRAGMA {pragma}")
    return con


def direct_same_rows(traffic, rows: dict, serial: str, resources, con) -> tuple[float, float]:
    """Replay the station's ``traffic`` with bare pyvisa and write knobline's own ``rows`` with sqlite3.

    The statements are those a hand-written program would use for the same records: the unit
    found or added, its lots found (one query) or added, the run and its instruments in the
    first commit; per step the heartbeat update, the step and its readings in one commit; the
    verdict in the last.
    """
    steps = rows["steps"]
    per_step = max(1, len(traffic) // max(1, len(steps)))
    start, cpu = time.perf_counter(), time.process_time()
    con.execute("begin immediate")
    unit = dict(rows["unit"], serial=serial)
    found = con.execute("select id from unit where serial = ?", (serial,)).fetchone()
    unit_id = found[0] if found else con.execute(_insert("unit", unit), tuple(unit.values())).lastrowid
    codes = sorted({code for _, code in rows["lots"]})
    known = {(p, c): i for i, p, c in con.execute(
        f"select id, part_key, lot_code from component_lot where lot_code in ({', '.join('?' * len(codes))})", codes)}
    for part, code in rows["lots"]:
        if (part, code) not in known:
            known[(part, code)] = con.execute("insert into component_lot (part_key, lot_code) values (?, ?)",
                                              (part, code)).lastrowid
    con.executemany("insert into unit_lot (unit_id, part_key, lot_id) values (?, ?, ?)",
                    [(unit_id, p, known[(p, c)]) for p, c in rows["lots"]])
    run = dict(rows["run"], unit_id=unit_id)
    run_id = con.execute(_insert("run", run), tuple(run.values())).lastrowid
    if rows["instruments"]:
        link = dict(rows["instruments"][0])
        con.executemany(_insert("run_instrument", link),
                        [tuple(dict(r, run_id=run_id).values()) for r in rows["instruments"]])
    con.execute("commit")
    for i, (step, readings) in enumerate(steps):
        for resource, kind, text in traffic[i * per_step:(i + 1) * per_step]:
            (resources[resource].write if kind == "write" else resources[resource].query)(text)
        con.execute("begin immediate")
        con.execute("update run set heartbeat_at = ? where id = ? and verdict = 'running'", (run["started_at"], run_id))
        step_row = dict(step, run_id=run_id)
        step_id = con.execute(_insert("step_result", step_row), tuple(step_row.values())).lastrowid
        if readings:
            con.executemany(_insert("measurement", readings[0]),
                            [tuple(dict(r, step_id=step_id).values()) for r in readings])
        if i == 0 and rows["decoder"]:  # the decoder constants go with one step's commit, as knobline's
            decoder = dict(rows["decoder"][0], run_id=run_id)
            con.execute(_insert("decoder_calibration", decoder), tuple(decoder.values()))
        con.execute("commit")
    for resource, kind, text in traffic[len(steps) * per_step:]:
        (resources[resource].write if kind == "write" else resources[resource].query)(text)
    con.execute("update run set verdict = 'pass', ended_at = ? where id = ? and verdict = 'running'",
                (run["started_at"], run_id))
    return time.perf_counter() - start, time.process_time() - cpu


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
        traffic, station_traffic = record_traffic(lambda: one("PW22-900001"), simulation=world._transports.values())
        rows = unit_rows(Path(tmp) / "k.sqlite", "PW22-900001")
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
        # Interleaved, one knobline unit then one of each bare path, and medians of each: on a shared
        # machine the load drifts, and a drift must not land on one side only.
        times: dict[str, list[float]] = {k: [] for k in ("knobline", "physics", "same", "toy", "knobline_cpu",
                                                          "same_cpu", "toy_cpu")}
        with device_file() as path:
            rm, resources, con = bare_bench(traffic, Path(tmp) / "bare.sqlite", path)
            same = same_rows_database(Path(tmp) / "k.sqlite", Path(tmp) / "same.sqlite")
            direct(traffic, steps, lots, "PW22-900001", resources, con)  # warm-up, as knobline's
            direct_same_rows(station_traffic, rows, "PW22-800001", resources, same)
            for i in range(args.units):
                serial = f"PW22-{910000 + i:06d}"
                before = physics["s"]
                start, cpu = time.perf_counter(), time.process_time()
                one(serial)
                times["knobline"].append(time.perf_counter() - start)
                times["knobline_cpu"].append(time.process_time() - cpu)
                times["physics"].append(physics["s"] - before)
                wall, cpu_s = direct_same_rows(station_traffic, rows, serial, resources, same)
                times["same"].append(wall)
                times["same_cpu"].append(cpu_s)
                wall, cpu_s = direct(traffic, steps, lots, serial, resources, con)
                times["toy"].append(wall)
                times["toy_cpu"].append(cpu_s)
            con.close()
            same.close()
            rm.close()
        m = {k: statistics.median(v) for k, v in times.items()}
        framework = [k - p for k, p in zip(times["knobline"], times["physics"], strict=True)]
        framework_s = statistics.median(framework)
    judged = {v: verdicts.count(v) for v in sorted(set(verdicts))}
    print(f"one simulated unit: {len(plan.steps)} steps, {sum(steps)} readings, {len(station_traffic)} SCPI "
          f"messages from the station ({len(traffic)} with the simulation's value injections)")
    print(f"  medians of {args.units} units each, interleaved:")
    print(f"  knobline run_unit:                               {m['knobline'] * 1e3:8.1f} ms/unit")
    print(f"    of which the simulated unit's physics:         {m['physics'] * 1e3:8.1f} ms/unit (sim only)")
    print(f"    without it (the framework's own path):         {framework_s * 1e3:8.1f} ms/unit")
    print("  bare, same rows: station traffic with pyvisa,")
    print(f"    knobline's rows in its tables with sqlite3:    {m['same'] * 1e3:8.1f} ms/unit")
    print(f"  ratio, framework / bare same rows:               {framework_s / m['same']:8.2f}x   "
          "(target <= 1.5, goal 1.25)")
    print(f"  ratio of CPU time, knobline with physics / bare: {m['knobline_cpu'] / m['same_cpu']:8.2f}x")
    print(f"  bare, toy rows (the yardstick before 2026-12-04): {m['toy'] * 1e3:7.1f} ms/unit")
    print(f"  ratio, knobline with physics / bare toy rows:    {m['knobline'] / m['toy']:8.2f}x   (as published before)")
    print(f"  knobline's verdicts: {judged}")
    print(f"  units per minute on one core:                    {60.0 / m['knobline']:8.0f}")


if __name__ == "__main__":
    main()
