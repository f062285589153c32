"""A line's database at scale: yield by lot against hand-written SQL, and the batch report, on SQLite and PostgreSQL.

What it measures, at each size (10^4 and 10^5 units by default) and on each database:

* **yield by lot** as ``knobline yield --by lot`` computes it
  (:func:`fixture.analytics.dataset.yield_counts`, the per-lot first-pass and final counts, aggregated
  inside the database), against **hand-written SQL** on the same database computing the same counts
  from the counting rule in the ``yield`` help (first-pass: a unit's first judged run, pass or fail,
  passed; final: its latest judged run passed; a unit counts under each of its lots), written three
  ways (window functions; each unit's lowest and highest judged run id, grouped by the lots' names or
  by lot id first). All must give the same numbers (asserted). Best of ``--repeats`` runs each, taking
  turns; the ratio knobline / the fastest hand query is printed (goal: at most 1.5x). The whole
  ``yield_report`` (per-lot counts, the overall yields from the product grouping, unit totals,
  Clopper-Pearson intervals) is printed beside it;
* **the batch report's data stage** (``build_batch_report`` with ``design=None``, as
  bench/report_scale.py does) in a fresh process: seconds and peak RSS (stage seconds in ``--json``);
* **growth** from the smallest to the largest size: time ratio against size ratio, "linear or
  better" when time grows no faster than the units (goal of issue 12 item 5).

The stores are built by tests/reporting/bulk_store.py: a real 1,000-unit ``knobline demo`` batch
replicated to each size by bulk inserts (PostgreSQL: SQLAlchemy's batched executemany through
psycopg 3; then ANALYZE, as autovacuum would after a load); the demo retests nobody, so half the
failed units get a passing retest run (first-pass and final yield then differ, as on a line). **A
replica is a load test, not a batch to study statistics on**: it holds no information beyond its
template. 10^6 units (``--sizes 10000,100000,1000000``) make a SQLite file of about 13 GB.

    python bench/line_scale.py [--sizes 10000,100000] [--db-kinds sqlite,postgresql] [--repeats 3] [--json]
    bash -c 'source .ci/postgres-up; PYTHONPATH=$PWD python bench/line_scale.py'   # with a throwaway PostgreSQL

PostgreSQL needs ``$KNOBLINE_TEST_POSTGRES`` (a URL of a user who may create databases, as
``.ci/postgres-up`` exports); without it the PostgreSQL rows are skipped with the reason printed.
SQLite stores are kept in ``--work`` between runs; PostgreSQL databases are created and dropped.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import time
from collections.abc import Callable, Iterator
from contextlib import AbstractContextManager, contextmanager
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

from sqlalchemy import create_engine, func, literal, select, text  # noqa: E402

from fixture.analytics.dataset import yield_counts  # noqa: E402
from fixture.analytics.yields import yield_report  # noqa: E402
from fixture.store import Store, open_store  # noqa: E402
from fixture.store.engine import WRITE_OPTION  # noqa: E402
from fixture.store.models import RunRow  # noqa: E402

POSTGRES_ENV = "KNOBLINE_TEST_POSTGRES"
GOAL_RATIO = 1.5
#: growth exponent below which "worse than linear" cannot be told from timing noise (common practice, no source)
NOISE_EXPONENT = 1.05

#: Per-lot first-pass and final counts written from the counting rule, three ways (not from knobline's code):
#: window functions numbering each unit's judged runs, and each unit's lowest and highest judged run id.
WINDOW_SQL = text("""
WITH judged AS (
    SELECT unit_id, verdict,
           ROW_NUMBER() OVER (PARTITION BY unit_id ORDER BY id) AS from_first,
           ROW_NUMBER() OVER (PARTITION BY unit_id ORDER BY id DESC) AS from_last
    FROM run WHERE verdict IN ('pass', 'fail')
), per_unit AS (
    SELECT unit_id,
           MAX(CASE WHEN from_first = 1 AND verdict = 'pass' THEN 1 ELSE 0 END) AS first_passed,
           MAX(CASE WHEN from_last = 1 AND verdict = 'pass' THEN 1 ELSE 0 END) AS final_passed
    FROM judged WHERE from_first = 1 OR from_last = 1 GROUP BY unit_id
)
SELECT l.part_key, l.lot_code, COUNT(*), SUM(p.first_passed), SUM(p.final_passed)
FROM per_unit p JOIN unit_lot ul ON ul.unit_id = p.unit_id JOIN component_lot l ON l.id = ul.lot_id
GROUP BY l.part_key, l.lot_code ORDER BY l.part_key, l.lot_code
""")
MIN_MAX_SQL = text("""
WITH judged AS (
    SELECT unit_id, MIN(id) AS first_id, MAX(id) AS last_id
    FROM run WHERE verdict IN ('pass', 'fail') GROUP BY unit_id
)
SELECT l.part_key, l.lot_code, COUNT(*),
       SUM(CASE WHEN f.verdict = 'pass' THEN 1 ELSE 0 END), SUM(CASE WHEN z.verdict = 'pass' THEN 1 ELSE 0 END)
FROM judged j JOIN run f ON f.id = j.first_id JOIN run z ON z.id = j.last_id
JOIN unit_lot ul ON ul.unit_id = j.unit_id JOIN component_lot l ON l.id = ul.lot_id
GROUP BY l.part_key, l.lot_code ORDER BY l.part_key, l.lot_code
""")
#: the same, counting per lot id before naming the lots (a smaller group key than two strings)
BY_LOT_ID_SQL = text("""
WITH judged AS (
    SELECT unit_id, MIN(id) AS first_id, MAX(id) AS last_id
    FROM run WHERE verdict IN ('pass', 'fail') GROUP BY unit_id
), per_lot AS (
    SELECT ul.lot_id, COUNT(*) AS units,
           SUM(CASE WHEN f.verdict = 'pass' THEN 1 ELSE 0 END) AS first_passed,
           SUM(CASE WHEN z.verdict = 'pass' THEN 1 ELSE 0 END) AS final_passed
    FROM judged j JOIN run f ON f.id = j.first_id JOIN run z ON z.id = j.last_id
    JOIN unit_lot ul ON ul.unit_id = j.unit_id GROUP BY ul.lot_id
)
SELECT l.part_key, l.lot_code, p.units, p.first_passed, p.final_passed
FROM per_lot p JOIN component_lot l ON l.id = p.lot_id ORDER BY l.part_key, l.lot_code
""")
HAND_SQL = {"window": WINDOW_SQL, "min_max": MIN_MAX_SQL, "by_lot_id": BY_LOT_ID_SQL}

Counts = dict[tuple[str, str], tuple[int, int, int]]


def add_retests(url: str) -> int:
    """Retest half the failed units (those whose failed run has an even id) with a passing run, as a line
    does after rework: the demo retests nobody, and without retests first-pass and final yield coincide.
    The retest is a run row only (no steps): yield counts read runs. Returns the runs added."""
    run = RunRow.__table__
    with open_store(url) as store, store.engine.execution_options(**{WRITE_OPTION: True}).begin() as con:
        offset = int(con.execute(select(func.max(run.c.id))).scalar_one())
        picked = select(*[(run.c.id + offset).label("id") if c.name == "id" else
                          literal("pass").label("verdict") if c.name == "verdict" else
                          run.c.id.label("retest_of") if c.name == "retest_of" else c for c in run.c]
                        ).where(run.c.verdict == "fail", run.c.id % 2 == 0)
        return int(con.execute(run.insert().from_select([c.name for c in run.c], picked)).rowcount)


def knobline_counts(store: Store) -> Counts:
    """Per (part, lot): units, first-pass passed, final passed, as ``knobline yield --by lot`` counts them."""
    c = yield_counts(store, "lot")
    assert (c.first_units == c.final_units).all(), "a unit counts once per lot for both yields"
    return {(k[0], k[1]): (int(c.first_units[i]), int(c.first_passed[i]), int(c.final_passed[i]))
            for i, k in enumerate(c.keys)}


def sql_counts(store: Store, query: Any) -> Counts:
    """The same counts from one of :data:`HAND_SQL`."""
    with store.engine.connect() as con:
        return {(str(part), str(lot)): (int(n), int(first), int(final))
                for part, lot, n, first, final in con.execute(query)}


def best_of_turns(repeats: int, fns: dict[str, Callable[[], object]]) -> dict[str, float]:
    """The fastest of ``repeats`` runs of each function, taking turns (so background load hits all alike)."""
    best = dict.fromkeys(fns, float("inf"))
    for _ in range(repeats):
        for name, fn in fns.items():
            start = time.perf_counter()
            fn()
            best[name] = min(best[name], time.perf_counter() - start)
    return best


def postgres_database(name: str) -> AbstractContextManager[str]:
    """A new, empty PostgreSQL database ``name`` on the server of ``$KNOBLINE_TEST_POSTGRES``; dropped afterwards."""
    from tests.databases import postgres_database as fresh

    return fresh(name, admin=os.environ[POSTGRES_ENV])


@contextmanager
def replica_store(kind: str, size: int, template_url: str, work: Path) -> Iterator[tuple[str, float | None]]:
    """The URL of a replica of ``size`` units on ``kind`` and the seconds it took to build (None: kept from before)."""
    from tests.reporting.bulk_store import build_replica

    if kind == "sqlite":
        db = work / f"replica-{size}-retested.sqlite"
        seconds = None
        if not db.exists():
            partial = db.with_suffix(".partial")
            partial.unlink(missing_ok=True)
            start = time.perf_counter()
            build_replica(template_url, f"sqlite:///{partial}", size)
            add_retests(f"sqlite:///{partial}")
            seconds = time.perf_counter() - start
            partial.rename(db)
        yield f"sqlite:///{db}", seconds
        return
    with postgres_database(f"knobline_line_scale_{size}") as url:
        start = time.perf_counter()
        build_replica(template_url, url, size)
        add_retests(url)
        engine = create_engine(url, isolation_level="AUTOCOMMIT")
        try:
            with engine.connect() as con:
                con.execute(text("ANALYZE"))
        finally:
            engine.dispose()
        yield url, time.perf_counter() - start


def measure(url: str, repeats: int, with_report: bool) -> dict[str, Any]:
    """Yield-by-lot timings (checked against the hand SQL) and the report's data stage in a fresh process."""
    from report_scale import in_child  # bench/report_scale.py: builds the report in a child, returns its figures

    with open_store(url) as store:
        ours = knobline_counts(store)
        for name, query in HAND_SQL.items():
            theirs = sql_counts(store, query)
            if ours != theirs:
                differ = sorted(k for k in ours.keys() | theirs.keys() if ours.get(k) != theirs.get(k))[:5]
                raise AssertionError(f"knobline and the hand SQL ({name}) disagree at {url}: "
                                     + "; ".join(f"{k}: {ours.get(k)} vs {theirs.get(k)}" for k in differ))
        fns: dict[str, Callable[[], object]] = {"knobline": lambda: knobline_counts(store)}
        for name, query in HAND_SQL.items():
            fns[name] = lambda query=query: sql_counts(store, query)  # type: ignore[misc]
        fns["yield_report"] = lambda: yield_report(store, "lot")
        best = best_of_turns(repeats, fns)
        units = sum(n for n, _, _ in ours.values())
    # The reference is the faster of the two hand-written queries: the goal is against the best a person wrote.
    sql_name = min(HAND_SQL, key=lambda name: best[name])
    figures: dict[str, Any] = {"lots": len(ours), "unit_lot_pairs": units, "knobline_s": best["knobline"],
                               "sql_s": best[sql_name], "sql_query": sql_name,
                               "sql_by_query_s": {name: best[name] for name in HAND_SQL},
                               "ratio": best["knobline"] / best[sql_name], "yield_report_s": best["yield_report"]}
    if with_report:
        report = in_child(url, False)
        figures.update(report_s=report["seconds"], report_peak_mib=report["peak_mib"],
                       report_stages_s=report["stages"])
    return figures


def growth(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Per database and figure: time ratio from the smallest to the largest size against the size ratio."""
    out = []
    for kind in dict.fromkeys(r["db"] for r in rows):
        mine = sorted((r for r in rows if r["db"] == kind), key=lambda r: r["units"])
        if len(mine) < 2:
            continue
        small, large = mine[0], mine[-1]
        size_ratio = large["units"] / small["units"]
        for key in ("knobline_s", "sql_s", "yield_report_s", "report_s"):
            if key in small and key in large:
                time_ratio = large[key] / small[key]
                out.append({"db": kind, "figure": key, "from_units": small["units"], "to_units": large["units"],
                            "size_ratio": size_ratio, "time_ratio": time_ratio,
                            "exponent": math.log(time_ratio) / math.log(size_ratio),
                            "linear_or_better": time_ratio <= size_ratio})
    return out


_LABELS = {"knobline_s": "yield by lot, knobline", "sql_s": "yield by lot, hand SQL",
           "yield_report_s": "whole yield report", "report_s": "batch report data stage"}


def table(rows: list[dict[str, Any]], growths: list[dict[str, Any]]) -> str:
    """The figures as aligned text a person can read."""
    head = ("database", "units", "lots", "knobline s", "SQL s (query)", "ratio", "yield report s", "report s", "peak RSS")
    lines = [head]
    for r in rows:
        lines.append((r["db"], f"{r['units']:,}", str(r["lots"]), f"{r['knobline_s']:.3f}",
                      f"{r['sql_s']:.3f} ({r['sql_query'].replace('_', ' ')})",
                      f"{r['ratio']:.2f}x" + ("" if r["ratio"] <= GOAL_RATIO else " (over 1.5x)"),
                      f"{r['yield_report_s']:.3f}",
                      f"{r['report_s']:.1f}" if "report_s" in r else "-",
                      f"{r['report_peak_mib']:.0f} MiB" if "report_peak_mib" in r else "-"))
    widths = [max(len(line[i]) for line in lines) for i in range(len(head))]
    text_lines = ["  ".join(c.rjust(w) if i else c.ljust(w) for i, (c, w) in enumerate(zip(line, widths, strict=True)))
                  for line in lines]
    if growths:
        text_lines.append("")
        text_lines.append("growth from the smallest to the largest size (time ratio against size ratio):")
        for g in growths:
            # time ~ units^exponent; within 5 % of linear is as close as best-of-3 timings on a shared machine tell
            verdict = ("linear or better" if g["linear_or_better"] else "linear within timing noise"
                       if g["exponent"] <= NOISE_EXPONENT else "worse than linear (time grows faster than size)")
            text_lines.append(f"  {g['db']:<10} {_LABELS[g['figure']]:<25} {g['from_units']:,} -> {g['to_units']:,} "
                              f"units (x{g['size_ratio']:.0f}): time x{g['time_ratio']:.1f} (~ units^{g['exponent']:.2f}), {verdict}")
    return "\n".join(text_lines)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="10000,100000", help="comma-separated unit counts (e.g. 10000,100000,1000000)")
    parser.add_argument("--db-kinds", default="sqlite,postgresql", help="comma-separated: sqlite, postgresql")
    parser.add_argument("--repeats", type=int, default=3, help="runs of each yield query; the best counts")
    parser.add_argument("--template", type=int, default=1000, help="units of the real demo batch replicated")
    parser.add_argument("--work", type=Path, default=Path("/tmp/knobline-line-scale"),
                        help="folder for the template and the SQLite stores (kept between runs)")
    parser.add_argument("--no-report", action="store_true", help="skip the batch report's data stage")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON instead of a table")
    args = parser.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    kinds = [k.strip() for k in args.db_kinds.split(",")]
    for kind in kinds:
        if kind not in ("sqlite", "postgresql"):
            parser.error(f"--db-kinds: expected sqlite or postgresql, found {kind!r}")
    say: Callable[[str], None] = (lambda m: print(m, file=sys.stderr, flush=True)) if args.json else (
        lambda m: print(m, flush=True))
    if "postgresql" in kinds and not os.environ.get(POSTGRES_ENV):
        say(f"PostgreSQL skipped: no server ({POSTGRES_ENV} is not set; "
            "run `source .ci/postgres-up` first or point it at a user who may create databases)")
        kinds.remove("postgresql")

    from tests.reporting.bulk_store import make_template

    args.work.mkdir(parents=True, exist_ok=True)
    start = time.perf_counter()
    template = make_template(args.work / f"template-{args.template}", args.template)
    say(f"template: {args.template} real demo units in {time.perf_counter() - start:.0f} s (kept in {args.work})")
    rows: list[dict[str, Any]] = []
    for kind in kinds:
        for size in sizes:
            with replica_store(kind, size, template, args.work) as (url, built_s):
                say(f"{kind} {size:,} units: " + ("store kept from before" if built_s is None
                                                   else f"store built in {built_s:.0f} s"))
                figures = measure(url, args.repeats, not args.no_report)
            rows.append({"db": kind, "units": size, "build_s": built_s, **figures})
            say(f"  yield by lot: knobline {figures['knobline_s']:.3f} s, hand SQL "
                + ", ".join(f"{n.replace('_', ' ')} {t:.3f} s" for n, t in figures["sql_by_query_s"].items())
                + f" ({figures['ratio']:.2f}x the faster); same counts for {figures['lots']} lots")
    growths = growth(rows)
    if args.json:
        print(json.dumps({"goal_ratio": GOAL_RATIO, "rows": rows, "growth": growths}, indent=2))
    else:
        print()
        print(table(rows, growths))


if __name__ == "__main__":
    main()
