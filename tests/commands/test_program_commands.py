"""``knobline program``, ``knobline person`` and what a station does with released test programs.

The behaviour is ours (README "Released test programs"): a production station tests only files
released by a second person whose signature verifies; an engineering station marks runs of drafts
not for shipment and they get no certificate. Common practice for controlled test programs on a
regulated line (EU GMP Annex 11 on electronic signatures; from memory), no numeric reference.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pytest
from click.testing import CliRunner
from sqlalchemy import text

from tests.demo_lots import LOT_OPTIONS
from fixture.cli import main
from fixture.files.toml_reader import FileProblems
from fixture.files.station_file import load_station
from fixture.reporting.signing import station_key
from fixture.store import open_store
from fixture.store.programs import run_not_for_shipment
from tests.json_keys import all_keys, documented_json_keys
from tests.programs import DEMO_FILES, release_demo_programs, release_file

SERIAL = "PW22-000901"


def invoke(*args: str, stdin: str | None = None):
    return CliRunner().invoke(main, list(args), input=stdin, catch_exceptions=False)


def production_station(tmp_path: Path, mode: str = '"production"') -> Path:
    """The demo bench's station file with ``[station] mode`` set (a station file of our own)."""
    lines = DEMO_FILES["station"].read_text(encoding="utf-8").splitlines()
    at = lines.index("[station]") + 1
    path = tmp_path / "line3-bench2.toml"
    path.write_text("\n".join([*lines[:at], f"mode = {mode}", *lines[at:]]) + "\n", encoding="utf-8")
    return path


def sha256_of(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def run_unit(database_url: str, *args: str):
    return invoke("test", "--serial", SERIAL, *LOT_OPTIONS, "--db", database_url,
                  "--operator", "olu", *args)


@pytest.fixture
def no_power(monkeypatch):
    """Fail the test if ``knobline test`` opens the station (the supply would be switched on)."""
    opened = []

    def refuse(*args, **kwargs):
        opened.append(args)
        raise AssertionError("the station was opened")
    monkeypatch.setattr("fixture.commands._unit_on_station.open_station", refuse)
    return opened


@pytest.mark.parametrize("registered", [False, True])
def test_a_production_station_refuses_an_unreleased_sequence_before_powering_anything(
        database_url: str, tmp_path: Path, no_power, registered: bool) -> None:
    station = production_station(tmp_path)
    release_demo_programs(database_url, tmp_path / "people",
                          {"station": station, "design": DEMO_FILES["design"]})
    if registered:  # a draft: registered by the engineer, never approved
        assert invoke("program", "register", str(DEMO_FILES["sequence"]), "--by", "Erin Engineer", "--key",
                      str(tmp_path / "people" / "engineer.pem"), "--db", database_url).exit_code == 0
    result = run_unit(database_url, "--station", str(station))
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 2  # the safety caution, then one line: the sequence is the only file not released
    assert lines[-1].startswith("knobline: error: production station 'PW-22 end-of-line bench 2': sequence ")
    assert f"(sha256 {sha256_of(DEMO_FILES['sequence'])})" in lines[-1]
    assert ("a draft registered by Erin Engineer" if registered else "no registered program") in lines[-1]
    assert "knobline program release" in lines[-1]
    assert no_power == []
    with open_store(database_url) as store:
        assert store.runs() == []


def test_release_by_the_person_who_registered_it_is_refused(database_url: str, tmp_path: Path) -> None:
    assert invoke("person", "add", "Ada", "--role", "approver", "--new-key", str(tmp_path / "ada.pem"),
                  "--db", database_url).exit_code == 0
    assert invoke("program", "register", "demo-sequence", "--by", "Ada", "--key", str(tmp_path / "ada.pem"),
                  "--db", database_url).exit_code == 0
    result = invoke("program", "release", "demo-sequence", "--approver", "Ada", "--key", str(tmp_path / "ada.pem"),
                    "--reason", "my own work", "--db", database_url)
    assert result.exit_code == 2
    assert "who registered it" in result.stderr
    listed = json.loads(invoke("program", "list", "--json", "--db", database_url).stdout)
    assert [p["state"] for p in listed["programs"]] == ["draft"]


def test_person_and_program_commands_release_with_an_encrypted_key_and_say_what_they_did(
        database_url: str, tmp_path: Path) -> None:
    db = ("--db", database_url)
    added = invoke("person", "add", "Bo", "--role", "approver", "--new-key", str(tmp_path / "bo.pem"),
                   "--passphrase", "--json", *db, stdin="s3cret\ns3cret\n")
    assert added.exit_code == 0, added.stderr
    assert invoke("person", "add", "Erin", "--role", "engineer", *db).exit_code == 2  # an engineer needs a key
    assert invoke("person", "add", "Erin", "--role", "engineer", "--new-key", str(tmp_path / "erin.pem"),
                  *db).exit_code == 0
    as_bo = invoke("program", "register", "demo-panel", "--by", "Erin", "--key", str(tmp_path / "bo.pem"), *db,
                   stdin="s3cret\n")  # Bo cannot register in Erin's name
    assert as_bo.exit_code == 2 and "expected Erin's key" in as_bo.stderr
    registered = invoke("program", "register", "demo-panel", "--by", "Erin", "--key", str(tmp_path / "erin.pem"),
                        "--json", *db)
    assert registered.exit_code == 0, registered.stderr
    assert json.loads(registered.stdout)["registration_verified"] is True
    wrong = invoke("program", "release", "demo-panel", "--approver", "Bo", "--key", str(tmp_path / "bo.pem"),
                   "--reason", "limits checked", *db, stdin="guess\n")
    assert wrong.exit_code == 2 and "passphrase" in wrong.stderr
    released = invoke("program", "release", "demo-panel", "--approver", "Bo", "--key", str(tmp_path / "bo.pem"),
                      "--reason", "limits checked", "--json", *db, stdin="s3cret\n")
    assert released.exit_code == 0, released.stderr
    data = json.loads(released.stdout)
    assert data["state"] == "released" and data["sha256"] == sha256_of(DEMO_FILES["design"])
    assert data["approval"]["approver"] == "Bo" and data["approval"]["verified"] is True
    assert data["approval"]["meaning"] == "released for production"
    person_help = invoke("person", "--help").stdout
    program_help = invoke("program", "--help").stdout
    assert all_keys(json.loads(added.stdout)) <= documented_json_keys(person_help)
    assert all_keys(json.loads(registered.stdout)) | all_keys(data) <= documented_json_keys(program_help)


def test_a_changed_file_is_not_released(database_url: str, tmp_path: Path, no_power) -> None:
    station = production_station(tmp_path)
    sequence = tmp_path / "final.toml"
    sequence.write_bytes(DEMO_FILES["sequence"].read_bytes())
    release_demo_programs(database_url, tmp_path / "people",
                          {"station": station, "design": DEMO_FILES["design"], "sequence": sequence})
    with sequence.open("a", encoding="utf-8") as f:
        f.write("# edited after its release\n")
    result = run_unit(database_url, str(sequence), "--station", str(station))
    assert result.exit_code == 2
    assert f"sequence {sequence} (sha256 {sha256_of(sequence)})" in result.stderr
    assert "no registered program with this content" in result.stderr
    again = invoke("program", "release", str(sequence), "--approver", "Avery Approver", "--key",
                   str(tmp_path / "people" / "approver.pem"), "--reason", "x", "--db", database_url)
    assert again.exit_code == 2 and "expected a registered sequence with this content" in again.stderr
    assert no_power == []


@pytest.mark.parametrize("tamper, says", [
    ("UPDATE program_approval SET reason = 'a reason nobody signed' WHERE program_id = :id", "does not verify"),
    ("UPDATE program_approval SET signature = :zero WHERE program_id = :id", "does not verify"),
    ("DELETE FROM program_approval WHERE program_id = :id", "marked released but has no approval"),
    ("UPDATE program SET file_name = 'other.toml' WHERE id = :id", "registration signature does not verify"),
    # the sealed limits (format knobline-release/2): their text must hash to the signed hash, and erasing the
    # seal does not turn the release into a format-1 one (the signature covers format and seal)
    ("UPDATE program_approval SET limits_rows = 'knobline-limits-seal/1\n' WHERE program_id = :id",
     "sealed limits text does not hash"),
    ("UPDATE program_approval SET limits_sha256 = NULL, limits_computed_by = NULL, limits_rows = NULL "
     "WHERE program_id = :id", "approval signature does not verify"),
    ("UPDATE program_approval SET limits_computed_by = 'knobline 9.9' WHERE program_id = :id",
     "approval signature does not verify"),
])
def test_a_tampered_release_is_not_released(database_url: str, tmp_path: Path, no_power, tamper: str,
                                            says: str) -> None:
    station = production_station(tmp_path)
    release_demo_programs(database_url, tmp_path / "people", {"station": station, "design": DEMO_FILES["design"],
                                                              "sequence": DEMO_FILES["sequence"]})
    with open_store(database_url) as store, store.engine.begin() as connection:
        sequence_id = connection.execute(text("SELECT id FROM program WHERE kind = 'sequence'")).scalar_one()
        connection.execute(text(tamper), {"id": sequence_id, "zero": "00" * 64})
    result = run_unit(database_url, "--station", str(station))
    assert result.exit_code == 2
    assert says in result.stderr and f"sha256 {sha256_of(DEMO_FILES['sequence'])}" in result.stderr
    assert no_power == []
    listed = json.loads(invoke("program", "list", "--json", "--db", database_url).stdout)["programs"]
    sequence = next(p for p in listed if p["kind"] == "sequence")
    assert sequence["approval"] is None or sequence["approval"]["verified"] is False \
        or sequence["registration_verified"] is False


def test_an_engineering_run_of_drafts_is_marked_and_gets_no_certificate(database_url: str, tmp_path: Path) -> None:
    key = station_key(tmp_path / "keys" / "station-key.pem", create_missing=True)
    certs = tmp_path / "certs"
    result = run_unit(database_url, "--certificates", str(certs), "--key", str(key.path), "--json")
    assert result.exit_code == 0, result.stderr  # the shipped demo bench is an engineering station
    data = json.loads(result.stdout)
    assert data["verdict"] == "pass" and data["certificate"] is None and data["not_for_shipment"] is True
    assert "this run is marked not for shipment and gets no certificate" in result.stderr
    with open_store(database_url) as store:
        assert run_not_for_shipment(store, data["run_id"]) is True
    # Wherever the run is listed later, the mark is beside its verdict (common practice, no source).
    listed = invoke("runs", "--db", database_url)
    assert "pass (not for shipment)" in listed.stdout
    history = invoke("unit", data["serial"], "--db", database_url, "--json")
    assert [r["not_for_shipment"] for r in json.loads(history.stdout)["runs"]] == [True]
    assert "pass (not for shipment)" in invoke("unit", data["serial"], "--db", database_url).stdout
    assert not list(certs.glob("KL-*"))
    later = invoke("certificate", f"run:{data['run_id']}", "--db", database_url, "--key", str(key.path),
                   "--out", str(certs))
    assert later.exit_code == 2 and "not for shipment" in later.stderr
    assert not list(certs.glob("KL-*.html"))


def test_a_production_station_tests_released_programs_and_refuses_a_retired_one(
        database_url: str, tmp_path: Path) -> None:
    station = production_station(tmp_path)
    release_demo_programs(database_url, tmp_path / "people", {"station": station, "design": DEMO_FILES["design"],
                                                              "sequence": DEMO_FILES["sequence"]})
    key = station_key(tmp_path / "keys" / "station-key.pem", create_missing=True)
    passed = run_unit(database_url, "--station", str(station), "--certificates", str(tmp_path / "certs"),
                      "--key", str(key.path), "--json")
    assert passed.exit_code == 0, passed.stderr
    assert json.loads(passed.stdout)["certificate"] is not None
    assert json.loads(passed.stdout)["not_for_shipment"] is False
    assert "not for shipment" not in passed.stderr + invoke("runs", "--db", database_url).stdout
    engineering = invoke("test", "--serial", "PW22-000902", *LOT_OPTIONS, "--db", database_url,
                         "--operator", "olu", "--json")  # the demo bench: an engineering station, its file a draft
    assert engineering.exit_code == 0, engineering.stderr
    issued = invoke("certificate", "--all", "--json", "--db", database_url, "--key", str(key.path),
                    "--out", str(tmp_path / "again"))
    assert issued.exit_code == 0, issued.stderr
    assert [c["run_id"] for c in json.loads(issued.stdout)["certificates"]] == [json.loads(passed.stdout)["run_id"]]
    retired = invoke("program", "retire", "demo-sequence", "--by", "Erin Engineer", "--reason", "superseded",
                     "--db", database_url)
    assert retired.exit_code == 0, retired.stderr
    refused = run_unit(database_url, "--station", str(station))
    assert refused.exit_code == 2
    assert "retired by Erin Engineer" in refused.stderr and sha256_of(DEMO_FILES["sequence"]) in refused.stderr


def test_a_station_mode_other_than_production_or_engineering_is_bad_input(tmp_path: Path) -> None:
    with pytest.raises(FileProblems, match="station.mode"):
        load_station(production_station(tmp_path, '"prod"'))
    assert load_station(production_station(tmp_path, '"engineering"')).mode == "engineering"
    assert load_station(DEMO_FILES["station"]).mode == "engineering"  # the default: the demo bench


def test_release_helper_is_idempotent(database_url: str, tmp_path: Path) -> None:
    # The helper other tests use must leave one released program per file, however often it runs.
    with open_store(database_url) as store:
        for _ in range(2):
            release_file(store, "design", DEMO_FILES["design"], tmp_path)
    listed = json.loads(invoke("program", "list", "--json", "--db", database_url).stdout)["programs"]
    assert [(p["kind"], p["version"], p["state"], p["approval"]["verified"]) for p in listed] == [
        ("design", 1, "released", True)]
