"""Results stores of any size, quickly: a real demo batch replicated with noise (tests and bench/report_scale.py).

Testing 10^5 units through the runner and the simulated bench takes hours, so
big stores are built in two stages:

1. a **template**: a real ``knobline demo`` batch of a few hundred or thousand
   units (the demo design ``sequences/demo-panel.toml`` on the simulated bench,
   component lots as :func:`fixture.sim.batch.plan_batch` assigns them, one lot
   shifted, a few planted defects), stored by the real runner;
2. the **replica**: ``units`` units written by bulk inserts through the store's
   tables (SQLAlchemy Core, a few transactions). Unit ``i`` sits at the same
   relative place in build order as template unit ``i x T / units`` and takes
   that unit's component lots, but its runs, steps and readings are copied from
   a unit drawn at random among the template units built from the *same lots*
   (so consecutive units differ as consecutive template units do, and a lot's
   units read like that lot's units). Every reading is multiplied by
   ``1 + e``, ``e`` normal with ``noise`` (relative) as its standard deviation,
   and judged again against its acceptance limits; step and run verdicts follow.
   Runs are spread evenly over ``days`` days.

So a replica keeps the template's lot effects, defect rate and reading spread,
but holds no new information: a replica of 10^5 units is a load test of the
report, not a batch to study statistics on.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from click.testing import CliRunner
from sqlalchemy import Table, select

from fixture.store import open_store
from fixture.store.engine import WRITE_OPTION
from fixture.store.models import (
    CalibrationRow,
    ComponentLotRow,
    DecoderCalibrationRow,
    InstrumentRow,
    MeasurementRow,
    ProductDesignRow,
    RunInstrumentRow,
    RunRow,
    SelfCheckReadingRow,
    SelfCheckRow,
    SequenceRow,
    StationRow,
    StepResultRow,
    UnitLotRow,
    UnitRow,
)

#: tables copied from the template as they are (ids kept)
_SHARED: tuple[Table, ...] = tuple(t.__table__ for t in (
    ProductDesignRow, SequenceRow, StationRow, InstrumentRow, CalibrationRow, ComponentLotRow, SelfCheckRow,
    SelfCheckReadingRow))
_unit, _unit_lot, _run = UnitRow.__table__, UnitLotRow.__table__, RunRow.__table__
_run_instrument, _step = RunInstrumentRow.__table__, StepResultRow.__table__
_measurement, _decoder = MeasurementRow.__table__, DecoderCalibrationRow.__table__

#: first run of a replica (invented)
START = dt.datetime(2026, 1, 5, 6, 0, tzinfo=dt.UTC)


def make_template(folder: Path, units: int, seed: int = 2026) -> str:
    """A real demo batch of ``units`` units in ``folder`` (kept when already there); returns its database URL."""
    from fixture.cli import main

    db = folder / "results.sqlite"
    if not db.exists():
        result = CliRunner().invoke(main, ["demo", "--units", str(units), "--seed", str(seed), "--out", str(folder),
                                           "--no-reports"], catch_exceptions=False)
        if result.exit_code != 0:
            raise RuntimeError(f"demo template: exit {result.exit_code}: {result.stderr[-500:]}")
    return f"sqlite:///{db}"


@dataclass
class _TemplateUnit:
    serial: str
    design_id: int
    lots: list[tuple[str, int]]
    runs: list[dict[str, Any]]  # each with "steps": [{..., "measurements": [...]}], "instruments", "decoder"


def _rows(con: Any, table: Table, order: Any = None) -> list[dict[str, Any]]:
    query = select(table) if order is None else select(table).order_by(order)
    return [dict(r._mapping) for r in con.execute(query)]


def _read_template(url: str) -> tuple[list[_TemplateUnit], dict[Table, list[dict[str, Any]]]]:
    with open_store(url) as store, store.engine.connect() as con:
        shared = {t: _rows(con, t, t.c.id) for t in _SHARED}
        units = {u["id"]: _TemplateUnit(u["serial"], u["product_design_id"], [], [])
                 for u in _rows(con, _unit, _unit.c.id)}
        for row in _rows(con, _unit_lot):
            units[row["unit_id"]].lots.append((row["part_key"], row["lot_id"]))
        runs = {r["id"]: {**r, "steps": [], "instruments": [], "decoder": None} for r in _rows(con, _run, _run.c.id)}
        for row in _rows(con, _run_instrument):
            runs[row["run_id"]]["instruments"].append(row)
        for row in _rows(con, _decoder):
            runs[row["run_id"]]["decoder"] = row
        steps = {}
        for row in _rows(con, _step, _step.c.id):
            steps[row["id"]] = {**row, "measurements": []}
            runs[row["run_id"]]["steps"].append(steps[row["id"]])
        for row in _rows(con, _measurement, _measurement.c.id):
            steps[row["step_id"]]["measurements"].append(row)
    for run in runs.values():
        units[run["unit_id"]].runs.append(run)
    kept = [u for u in units.values() if u.runs]
    for u in kept:
        u.lots.sort()
    return kept, shared


def _judge(value: float, low: float | None, high: float | None) -> str:
    return "pass" if (low is None or value >= low) and (high is None or value <= high) else "fail"


@dataclass(frozen=True)
class Replica:
    """What was written: units, runs and readings."""

    url: str
    units: int
    runs: int
    readings: int


def build_replica(template_url: str, url: str, units: int, *, seed: int = 1, noise: float = 1e-3,
                  days: float = 365.0, chunk_units: int = 5000,
                  progress: Callable[[int], None] | None = None) -> Replica:
    """Write a store of ``units`` units at ``url`` (a new database) replicated from ``template_url``."""
    template, shared = _read_template(template_url)
    rng = np.random.default_rng(seed)
    # Template units in build order, grouped into runs of consecutive units with the same lots.
    lot_key = [tuple(u.lots) for u in template]
    same_lots: list[list[int]] = []
    group_of = []
    for j, key in enumerate(lot_key):
        if not same_lots or lot_key[same_lots[-1][0]] != key:
            same_lots.append([])
        same_lots[-1].append(j)
        group_of.append(len(same_lots) - 1)
    spacing_s = days * 86400.0 / units
    counters = {"run": 0, "step": 0, "measurement": 0, "decoder": 0, "readings": 0}
    with open_store(url) as store:
        writer = store.engine.execution_options(**{WRITE_OPTION: True})
        with writer.begin() as con:
            for table, rows in shared.items():
                if rows:
                    con.execute(table.insert(), rows)
        for first in range(0, units, chunk_units):
            batch = _chunk(template, same_lots, group_of, rng, range(first, min(units, first + chunk_units)),
                           units, noise, spacing_s, counters)
            with writer.begin() as con:
                for table, rows in batch:
                    if rows:
                        con.execute(table.insert(), rows)
            if progress is not None:
                progress(min(units, first + chunk_units))
    return Replica(url=url, units=units, runs=counters["run"], readings=counters["readings"])


def _chunk(template: list[_TemplateUnit], same_lots: list[list[int]], group_of: list[int],
           rng: np.random.Generator, indices: range, all_units: int, noise: float, spacing_s: float,
           counters: dict[str, int]) -> list[tuple[Table, list[dict[str, Any]]]]:
    units, lots, runs, instruments, steps, readings, decoders = [], [], [], [], [], [], []
    total = len(template)
    for i in indices:
        place = min(total - 1, (i * total) // all_units)
        group = same_lots[group_of[place]]
        source = template[group[int(rng.integers(len(group)))]]
        lot_source = template[place]
        unit_id = i + 1
        units.append({"id": unit_id, "serial": f"PW22-{unit_id:06d}", "product_design_id": source.design_id})
        lots.extend({"unit_id": unit_id, "part_key": part, "lot_id": lot_id} for part, lot_id in lot_source.lots)
        shift = START + dt.timedelta(seconds=i * spacing_s) - source.runs[0]["started_at"]
        new_run_of: dict[int, int] = {}
        for run in source.runs:
            counters["run"] += 1
            run_id = counters["run"]
            new_run_of[run["id"]] = run_id
            step_rows, failed_steps = [], 0
            for step in run["steps"]:
                counters["step"] += 1
                step_id = counters["step"]
                failed_readings, any_judged_failed_before = 0, False
                for m in step["measurements"]:
                    counters["measurement"] += 1
                    value = m["value"] * (1.0 + noise * float(rng.standard_normal())) if math.isfinite(
                        m["value"]) else m["value"]
                    verdict = m["verdict"]
                    if verdict in ("pass", "fail"):
                        any_judged_failed_before |= verdict == "fail"
                        verdict = _judge(value, m["acceptance_low"], m["acceptance_high"])
                        failed_readings += verdict == "fail"
                    readings.append({**m, "id": counters["measurement"], "step_id": step_id, "value": value,
                                     "verdict": verdict})
                counters["readings"] += len(step["measurements"])
                verdict = step["verdict"]
                if verdict in ("pass", "fail"):
                    failed_otherwise = verdict == "fail" and not any_judged_failed_before
                    verdict = "fail" if failed_readings or failed_otherwise else "pass"
                failed_steps += verdict == "fail"
                step_rows.append({**{k: v for k, v in step.items() if k != "measurements"}, "id": step_id,
                                  "run_id": run_id, "verdict": verdict, "started_at": step["started_at"] + shift,
                                  "ended_at": step["ended_at"] + shift})
            verdict = run["verdict"]
            if verdict in ("pass", "fail"):
                verdict = "fail" if failed_steps else "pass"
            runs.append({**{k: v for k, v in run.items() if k not in ("steps", "instruments", "decoder")},
                         "id": run_id, "unit_id": unit_id, "verdict": verdict,
                         "retest_of": new_run_of.get(run["retest_of"]) if run["retest_of"] else None,
                         "started_at": run["started_at"] + shift,
                         "ended_at": run["ended_at"] + shift if run["ended_at"] else None,
                         "heartbeat_at": run["heartbeat_at"] + shift if run["heartbeat_at"] else None})
            steps.extend(step_rows)
            instruments.extend({**r, "run_id": run_id} for r in run["instruments"])
            if run["decoder"] is not None:
                counters["decoder"] += 1
                decoders.append({**run["decoder"], "id": counters["decoder"], "run_id": run_id})
    return [(_unit, units), (_unit_lot, lots), (_run, runs), (_run_instrument, instruments), (_step, steps),
            (_measurement, readings), (_decoder, decoders)]
