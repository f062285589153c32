"""knobline demo: a simulated batch through the real runner and store."""

from __future__ import annotations

import json
import shlex
from pathlib import Path

import pytest

from click.testing import CliRunner

from fixture.cli import main
from fixture.files.design_file import load_design
from fixture.sim.batch import plan_batch
from fixture.store import open_store
from tests.demo_lots import DEMO_LOTS, lot_options
from tests.json_keys import all_keys, documented_json_keys


def test_demo_batch_fails_every_planted_defect_and_stores_every_run(tmp_path: Path) -> None:
    result = CliRunner().invoke(main, ["demo", "--units", "40", "--seed", "7", "--out", str(tmp_path), "--no-reports",
                                       "--json"],
                                catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert sum(data["verdicts"].values()) == 40 and data["verdicts"]["station-fault"] == 0
    verdict = {r["serial"]: r["verdict"] for r in data["runs"]}
    planned = plan_batch(load_design("sequences/demo-panel.toml"), units=40, seed=7)
    assert {u.serial for u in planned.defective()} <= {s for s, v in verdict.items() if v == "fail"}
    with open_store(str(tmp_path / "results.sqlite")) as store:
        assert len(store.runs(limit=100)) == 40
        unit = store.unit(planned.units[0].serial)
        assert unit.lots == planned.units[0].lots


def test_test_command_takes_lots_from_a_traveller(tmp_path: Path) -> None:
    traveller = tmp_path / "travellers.csv"
    lots = {**DEMO_LOTS, "knob_a_pot": "RV1-2609B"}
    traveller.write_text(f"serial,{','.join(lots)}\nPW22-000777,{','.join(lots.values())}\n", encoding="utf-8")
    db = tmp_path / "r.sqlite"
    result = CliRunner().invoke(main, ["test", "--serial", "PW22-000777", "--traveller", str(traveller), "--db",
                                       str(db), "--operator", "t", "--json"], catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    with open_store(str(db)) as store:
        assert store.unit("PW22-000777").lots == lots


def test_demo_ends_with_next_steps_that_work_as_printed_and_a_second_demo_continues(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)  # where the user typed the command; --out is relative, as they would write it
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "empty"))  # no station key of this machine to fall back on
    monkeypatch.delenv("KNOBLINE_KEY", raising=False)
    result = CliRunner().invoke(main, ["demo", "--units", "8", "--seed", "3", "--out", "knobline-demo"],
                                catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    assert "certificates: 8 of 8 written" in result.stderr.splitlines()
    lines = result.stdout.splitlines()
    report = Path(next(ln for ln in lines if ln.startswith("batch report: ")).split(": ", 1)[1])
    assert "First-pass yield" in report.read_text(encoding="utf-8")
    assert len(sorted(Path("knobline-demo/certificates").glob("*.html"))) == 8
    # the summary ends with three commands to copy, each of which works as printed from here
    steps = lines[lines.index("next steps:") + 1:]
    assert [s.split()[:2] for s in steps] == [["knobline", "yield"], ["knobline", "unit"], ["knobline", "verify"]]
    assert steps[2].strip().startswith("knobline verify knobline-demo/certificates/KL-")
    for command in steps:
        done = CliRunner().invoke(main, shlex.split(command)[1:], catch_exceptions=False)
        assert done.exit_code == 0, command + "\n" + done.stdout + done.stderr
    assert done.stdout.startswith("VERIFIED: ")
    # a second demo into the same folder continues the serial numbers instead of retesting units
    again = CliRunner().invoke(main, ["demo", "--units", "3", "--seed", "3", "--out", "knobline-demo",
                                      "--no-reports", "--json"], catch_exceptions=False)
    assert again.exit_code == 0, again.stderr
    assert [r["serial"] for r in json.loads(again.stdout)["runs"]] == ["PW22-000009", "PW22-000010", "PW22-000011"]
    # the first demo released its files in its own database; the second finds them released
    assert json.loads(again.stdout)["released_by_demo"] == [] and not json.loads(again.stdout)["not_for_shipment"]


def test_the_demo_certifies_only_runs_of_released_programs(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # README "Released test programs": a certificate is for a run of released files, the demo's too.
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "empty"))
    own = CliRunner().invoke(main, ["demo", "--units", "2", "--out", str(tmp_path / "own"), "--json"],
                             catch_exceptions=False)
    assert own.exit_code == 0, own.stderr
    data = json.loads(own.stdout)
    assert data["released_by_demo"] == ["station", "sequence", "design"] and data["certificate_count"] == 2
    trail = CliRunner().invoke(main, ["audit", "--db", str(tmp_path / "own" / "results.sqlite"), "--json"])
    actions = [(e["action"], e["who"]) for e in json.loads(trail.stdout)["entries"]]
    assert actions[:2] == [("approval", "Demo Approver (invented by knobline demo)"),
                           ("release", "Demo Approver (invented by knobline demo)")]
    assert actions[-2:] == [("certificate-issue", "demo")] * 2
    # A database the demo was pointed at gets no invented people: its drafts are tested, never certified.
    given = tmp_path / "line.sqlite"
    other = CliRunner().invoke(main, ["demo", "--units", "2", "--out", str(tmp_path / "other"), "--db", str(given),
                                      "--json"], catch_exceptions=False)
    assert other.exit_code == 0, other.stderr
    data = json.loads(other.stdout)
    assert (data["released_by_demo"], data["not_for_shipment"], data["certificate_count"]) == ([], True, 0)
    assert "the batch's runs are marked not for shipment and get no certificate" in other.stderr
    assert json.loads(CliRunner().invoke(main, ["person", "list", "--db", str(given), "--json"]).stdout)["people"] == []


def test_demo_json_keys_are_the_ones_the_help_lists(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "empty"))
    result = CliRunner().invoke(main, ["demo", "--units", "15", "--seed", "3", "--out", str(tmp_path), "--json"],
                                catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    help_text = CliRunner().invoke(main, ["demo", "--help"]).stdout
    keys = {part for key in all_keys(data) for part in key.split("-")}  # "station-fault" reads as two words
    # seed 3's planted lot is alerted within 15 units, naming lots it cannot tell apart: every alert key appears
    assert any(a["also"] and a["partners"] for a in data["lot_alerts"])
    assert keys == documented_json_keys(help_text)
    assert data["defective"] and data["certificate_count"] == data["verdicts"]["pass"] + data["verdicts"]["fail"] and data["certificates_not_written"] == []


def test_batch_report_prints_hostile_lot_codes_and_operators_as_text(tmp_path: Path) -> None:
    db = str(tmp_path / "r.sqlite")
    hostile = "<script>alert(1)</script>"
    for serial, lot in (("PW22-000501", hostile), ("PW22-000502", "C1-2611A"), ("PW22-000503", hostile)):
        result = CliRunner().invoke(main, ["test", "--serial", serial, *lot_options(c_integrator=lot),
                                           "--operator", hostile, "--db", db, "--json"], catch_exceptions=False)
        assert result.exit_code == 0, result.stderr
    report = CliRunner().invoke(main, ["report", "batch", "--db", db, "--out", str(tmp_path), "--json"],
                                catch_exceptions=False)
    assert report.exit_code == 0, report.stderr
    html = (tmp_path / "batch-report.html").read_text(encoding="utf-8")
    assert hostile not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html


def test_demo_out_that_is_a_file_or_an_over_long_name_is_bad_input(tmp_path: Path) -> None:
    # mkdir of an existing file fails with EEXIST, of a 300-byte name with ENAMETOOLONG (Linux NAME_MAX
    # is 255, limits.h): both are the user's --out mistake, exit 2 naming --out, never an internal error.
    (tmp_path / "taken").write_text("not a folder\n")
    for out in (tmp_path / "taken", tmp_path / ("a" * 300)):
        result = CliRunner().invoke(main, ["demo", "--units", "1", "--no-reports", "--out", str(out)],
                                    catch_exceptions=False)
        assert result.exit_code == 2, result.output
        assert "--out" in result.stderr and "internal error" not in result.stderr


def test_test_refuses_two_different_lots_for_one_part(tmp_path: Path) -> None:
    # A unit is built from one lot of each part (the traveller's purpose; common practice, no source):
    # two --lot options, or a --lot and the traveller, naming different lots of one part contradict
    # each other and are refused (exit 2) before anything runs, not settled silently by order.
    traveller = tmp_path / "travellers.csv"
    traveller.write_text("serial,c_integrator\nPW22-000778,C1-2611A\n", encoding="utf-8")
    db = tmp_path / "r.sqlite"
    for extra in (["--lot", "c_integrator=C1-2611A", "--lot", "c_integrator=C1-2612B"],
                  ["--traveller", str(traveller), "--lot", "c_integrator=C1-2612B"]):
        result = CliRunner().invoke(main, ["test", "--serial", "PW22-000778", *extra, "--db", str(db),
                                           "--operator", "t"], catch_exceptions=False)
        assert result.exit_code == 2, result.output
        assert "c_integrator" in result.stderr and "C1-2612B" in result.stderr
    assert not db.exists()


def test_the_demo_report_names_the_planted_lot_and_no_other(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # the demo's own answer key (its planted lot) is the reference: a finding may name the planted
    # lot alone or with lots this batch cannot tell from it, never an innocent lot on its own
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "empty"))
    result = CliRunner().invoke(main, ["demo", "--out", str(tmp_path), "--json"], catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    (planted,) = data["planted"]
    assert data["lot_findings"], "the planted lot was not found"
    for finding in data["lot_findings"]:
        assert planted["lot"] in finding["lots"], finding["words"]
        low, high = finding["interval_pct"]
        assert low <= finding["shift_pct"] <= high
    html = Path(data["batch_report"]).read_text(encoding="utf-8")
    decisions = html.split('<section class="decisions">', 1)[1].split("</section>", 1)[0]
    assert f"Hold lot {planted['lot']}." in decisions  # the report leads with the decision
    alerts = html.split("Early warning during the batch", 1)[1].split("<h3", 1)[0]
    assert f"lot {planted['lot']}" in alerts  # the alert raised while testing is shown with the findings
    report = CliRunner().invoke(main, ["report", "batch", "--db", str(tmp_path / "results.sqlite"), "--out",
                                       str(tmp_path / "again"), "--json"], catch_exceptions=False)
    assert report.exit_code == 0, report.stderr
    assert [f["lots"] for f in json.loads(report.stdout)["lot_findings"]] == [f["lots"] for f in data["lot_findings"]]


def test_a_demo_with_no_lot_off_plants_none_and_finds_none(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "empty"))
    result = CliRunner().invoke(main, ["demo", "--units", "30", "--lot-shift", "none", "--out", str(tmp_path),
                                       "--json"], catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["planted"] == [] and data["lot_findings"] == []


@pytest.mark.parametrize("text", ["X9:-8", "C1:lots", "C1:-80", "C1"])
def test_a_lot_shift_that_names_no_lotted_part_or_percent_is_bad_input(tmp_path: Path, text: str) -> None:
    result = CliRunner().invoke(main, ["demo", "--lot-shift", text, "--out", str(tmp_path)])
    assert result.exit_code == 2
    assert "--lot-shift" in result.stderr and "Traceback" not in result.stderr
