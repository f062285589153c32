"""``knobline test`` never tests a unit with its required lots silently missing; an expired calibration
stops testing only on an instrument the sequence uses.

Behaviour pinned here is ours (README "knobline test", sequences/README.md ``required_lots``; common
practice, no source): a unit's lots are traceability records, so a missing one is refused before the
unit is powered, as bad input (exit 2), never settled by running without it.
"""

from __future__ import annotations

import datetime as dt
import json
from pathlib import Path

import pytest
from click.testing import CliRunner

import fixture.commands._lots
from fixture.cli import main
from fixture.commands._lots import gather_lots
from fixture.errors import UsageError
from fixture.files.sequence_file import load_sequence
from fixture.store import open_store
from tests.demo_lots import DEMO_LOTS, LOT_OPTIONS

ROOT = Path(__file__).resolve().parents[2]
SEQUENCE = ROOT / "sequences/demo-sequence.toml"


def run_test(*args: str):
    return CliRunner().invoke(main, ["test", *args, "--operator", "t"], catch_exceptions=False)


def error_lines(stderr: str) -> list[str]:
    return [line for line in stderr.splitlines() if line.startswith("knobline: error:")]


def sequence_requiring(tmp_path: Path, value: str) -> Path:
    """The demo sequence with ``required_lots = value``, its design found by absolute path."""
    text = SEQUENCE.read_text(encoding="utf-8")
    text = text.replace('design = "demo-panel.toml"', f'design = "{ROOT / "sequences/demo-panel.toml"}"')
    path = tmp_path / "lots.toml"
    path.write_text(text.replace("requires = [", f"required_lots = {value}\nrequires = ["), encoding="utf-8")
    return path


@pytest.mark.parametrize("json_mode", [False, True])
def test_without_lots_or_a_terminal_test_refuses_before_anything_naming_the_missing_parts(tmp_path, json_mode):
    db = tmp_path / "r.sqlite"
    result = run_test("--serial", "PW22-000001", "--db", str(db), *(["--json"] if json_mode else []))
    assert result.exit_code == 2, result.output
    (line,) = error_lines(result.stderr)
    # the parts in words, each with the key to type, and both ways to give them
    assert "C1 integrator capacitor (polyester film) [c_integrator]" in line and "RV2 level knob" in line
    assert "--lot PART=LOT" in line and "--traveller FILE" in line
    assert "U2" not in line  # the supply is not lot-tracked in the demo design
    assert result.stdout == "" and not db.exists()  # refused before the database and the station


def test_some_lots_given_the_refusal_names_only_the_rest(tmp_path):
    given = [arg for part in ("c_integrator", "r_integrator") for arg in ("--lot", f"{part}={DEMO_LOTS[part]}")]
    result = run_test("--serial", "PW22-000001", *given, "--db", str(tmp_path / "r.sqlite"))
    assert result.exit_code == 2
    (line,) = error_lines(result.stderr)
    assert "[c_integrator]" not in line and "[r_integrator]" not in line and "[knob_a_pot]" in line


def test_a_traveller_without_a_required_part_is_refused_for_that_serial(tmp_path):
    lots = {k: v for k, v in DEMO_LOTS.items() if k != "knob_b_pot"}
    traveller = tmp_path / "travellers.csv"
    traveller.write_text(f"serial,{','.join(lots)}\nPW22-000777,{','.join(lots.values())}\n", encoding="utf-8")
    db = tmp_path / "r.sqlite"
    result = run_test("--serial", "PW22-000777", "--traveller", str(traveller), "--db", str(db))
    assert result.exit_code == 2, result.output
    (line,) = error_lines(result.stderr)
    assert f"--traveller {traveller}" in line and "PW22-000777" in line
    assert "RV2 level knob (knob B) [knob_b_pot]" in line and "[c_integrator]" not in line
    assert not db.exists()
    # the missing lot given with --lot completes the traveller's
    done = run_test("--serial", "PW22-000777", "--traveller", str(traveller), "--lot", "knob_b_pot=RV2-2610A",
                    "--db", str(db), "--json")
    assert done.exit_code == 0, done.stderr
    with open_store(str(db)) as store:
        assert store.unit("PW22-000777").lots == DEMO_LOTS | {"knob_b_pot": "RV2-2610A"}


def test_a_lot_for_a_part_the_design_lacks_is_refused_before_the_station_is_touched(tmp_path):
    db = tmp_path / "r.sqlite"
    result = run_test("--serial", "PW22-000001", *LOT_OPTIONS, "--lot", "c_integratr=C1-2611A", "--db", str(db))
    assert result.exit_code == 2, result.output
    (line,) = error_lines(result.stderr)
    assert "--lot c_integratr=C1-2611A: expected a part of PW-22 dual-knob setpoint panel (" in line
    assert line.endswith("found 'c_integratr'") and not db.exists()


def test_a_sequence_requiring_one_lot_or_none_tests_with_just_that(tmp_path):
    db = tmp_path / "r.sqlite"
    one = sequence_requiring(tmp_path, '["c_integrator"]')
    refused = run_test(str(one), "--serial", "PW22-000001", "--db", str(db))
    assert refused.exit_code == 2 and "[c_integrator]" in refused.stderr and "[r_integrator]" not in refused.stderr
    tested = run_test(str(one), "--serial", "PW22-000001", "--lot", "c_integrator=C1-2611A", "--db", str(db),
                      "--json")
    assert tested.exit_code == 0, tested.stderr
    none = run_test(str(sequence_requiring(tmp_path, "[]")), "--serial", "PW22-000002", "--db", str(db), "--json")
    assert none.exit_code == 0, none.stderr
    with open_store(str(db)) as store:
        assert store.unit("PW22-000001").lots == {"c_integrator": "C1-2611A"}
        assert store.unit("PW22-000002").lots == {}


def test_the_prompt_asks_for_each_missing_lot_by_the_parts_words_and_takes_lists(capsys):
    sequence = load_sequence(SEQUENCE, search_dirs=(ROOT / "sequences",))
    asked: list[str] = []
    answers = iter([
        "R1-2609A",                                   # r_ref_top: a scanned lot label
        "",                                           # nothing: asked again
        "r_ref_bottom=R2-2605A, c_integrator=C1-2611A, r_schmitt_in=R3-2603A",  # several at once
        "c_integratr=C1-2611A",                       # an unknown part: said, asked again
        "c_integrator=C1-9999Z",                      # a second lot of C1: said, asked again
        "R4-2622A", "R5-2621A", "R6-2615A", "R7\x1b[2J", "R7-2604A", "RV1-2609A", "RV2-2610A",
    ])

    def ask(text: str) -> str:
        asked.append(text)
        return next(answers)

    lots = gather_lots(sequence, "PW22-000001", (), None, interactive=True, ask=ask)
    assert lots == {**DEMO_LOTS}
    assert asked[0] == "Lot of R1 reference divider, supply side"
    assert "Lot of C1 integrator capacitor (polyester film)" not in asked  # given in the list, not asked
    assert asked.count("Lot of R4 Schmitt feedback resistor (output to +in)") == 3  # two wrong answers
    assert asked.count("Lot of R7 threshold divider, ground side of knob B") == 2  # the escape sequence
    said = capsys.readouterr().err
    assert "Lots to record: 10 parts;" in said
    assert "c_integratr" in said and "C1-9999Z" in said and "U+001B" in said and said.count("try again") == 3


def test_on_a_terminal_test_asks_for_the_missing_lots_on_stderr_and_json_stays_clean(tmp_path, monkeypatch):
    monkeypatch.setattr(fixture.commands._lots, "at_terminal", lambda: True)
    required = load_sequence(SEQUENCE, search_dirs=(ROOT / "sequences",)).required_lots  # asked in this order
    answers = [DEMO_LOTS[p] for p in required if p != "c_integrator"]
    db = tmp_path / "r.sqlite"
    result = CliRunner().invoke(main, ["test", "--serial", "PW22-000003", "--lot", "c_integrator=C1-2611A", "--db",
                                       str(db), "--operator", "t", "--json"], input="\n".join(answers) + "\n",
                                catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    assert json.loads(result.stdout)["verdict"] == "pass"  # the prompts went to stderr
    assert "Lot of RV2 level knob (knob B): " in result.stderr and "Lot of C1" not in result.stderr
    with open_store(str(db)) as store:
        assert store.unit("PW22-000003").lots == DEMO_LOTS


def test_the_prompt_is_not_used_with_a_traveller(tmp_path):
    sequence = load_sequence(SEQUENCE, search_dirs=(ROOT / "sequences",))
    traveller = tmp_path / "t.csv"
    traveller.write_text("serial,c_integrator\nPW22-000001,C1-2611A\n", encoding="utf-8")

    def ask(text: str) -> str:
        raise AssertionError(f"asked {text!r}")

    with pytest.raises(UsageError, match="--traveller"):
        gather_lots(sequence, "PW22-000001", (), str(traveller), interactive=True, ask=ask)


def station_expired(tmp_path: Path, due: str) -> Path:
    """The demo station with the calibration due ``due`` replaced by 2001-01-01 (long past on any test day)."""
    text = (ROOT / "sequences/demo-station.toml").read_text(encoding="utf-8")
    assert f"due = {due}" in text
    path = tmp_path / "station.toml"
    path.write_text(text.replace(f"due = {due}", "due = 2001-01-01", 1), encoding="utf-8")
    return path


def test_an_expired_scope_the_sequence_does_not_use_is_warned_once_and_recorded_not_refused(tmp_path):
    # The demo sequence measures with the counter (and needs supply and actuator); the scope (due
    # 2028-02-28 in the demo station, set long past here) is not used, so testing goes on.
    db = tmp_path / "r.sqlite"
    result = run_test("--serial", "PW22-000001", *LOT_OPTIONS, "--station", str(station_expired(tmp_path, "2028-02-28")),
                      "--db", str(db), "--json")
    assert result.exit_code == 0, result.stderr
    warnings = [line for line in result.stderr.splitlines() if line.startswith("knobline: warning:")]
    assert len(warnings) == 1
    assert "scope" in warnings[0] and "VLQ-26-03981 was due 2001-01-01" in warnings[0]
    with open_store(str(db)) as store:
        run = store.run(json.loads(result.stdout)["run_id"])
    scope = next(i for i in run.instruments if i.role == "scope")
    assert (scope.calibration_certificate, scope.calibration_due) == ("VLQ-26-03981", dt.date(2001, 1, 1))
    assert run.summary.expired_calibrations == ()  # the unit was not measured with it


def test_an_expired_counter_the_sequence_measures_with_still_refuses(tmp_path):
    db = tmp_path / "r.sqlite"
    result = run_test("--serial", "PW22-000001", *LOT_OPTIONS, "--station", str(station_expired(tmp_path, "2028-04-30")),
                      "--db", str(db))
    # exit 3: a station fault, never a verdict on the unit (README "Exit codes")
    assert result.exit_code == 3, result.output
    assert "knobline: station fault: counter" in result.stderr and "VLQ-26-04417 was due 2001-01-01" in result.stderr
    with open_store(str(db)) as store:
        assert store.runs(limit=5) == []


def test_an_operator_name_too_long_to_store_is_one_line_exit_2_without_sql(tmp_path):
    # The failure this pins: on PostgreSQL an over-long operator ended the run as a station fault (exit 3)
    # printing the whole INSERT statement. It is the person's input: exit 2, one line, the field in words.
    result = CliRunner().invoke(main, ["test", "--serial", "PW22-000001", *LOT_OPTIONS, "--db", str(tmp_path / "r.sqlite"),
                                       "--operator", "x" * 250], catch_exceptions=False)
    assert result.exit_code == 2, result.output
    (line,) = error_lines(result.stderr)
    assert line.startswith("knobline: error: --operator: expected printable text of at most 200 characters")
    assert "INSERT" not in result.output
