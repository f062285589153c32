"""``knobline test --certificates``: a unit's certificate issued as its run ends."""

from __future__ import annotations

import json
from pathlib import Path

from click.testing import CliRunner

from fixture.cli import main
from fixture.reporting.signing import public_certificate_name, station_key
from fixture.store import open_store
from tests.demo_lots import LOT_OPTIONS
from tests.json_keys import all_keys, documented_json_keys
from tests.programs import release_demo_programs


def run_test(tmp_path: Path, *args: str):
    # Certificates are for runs of released programs only (README "Released test programs").
    release_demo_programs(str(tmp_path / "r.sqlite"), tmp_path / "people")
    return CliRunner().invoke(main, ["test", "--serial", "PW22-000901", *LOT_OPTIONS,
                                     "--db", str(tmp_path / "r.sqlite"), "--operator", "ana", *args],
                              catch_exceptions=False)


def test_a_judged_unit_gets_a_certificate_that_verifies(tmp_path: Path) -> None:
    key = station_key(tmp_path / "keys" / "station-key.pem", create_missing=True)
    result = run_test(tmp_path, "--certificates", str(tmp_path / "certs"), "--pdf", "--key", str(key.path), "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    # one unit raises no lot alert, so the alert items' keys are absent (tests/commands/test_lot_watch_commands.py
    # holds them to the help when one fires)
    alert_keys = {"part", "lot", "side", "shift_pct", "shift_se_pct", "units", "left_out", "also", "partners",
                  "text"}
    assert data["lot_alerts"] == []
    assert all_keys(data) == documented_json_keys(CliRunner().invoke(main, ["test", "--help"]).stdout) - alert_keys
    assert data["certificate_error"] is None
    for path in (data["certificate"]["html"], data["certificate"]["pdf"]):
        verify = CliRunner().invoke(main, ["verify", path, "--db", str(tmp_path / "r.sqlite")])
        assert verify.exit_code == 0, verify.stdout + verify.stderr


def test_the_banner_comes_before_the_certificate_line(tmp_path: Path) -> None:
    key = station_key(tmp_path / "keys" / "station-key.pem", create_missing=True)
    result = run_test(tmp_path, "--certificates", str(tmp_path / "certs"), "--key", str(key.path))
    assert result.exit_code == 0, result.stderr
    assert "PASS" in result.stdout
    assert [ln for ln in result.stderr.splitlines() if ln.startswith("certificate KL-")]
    assert len(list((tmp_path / "certs").glob("KL-*.html"))) == 1


def test_a_missing_key_is_bad_input_before_the_unit_is_tested(tmp_path: Path) -> None:
    result = run_test(tmp_path, "--certificates", str(tmp_path / "certs"), "--key", str(tmp_path / "nokey.pem"))
    assert result.exit_code == 2
    with open_store(str(tmp_path / "r.sqlite")) as store:
        assert store.runs() == []  # nothing was tested, nothing stored


def test_pdf_or_key_without_certificates_is_bad_input(tmp_path: Path) -> None:
    result = run_test(tmp_path, "--pdf")
    assert result.exit_code == 2
    assert result.stderr.splitlines()[-1] == "knobline: error: --pdf: expected --certificates DIR with it, found none"


def test_a_certificate_that_cannot_be_written_keeps_the_verdicts_exit_code(tmp_path: Path) -> None:
    key = station_key(tmp_path / "keys" / "station-key.pem", create_missing=True)
    blocked = tmp_path / "certs"
    (blocked / public_certificate_name(key.fingerprint)).mkdir(parents=True)  # a folder where a file must go
    result = run_test(tmp_path, "--certificates", str(blocked), "--key", str(key.path), "--json")
    assert result.exit_code == 0  # the unit passed; the certificate can be issued again from the stored run
    data = json.loads(result.stdout)
    assert data["certificate"] is None and "IsADirectoryError" in data["certificate_error"]
    assert "certificate of run 1 not written" in result.stderr
    with open_store(str(tmp_path / "r.sqlite")) as store:
        assert store.runs()[0].verdict == "pass"
