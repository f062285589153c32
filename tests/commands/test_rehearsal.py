"""Rehearsing one's own design on the simulated bench: copy the demo, edit it, check, limits, demo, test.

What a newcomer does in their first hour (issue 11, "Your own product, simulated"): copy the shipped
design and sequence, change a part's value and tolerance, rename the product and a designator, give the
product its own serial pattern, drop a knob stop, then run every command on it and plant a defect and a
shifted lot in a simulated unit. The values below are our own rehearsal edits, never reference values:
each check is against the files the test itself wrote (the serial pattern, the names, the stops).
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from fixture.cli import main

SEQUENCES = Path(__file__).resolve().parents[2] / "sequences"

#: (text in the demo file, what the newcomer writes instead)
DESIGN_EDITS = [
    ('name = "PW-22 dual-knob setpoint panel"', 'name = "AB-7 rehearsal panel"'),
    ('ref = "C1"\nvalue = "100n"\ntolerance = "5%"', 'ref = "C3"\nvalue = "91n"\ntolerance = "2%"'),
    ("stops = [0, 25, 50, 75, 100]", "stops = [0, 50, 100]"),  # knob A: two stops dropped
    ('low = "225 Hz"\nhigh = "310 Hz"', 'low = "225 Hz"\nhigh = "340 Hz"'),  # the faster panel's spec
    ('low = "450 Hz"\nhigh = "600 Hz"', 'low = "450 Hz"\nhigh = "650 Hz"'),
]
SEQUENCE_EDITS = [
    ('name = "PW-22 end-of-line test"', 'name = "AB-7 end-of-line test"'),
    ('design = "demo-panel.toml"', 'design = "ab7-panel.toml"'),
    ('serial_pattern = "PW22-[0-9]{6}"', 'serial_pattern = "AB-[0-9]{4}"'),
    # as README's rehearsal says: no lots to type on a rehearsal (a production sequence keeps the default)
    ('# required_lots = ["c_integrator"]', 'required_lots = []  #'),
]
PATTERN = "AB-[0-9]{4}"


def _edit(source: Path, target: Path, edits: list[tuple[str, str]]) -> Path:
    text = source.read_text(encoding="utf-8")
    for old, new in edits:
        assert text.count(old) == 1, f"the shipped {source.name} changed: {old!r}"
        text = text.replace(old, new)
    target.write_text(text, encoding="utf-8")
    return target


@pytest.fixture()
def rehearsal(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """A folder with the newcomer's edited copies of the demo design and sequence."""
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    monkeypatch.delenv("KNOBLINE_DB", raising=False)
    _edit(SEQUENCES / "demo-panel.toml", tmp_path / "ab7-panel.toml", DESIGN_EDITS)
    _edit(SEQUENCES / "demo-sequence.toml", tmp_path / "ab7-sequence.toml", SEQUENCE_EDITS)
    return tmp_path


def knobline(*args: str):
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


def test_a_copied_and_edited_design_rehearses_on_the_simulated_bench(rehearsal: Path) -> None:
    checked = knobline("check", "ab7-panel.toml")
    assert checked.exit_code == 0, checked.stdout + checked.stderr
    assert "AB-7 rehearsal panel" in checked.stdout
    assert knobline("check", "ab7-sequence.toml").exit_code == 0

    limits = knobline("limits", "ab7-panel.toml", "--json")
    assert limits.exit_code == 0, limits.stderr
    stops_a = {row["stop_pct"] for row in json.loads(limits.stdout)["rows"] if row["knob"] == "a"}
    assert stops_a == {0, 50, 100}, "the dropped knob stops are gone from the limits"

    demo = knobline("demo", "--sequence", "ab7-sequence.toml", "--units", "4", "--out", "rehearsal",
                    "--no-reports", "--json")
    assert demo.exit_code == 0, demo.stderr
    data = json.loads(demo.stdout)
    serials = [r["serial"] for r in data["runs"]]
    assert serials == ["AB-0001", "AB-0002", "AB-0003", "AB-0004"]
    assert all(re.fullmatch(PATTERN, s) for s in serials)
    # the planted lot is the renamed capacitor's, as C1's is in the demo panel
    assert data["planted"][0]["part_words"].startswith("C3 ") and data["planted"][0]["lot"].startswith("C3-")
    again = knobline("demo", "--sequence", "ab7-sequence.toml", "--units", "2", "--out", "rehearsal",
                     "--no-reports", "--json")
    assert [r["serial"] for r in json.loads(again.stdout)["runs"]] == ["AB-0005", "AB-0006"]
    assert "already holds demo units up to AB-0004: this batch continues at AB-0005" in again.stderr

    db = str(rehearsal / "rehearsal" / "results.sqlite")
    clean = knobline("test", "ab7-sequence.toml", "--serial", "AB-0100", "--db", db, "--operator", "me")
    assert clean.exit_code == 0, clean.stderr  # the same unit without a plant passes: the fail below is the plant

    planted = knobline("test", "ab7-sequence.toml", "--serial", "AB-0100", "--db", db, "--operator", "me",
                       "--sim-defect", "wrong-part:R5")
    assert planted.exit_code == 1, planted.stderr
    assert "planted in the simulated unit: defect wrong-part (R5 integrator" in planted.stderr
    failed = [ln for ln in planted.stderr.splitlines() if ln.rstrip().endswith("FAIL")]
    assert failed and "frequency at knob A stops" in failed[0]
    assert "FAIL" in planted.stdout and "AB-0100" in planted.stdout

    shifted = knobline("test", "ab7-sequence.toml", "--serial", "AB-0100", "--db", db, "--operator", "me",
                       "--sim-lot-shift", "C3:-20", "--json")
    assert shifted.exit_code == 1, shifted.stderr
    steps = {s["name"]: s["verdict"] for s in json.loads(shifted.stdout)["steps"]}
    assert steps["frequency at knob A stops"] == "fail" and steps["power up"] == "pass"
    assert "C3 integrator capacitor (polyester film) shifted -20 % off nominal" in shifted.stderr


def test_a_planted_defect_is_refused_on_a_station_with_real_instruments(rehearsal: Path) -> None:
    station = (SEQUENCES / "demo-station.toml").read_text(encoding="utf-8").replace('backend = "@sim"',
                                                                                  'backend = "@py"')
    (rehearsal / "line-station.toml").write_text(station, encoding="utf-8")
    for option, value in (("--sim-defect", "stuck-output"), ("--sim-lot-shift", "C3:-8")):
        result = knobline("test", "ab7-sequence.toml", "--serial", "AB-0001", "--station", "line-station.toml",
                          "--db", str(rehearsal / "r.sqlite"), option, value)
        assert result.exit_code == 2
        lines = result.stderr.strip().splitlines()
        assert lines[-1].startswith(f"knobline: error: {option}: expected a simulated station")
        assert not any(ln.startswith("planted in") for ln in lines) and not (rehearsal / "r.sqlite").exists()


@pytest.mark.parametrize(("args", "says"), [
    (("--sim-lot-shift", "C1:-8"), "found no lotted part 'C1'"),  # renamed to C3 in this design
    (("--sim-lot-shift", "C3:minus eight"), "found percent 'minus eight'"),
    (("--sim-lot-shift", "C3:nan"), "found percent 'nan'"),
    (("--sim-lot-shift", "C3:400"), "found 400 %"),
    (("--sim-defect", "melted"), "expected one of wrong-part[:PART], open-wiper[:a|b]"),
    (("--sim-defect", "wrong-part:Q9"), "found 'Q9'"),
    (("--sim-defect", "open-wiper:c"), "found 'c'"),
    (("--sim-defect", "supply-current:5"), "expected one of"),
])
def test_a_planted_part_kind_or_percent_that_does_not_fit_the_design_is_one_line(rehearsal: Path, args, says) -> None:
    result = knobline("test", "ab7-sequence.toml", "--serial", "AB-0001", "--db", str(rehearsal / "r.sqlite"), *args)
    assert result.exit_code == 2
    error = [ln for ln in result.stderr.splitlines() if ln.startswith("knobline: error: ")]
    assert len(error) == 1 and says in error[0], result.stderr
    assert not (rehearsal / "r.sqlite").exists(), "refused before the station was opened"


def test_a_pattern_too_small_for_the_batch_is_one_line_and_tests_nothing(rehearsal: Path) -> None:
    sequence = rehearsal / "ab7-sequence.toml"
    sequence.write_text(sequence.read_text(encoding="utf-8").replace(PATTERN, "AB-[0-9]"), encoding="utf-8")
    result = knobline("demo", "--sequence", str(sequence), "--units", "10", "--out", "small", "--no-reports")
    assert result.exit_code == 2
    assert result.stderr.strip().splitlines()[-1] == (
        "knobline: error: serial pattern AB-[0-9]: expected serials for 10 more units (numbers 1..10), "
        "found it can make 9 (of 4 characters)")


def test_the_shipped_demo_files_still_rehearse_as_they_are(tmp_path: Path) -> None:
    # a plain copy changes nothing: the demo's own serials and lots, from the copied files
    for name in ("demo-panel.toml", "demo-sequence.toml"):
        shutil.copy(SEQUENCES / name, tmp_path / name)
    result = knobline("demo", "--sequence", str(tmp_path / "demo-sequence.toml"), "--units", "2", "--out",
                      str(tmp_path / "out"), "--no-reports", "--json")
    assert result.exit_code == 0, result.stderr
    assert [r["serial"] for r in json.loads(result.stdout)["runs"]] == ["PW22-000001", "PW22-000002"]


def test_a_design_of_another_signal_model_gets_serials_and_lots_of_its_own(tmp_path: Path) -> None:
    from fixture.store import open_store
    from tests.sim.test_batch import TIMER_555

    (tmp_path / "timer.toml").write_text(TIMER_555, encoding="utf-8")
    _edit(SEQUENCES / "demo-sequence.toml", tmp_path / "timer-sequence.toml",
          [('design = "demo-panel.toml"', 'design = "timer.toml"'),
           ('serial_pattern = "PW22-[0-9]{6}"', 'serial_pattern = "T5-[A-Z][0-9]{3}"')])
    # the 555 model gives no output edge: the station names it (sequences/README.md, "edge_slew", "swing")
    station = (SEQUENCES / "demo-station.toml").read_text(encoding="utf-8")
    station = station[:station.index("[self_check]")].replace(
        "[measurement]\n", '[measurement]\nedge_slew = "10 V/us"\nswing = "5 V"\n')
    (tmp_path / "station.toml").write_text(station, encoding="utf-8")
    result = knobline("demo", "--sequence", str(tmp_path / "timer-sequence.toml"), "--station",
                      str(tmp_path / "station.toml"), "--units", "3", "--out", str(tmp_path / "out"),
                      "--no-reports", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert [r["serial"] for r in data["runs"]] == ["T5-A001", "T5-A002", "T5-A003"]
    assert data["planted"][0]["part"] == "c_timing"  # the design's capacitor, C4
    with open_store(str(tmp_path / "out" / "results.sqlite")) as store:
        lots = store.unit("T5-A001").lots
    assert set(lots) == {"r1", "r2", "c_timing", "knob_a_pot", "knob_b_pot"}
    assert {lot.split("-")[0] for lot in lots.values()} == {"R11", "R12", "C4", "RV1", "RV2"}


@pytest.mark.parametrize("option", ["--sim-defect", "--sim-lot-shift"])
def test_planting_text_that_is_not_printable_or_too_long_is_one_line(rehearsal: Path, option: str) -> None:
    for value in ("stuck-output\x1b[2J", "C3:" + "9" * 200):
        result = knobline("test", "ab7-sequence.toml", "--serial", "AB-0001", "--db", str(rehearsal / "r.sqlite"),
                          option, value)
        assert result.exit_code == 2
        error = [ln for ln in result.stderr.splitlines() if ln.startswith("knobline: error: ")]
        assert len(error) == 1 and error[0].startswith(f"knobline: error: {option}: expected ")
        assert "\x1b" not in result.stderr
