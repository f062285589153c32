"""A small version of bench/line_scale.py in CI: knobline's yield-by-lot counts equal hand-written SQL, on both databases.

The bench times the two at 10^4 to 10^6 units; here a replica of 120 units only checks that the counts the
bench compares agree, so a change to either side that breaks the comparison fails CI, not the next bench run.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

from sqlalchemy import func, select

from fixture.store import open_store
from fixture.store.engine import WRITE_OPTION
from fixture.store.models import RunRow
from tests.reporting.bulk_store import build_replica, make_template

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "bench"))
import line_scale  # noqa: E402  (the bench script holds the hand-written queries)


@pytest.fixture(scope="module")
def template(tmp_path_factory: pytest.TempPathFactory) -> str:
    """A real demo batch of 40 units (the simulated bench, planted defects and retests included)."""
    return make_template(tmp_path_factory.mktemp("template"), 40, seed=5)


def add_retests(url: str) -> None:
    """The demo retests nobody: give five failed units a passing retest and five passed units a later
    station-fault run (which judges nothing), so first-pass and final yield differ."""
    run = RunRow.__table__
    with open_store(url) as store, store.engine.execution_options(**{WRITE_OPTION: True}).begin() as con:
        next_id = int(con.execute(select(func.max(run.c.id))).scalar_one()) + 1
        for verdict, new_verdict in (("fail", "pass"), ("pass", "station-fault")):
            rows = con.execute(select(run).where(run.c.verdict == verdict).order_by(run.c.id).limit(5)).all()
            assert len(rows) == 5, f"the replica has fewer than 5 {verdict} runs"
            for row in rows:
                con.execute(run.insert(), {**row._mapping, "id": next_id, "verdict": new_verdict, "retest_of": row.id})
                next_id += 1


def test_yield_by_lot_counts_equal_the_hand_written_sql_from_the_counting_rule(template: str,
                                                                                database_url: str) -> None:
    build_replica(template, database_url, 120, seed=3, days=3.0)
    add_retests(database_url)
    with open_store(database_url) as store:
        ours = line_scale.knobline_counts(store)
        # The counting rule of `knobline yield --help` (first-pass: the first judged run passed; final: the
        # latest judged run passed; a unit under each of its lots), written as SQL two ways; common practice,
        # no source beyond the rule itself.
        for query in line_scale.HAND_SQL.values():
            assert line_scale.sql_counts(store, query) == ours
    # Every unit is built from one lot of each part: each part's lots hold all 120 judged units between them.
    per_part: dict[str, int] = {}
    for (part, _lot), (units, first, final) in ours.items():
        per_part[part] = per_part.get(part, 0) + units
        assert 0 <= first <= units and 0 <= final <= units
    assert per_part and set(per_part.values()) == {120}
    # Five units failed first and passed their retest: each part's lots gain five final passes over first-pass.
    gained: dict[str, int] = {}
    for (part, _lot), (_units, first, final) in ours.items():
        gained[part] = gained.get(part, 0) + final - first
    assert set(gained.values()) == {5}
