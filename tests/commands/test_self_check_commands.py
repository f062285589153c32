"""knobline station --self-check, and test and demo relying on it."""

from __future__ import annotations

import json
from pathlib import Path

from click.testing import CliRunner

from fixture.cli import main
from fixture.store import open_store
from tests.demo_lots import LOT_OPTIONS

ROOT = Path(__file__).resolve().parents[2]


def station_copy(tmp_path: Path, required: bool, with_section: bool = True) -> Path:
    text = (ROOT / "sequences/demo-station.toml").read_text(encoding="utf-8")
    if not with_section:
        text = text[:text.index("# Station self-check")]
    text = text.replace("required = false", f"required = {'true' if required else 'false'}")
    text = text.replace('design = "demo-panel.toml"', f'design = "{ROOT / "sequences/demo-panel.toml"}"')
    path = tmp_path / "bench.toml"
    path.write_text(text, encoding="utf-8")
    return path


def run(*args: str):
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


def test_station_self_check_measures_the_golden_unit_and_records_it(tmp_path: Path) -> None:
    db = str(tmp_path / "r.sqlite")
    result = run("station", str(station_copy(tmp_path, False)), "--self-check", "--db", db, "--operator", "lead",
                 "--json")
    assert result.exit_code == 0, result.stderr
    check = json.loads(result.stdout)["self_check"]
    assert check["verdict"] == "pass" and len(check["readings"]) == 4
    assert {r["quantity"] for r in check["readings"]} == {"frequency", "duty"}
    assert all(r["low"] <= r["value"] <= r["high"] and r["verdict"] == "pass" for r in check["readings"])


def test_a_required_self_check_gates_testing_and_each_run_records_it(tmp_path: Path) -> None:
    db, station = str(tmp_path / "r.sqlite"), str(station_copy(tmp_path, True))
    refused = run("test", "--serial", "PW22-000501", *LOT_OPTIONS, "--station", station, "--db", db, "--operator", "t")
    # Exit 3: the station cannot judge units yet (a station fault, README exit codes).
    assert refused.exit_code == 3
    lines = [line for line in refused.stderr.splitlines() if "self-check" in line]
    assert len(lines) == 1 and "--self-check" in lines[0] and "Traceback" not in refused.stderr
    with open_store(db) as store:
        assert store.runs() == []  # nothing was tested
    checked = run("station", station, "--self-check", "--db", db, "--json")
    assert checked.exit_code == 0, checked.stderr
    check_id = json.loads(checked.stdout)["self_check"]["id"]
    tested = run("test", "--serial", "PW22-000501", *LOT_OPTIONS, "--station", station, "--db", db, "--operator", "t",
                 "--json")
    assert tested.exit_code == 0, tested.stderr
    with open_store(db) as store:
        assert store.run(json.loads(tested.stdout)["run_id"]).summary.self_check_id == check_id


def test_the_demo_batch_starts_with_a_self_check_that_covers_every_run(tmp_path: Path) -> None:
    result = run("demo", "--units", "3", "--seed", "4", "--out", str(tmp_path), "--no-reports", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["self_check"]["verdict"] == "pass"
    with open_store(str(tmp_path / "results.sqlite")) as store:
        assert {store.run(r["run_id"]).summary.self_check_id for r in data["runs"]} == {data["self_check"]["id"]}


def test_self_check_on_a_station_without_the_section_is_bad_input(tmp_path: Path) -> None:
    result = run("station", str(station_copy(tmp_path, False, with_section=False)), "--self-check", "--db",
                 str(tmp_path / "r.sqlite"))
    assert result.exit_code == 2
    assert "has no [self_check] section" in result.stderr


def test_station_self_check_refuses_an_operator_with_control_or_bidi_characters(tmp_path: Path) -> None:
    # U+202E RIGHT-TO-LEFT OVERRIDE and U+001B ESCAPE (Unicode Standard Annex #9; ECMA-48): an operator
    # name is stored and shown later, so it must be printable text like `knobline test`'s --operator,
    # refused (exit 2) before anything is opened or recorded.
    db = tmp_path / "r.sqlite"
    for operator in ("\u202eevil", "lead\x1b[2J"):
        result = run("station", str(station_copy(tmp_path, False)), "--self-check", "--db", str(db),
                     "--operator", operator)
        assert result.exit_code == 2, result.output
        assert "--operator" in result.stderr
    assert not db.exists()
