"""Yield by component lot over a large results database: knobline against hand-written SQL.

Issue 5 asks for yield by lot over 10^5 units / 10^6 measurements in SQLite, in at most
1.5x the time of the equivalent hand-written SQL. This script:

1. creates a temporary SQLite file and lets :func:`fixture.store.open_store` migrate it (so
   the schema is exactly the store's), then fills it with plain ``sqlite3`` ``executemany``
   straight into those tables. Going through :meth:`Store.record_step` would commit (and
   fsync) once per step, which is right on the line and hours here; the rows are the same.
   The batch: 10^5 units over 3 stations and 5 days, 6 parts with 4 lots each, one lot
   worse, about 4 % failing their first run and retested once, 10 readings per first run
   (10^6 readings), a few station faults;
2. times ``yield by lot`` through knobline (:func:`fixture.analytics.yields.yields_by`,
   i.e. reading the store, first-pass and final yield per lot, Clopper-Pearson intervals);
3. times the equivalent hand-written SQL (first and latest judged run per unit, joined to
   the unit's lots, ``GROUP BY`` lot) plus the same intervals from the counts;
4. prints both (best of a few rounds, taking turns) and the ratio, and checks they agree.

    python bench/yield_by_lot.py [--units N] [--repeats R]
"""

from __future__ import annotations

import argparse
import datetime as dt
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from timing import pin_to_one_core  # noqa: E402

from fixture.analytics.yields import clopper_pearson, yields_by  # noqa: E402
from fixture.store import open_store  # noqa: E402

PARTS = ("r_integrator", "c_integrator", "r_schmitt_in", "r_schmitt_fb", "knob_a_pot", "knob_b_pot")
LOTS_PER_PART = 4
STATIONS = ("line-1", "line-2", "line-3")
READINGS_PER_RUN = 10
T0 = dt.datetime(2026, 3, 2, 6, 0)

# The hand-written query for "first-pass and final yield by lot": the fastest of the forms we tried on
# SQLite (grouping by the integer lot id, naming the lots afterwards, is twice as fast as grouping by names).
HAND_SQL = """
WITH judged AS (
    SELECT unit_id, MIN(id) AS first_id, MAX(id) AS last_id
    FROM run WHERE verdict IN ('pass', 'fail') GROUP BY unit_id),
by_lot AS (
    SELECT ul.lot_id, COUNT(*) AS units, SUM(f.verdict = 'pass') AS first_passed,
           SUM(l.verdict = 'pass') AS final_passed
    FROM judged j
    JOIN run f ON f.id = j.first_id
    JOIN run l ON l.id = j.last_id
    JOIN unit_lot ul ON ul.unit_id = j.unit_id
    GROUP BY ul.lot_id)
SELECT cl.part_key, cl.lot_code, b.units, b.first_passed, b.final_passed
FROM by_lot b JOIN component_lot cl ON cl.id = b.lot_id
"""


def _stamp(instant: dt.datetime) -> str:
    # SQLAlchemy's SQLite DateTime storage format (naive UTC, microseconds).
    return instant.strftime("%Y-%m-%d %H:%M:%S.%f")


def fill(path: Path, units: int, seed: int = 1) -> int:
    """Migrate an empty store at ``path`` and fill it; returns the number of readings written."""
    with open_store(f"sqlite:///{path}"):
        pass
    rng = np.random.default_rng(seed)
    con = sqlite3.connect(path)
    con.execute("PRAGMA synchronous = OFF")  # a throwaway file: fill speed only
    stamp = _stamp(T0)
    sha_d, sha_s = "d" * 64, "s" * 64
    con.execute("INSERT INTO product_design VALUES (1, 'PW-22', 'C', 'demo-panel.toml', ?, NULL, ?)", (sha_d, stamp))
    con.execute("INSERT INTO sequence VALUES (1, 'final test', 'demo-sequence.toml', ?, NULL, ?)", (sha_s, stamp))
    con.executemany("INSERT INTO station VALUES (?, ?, 'hall 2', ?, '', ?)",
                    [(i + 1, name, f"{i:064d}", stamp) for i, name in enumerate(STATIONS)])
    con.executemany("INSERT INTO component_lot VALUES (?, ?, ?)",
                    [(p * LOTS_PER_PART + k + 1, part, f"L26{p + 1:02d}{chr(65 + k)}")
                     for p, part in enumerate(PARTS) for k in range(LOTS_PER_PART)])
    con.executemany("INSERT INTO unit VALUES (?, ?, 1)", [(u + 1, f"PW22-{u + 1:06d}") for u in range(units)])
    lot_of = rng.integers(0, LOTS_PER_PART, size=(units, len(PARTS)))
    con.executemany("INSERT INTO unit_lot VALUES (?, ?, ?)",
                    [(u + 1, part, p * LOTS_PER_PART + int(lot_of[u, p]) + 1)
                     for u in range(units) for p, part in enumerate(PARTS)])
    # First-run failure: 3 % base, 9 % with lot 1 of the first part.
    p_fail = np.where(lot_of[:, 0] == 0, 0.09, 0.03)
    first_fails = rng.random(units) < p_fail
    faults = rng.random(units) < 0.005
    station = rng.integers(0, len(STATIONS), size=units)
    runs, steps, readings = [], [], []
    run_id = step_id = reading_id = 0
    for u in range(units):
        started = T0 + dt.timedelta(seconds=u * 4.3)
        verdicts = (["station-fault"] if faults[u] else []) + (["fail", "pass"] if first_fails[u] else ["pass"])
        first_judged, previous = True, None
        for verdict in verdicts:
            run_id += 1
            runs.append((run_id, u + 1, int(station[u]) + 1, "op", "0.1.0", sha_s, sha_d, _stamp(started),
                         _stamp(started + dt.timedelta(seconds=3)), verdict, previous, "[]"))
            previous = run_id
            started += dt.timedelta(minutes=5)
            if verdict == "station-fault" or not first_judged:
                continue
            first_judged = False
            step_id += 1
            steps.append((step_id, run_id, 0, "frequency at knob A stops", verdict, _stamp(started),
                          _stamp(started), ""))
            values = 1000.0 * (1 + 0.01 * rng.standard_normal(READINGS_PER_RUN))
            for i in range(READINGS_PER_RUN):
                reading_id += 1
                readings.append((reading_id, step_id, i, f"counter {i}", "frequency_hz", 10.0 * i, 50.0,
                                 float(values[i]), "Hz", 900.0, 1100.0, 905.0, 1095.0, 2.0, 2.0, "guarded", "pass"))
    con.executemany("INSERT INTO run VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", runs)
    con.executemany("INSERT INTO step_result VALUES (?, ?, ?, ?, ?, ?, ?, ?)", steps)
    con.executemany("INSERT INTO measurement VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", readings)
    con.commit()
    con.execute("ANALYZE")
    con.close()
    return reading_id


def hand_sql(path: Path) -> dict[tuple[str, str], tuple[int, int, int, tuple[float, float]]]:
    """Yield by lot from the hand-written query, with the same exact intervals."""
    con = sqlite3.connect(path)
    try:
        rows = con.execute(HAND_SQL).fetchall()
    finally:
        con.close()
    return {(part, lot): (n, first, final, clopper_pearson(first, n)) for part, lot, n, first, final in rows}


def through_knobline(url: str) -> dict[tuple[str, str], tuple[int, int, int, tuple[float, float]]]:
    """Yield by lot through knobline's analytics, as ``knobline yield --by lot`` computes it."""
    with open_store(url) as store:
        groups = yields_by(store, "lot")
    return {(g.key[0], g.key[1]): (g.first_pass.units, g.first_pass.passed, g.final.passed,
                                   (g.first_pass.low, g.first_pass.high)) for g in groups}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=100_000)
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    pin_to_one_core()
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench.sqlite"
        url = f"sqlite:///{path}"
        start = time.perf_counter()
        n_readings = fill(path, args.units)
        print(f"filled {args.units} units, {n_readings} readings in {time.perf_counter() - start:.1f} s "
              f"(sqlite3 executemany into the migrated schema)")
        with open_store(url):  # first open checks the migration; keep it out of the timing
            pass
        best = {"knobline": float("inf"), "hand SQL": float("inf")}
        results = {}
        for _ in range(args.repeats):  # take turns so load from neighbours hits both alike
            for name, fn in (("knobline", lambda: through_knobline(url)), ("hand SQL", lambda: hand_sql(path))):
                start = time.perf_counter()
                results[name] = fn()
                best[name] = min(best[name], time.perf_counter() - start)
        agree = results["knobline"] == results["hand SQL"]
        print(f"yield by lot, knobline (open store, query, intervals): {best['knobline']:.3f} s")
        print(f"yield by lot, hand-written SQL (sqlite3, same intervals): {best['hand SQL']:.3f} s")
        print(f"ratio knobline / hand SQL: {best['knobline'] / best['hand SQL']:.2f}x (aim <= 1.5x); "
              f"same counts and intervals: {agree}")
        if not agree:
            raise SystemExit("knobline and the hand-written SQL disagree")


if __name__ == "__main__":
    main()
