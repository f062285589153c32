"""``knobline yield``: the table and JSON a quality engineer reads, from a store filled through the Store API."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from click.testing import CliRunner
from scipy.stats import binomtest

from fixture.cli import main
from fixture.store import DB_ENV_VAR, Store

from .conftest import Run, record_unit
from tests.json_keys import all_keys, documented_json_keys


def _documented(help_text: str) -> set[str]:
    return documented_json_keys(help_text, {"each", "is", "null", "without", "and", "are", "unless"})


@pytest.fixture
def run(monkeypatch: pytest.MonkeyPatch, tmp_path: Path):
    # Never touch the developer's own results database.
    monkeypatch.delenv(DB_ENV_VAR, raising=False)
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    runner = CliRunner()
    return lambda *args: runner.invoke(main, list(args), catch_exceptions=False)


@pytest.fixture
def filled(store: Store, db_url: str) -> str:
    """Lot R-BAD fails 7 of 10 first runs (each retest passes); R-1 and R-2 fail 1 of 10 each."""
    for lot, n_fail in {"R-BAD": 7, "R-1": 1, "R-2": 1}.items():
        for u in range(10):
            runs = [Run("fail"), Run("pass", "line-2")] if u < n_fail else [Run("pass")]
            record_unit(store, f"{lot}-{u}", {"r_integrator": lot}, runs)
    return db_url


def test_yield_by_lot_json_has_exact_intervals_and_flags_the_bad_lot(run, filled: str) -> None:
    result = run("yield", "--db", filled, "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    groups = {g["lot"]: g for g in data["groups"]}
    bad = groups["R-BAD"]
    assert (bad["first_pass"]["passed"], bad["first_pass"]["units"], bad["final"]["passed"]) == (3, 10, 10)
    # Reference: scipy.stats.binomtest(...).proportion_ci(method="exact").
    ci = binomtest(3, 10).proportion_ci(method="exact")
    assert (bad["first_pass"]["low"], bad["first_pass"]["high"]) == pytest.approx((ci.low, ci.high), rel=1e-9)
    assert [g["lot"] for g in data["groups"] if g["flagged"]] == ["R-BAD"]
    assert "Holm-Bonferroni" in data["lot_test"]
    assert (data["units"], data["judged_units"], data["unjudged_units"]) == (30, 30, 0)


def test_yield_json_keys_are_the_ones_the_help_lists(run, filled: str) -> None:
    documented = _documented(run("yield", "--help").stdout)
    found = all_keys(json.loads(run("yield", "--db", filled, "--json").stdout))
    assert found == documented


def test_yield_by_station_text_is_a_table_with_the_counting_rule(run, filled: str) -> None:
    result = run("yield", "--db", filled, "--by", "station")
    assert result.exit_code == 0, result.stderr
    lines = result.stdout.splitlines()
    # First judged runs: all 30 on line-1 (21 passed); latest judged: 9 retests on line-2, all passed.
    line_1 = next(ln for ln in lines if ln.startswith("line-1"))
    assert "70.0 %" in line_1 and "of 30" in line_1 and "of 21" in line_1
    assert any(ln.startswith("line-2") and "of 0" in ln and "100.0 %" in ln for ln in lines)
    assert "station-fault, aborted, incomplete and running runs" in " ".join(lines)


def test_yield_on_a_missing_database_does_not_create_it(run, tmp_path: Path) -> None:
    missing = tmp_path / "typo.sqlite"
    result = run("yield", "--db", str(missing))
    assert result.exit_code == 0
    assert "no runs recorded" in result.stdout
    assert not missing.exists()


def test_yield_over_a_period_counts_only_the_verdicts_given_in_it(run, filled: str) -> None:
    # Every run of the fixture starts on T0's UTC day, 2026-03-02 (conftest.T0).
    same_day = json.loads(run("yield", "--db", filled, "--json", "--period", "2026-03-02").stdout)
    everything = json.loads(run("yield", "--db", filled, "--json").stdout)
    assert same_day["groups"] == everything["groups"] and same_day["period"] == "2026-03-02 (UTC)"
    later = json.loads(run("yield", "--db", filled, "--json", "--period", "2026-03-03..2026-03-09").stdout)
    assert later["groups"] == [] and later["judged_units"] == 0
    text = run("yield", "--db", filled, "--period", "2026-03-03").stdout
    assert text.startswith("no runs recorded in 2026-03-03 (UTC)")


def test_a_bad_period_is_one_line_and_exit_2(run, filled: str) -> None:
    result = CliRunner().invoke(main, ["yield", "--db", filled, "--period", "last week"])
    assert result.exit_code == 2
    assert result.stderr.strip().startswith("knobline: error: period: expected all, today, Nd")
    assert len(result.stderr.strip().splitlines()) == 1
