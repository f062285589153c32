"""``knobline certificate`` and ``knobline verify`` on the command line: files, exit codes, JSON keys."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from click.testing import CliRunner
from sqlalchemy import text

from fixture.cli import main
from fixture.store import open_store
from tests.json_keys import all_keys


@pytest.fixture
def run():
    runner = CliRunner()

    def invoke(*args: str):
        return runner.invoke(main, list(args), catch_exceptions=False)

    return invoke


def documented_json_keys(help_text: str) -> set[str]:
    paragraph = help_text.split("JSON keys:", 1)[1].split("\n\n", 1)[0]
    paragraph = paragraph.split("; check is", 1)[0]  # what follows lists values, not keys
    return set(re.findall(r"[a-z][a-z0-9_]*", paragraph))


def certify(run, db_url: str, key, out: Path, *args: str) -> dict:
    result = run("certificate", *args, "--db", db_url, "--key", str(key.path), "--out", str(out), "--json")
    assert result.exit_code == 0, result.stderr
    return json.loads(result.stdout)


def test_a_serial_means_its_latest_run_and_the_file_is_named_by_certificate_number(run, db_url, key, tmp_path):
    data = certify(run, db_url, key, tmp_path, "PW22-000001")
    assert (data["run_id"], data["verdict"]) == (1, "fail")
    assert Path(data["html"]) == tmp_path / f"{data['certificate_number']}.html"
    assert Path(data["html"]).exists() and data["pdf"] is None


def test_certificate_json_keys_are_the_ones_the_help_lists(run, db_url, key, tmp_path):
    documented = documented_json_keys(run("certificate", "--help").stdout)
    data = certify(run, db_url, key, tmp_path, "run:1")
    # not_written entries ({run_id, reason}) appear only when a certificate fails: pinned in test_certificate_batches
    assert set(data) | all_keys(data["certificates"]) | {"reason"} == documented
    assert set(data) - {"certificates", "not_written"} == all_keys(data["certificates"]) | {"database", "key",
                                                                                            "key_created"}


def test_verify_json_keys_are_the_ones_the_help_lists(run, db_url, key, tmp_path):
    html = certify(run, db_url, key, tmp_path, "1")["html"]
    result = run("verify", html, "--db", db_url, "--key", str(key.path), "--json")
    assert all_keys(json.loads(result.stdout)) == documented_json_keys(run("verify", "--help").stdout)


def test_verify_exits_0_when_everything_matches_and_finds_a_run_certificate_by_id(run, db_url, key, tmp_path):
    certify(run, db_url, key, tmp_path, "1")
    public = key.path.parent / "station-key.crt.pem"
    result = run("verify", "1", "--dir", str(tmp_path), "--db", db_url, "--public-key", str(public))
    assert result.exit_code == 0, result.stdout + result.stderr
    assert result.stdout.startswith("VERIFIED: ")
    assert "  ok       run: holds run 1" in result.stdout.splitlines()


def test_verify_finds_the_public_key_written_beside_the_certificate(run, db_url, key, tmp_path):
    made = certify(run, db_url, key, tmp_path / "out", "1")
    assert Path(made["public_key"]) == tmp_path / "out" / f"station-key-{made['fingerprint'][:16]}.crt.pem"
    result = run("verify", made["html"], "--db", db_url)  # no key option, no station key on this machine
    assert result.exit_code == 0, result.stdout + result.stderr
    assert f"trusted key {made['fingerprint'][:16]} from {made['public_key']})" in result.stdout


def test_verify_run_in_a_folder_holding_another_runs_file_names_it(run, db_url, key, tmp_path):
    first = Path(certify(run, db_url, key, tmp_path, "1")["html"])
    second = Path(certify(run, db_url, key, tmp_path, "2")["html"])
    second.write_bytes(first.read_bytes())  # run 2's file name, run 1's certificate
    result = run("verify", "2", "--dir", str(tmp_path), "--db", db_url, "--key", str(key.path))
    assert result.exit_code == 1
    assert any(line.startswith("  mismatch run: expected the certificate of run 2, the file holds run 1")
               for line in result.stdout.splitlines())


def test_verify_exits_1_and_names_the_field_when_the_database_was_edited(run, db_url, key, tmp_path):
    html = certify(run, db_url, key, tmp_path, "1")["html"]
    with open_store(db_url) as store, store.engine.begin() as connection:
        connection.execute(text("UPDATE run SET operator = 'eve' WHERE id = 1"))
    result = run("verify", html, "--db", db_url, "--key", str(key.path))
    assert result.exit_code == 1
    assert "  mismatch database: run, operator: certificate 'ana', database 'eve'" in result.stdout.splitlines()


def test_verify_without_the_database_checks_file_and_signature_only(run, db_url, key, tmp_path):
    html = certify(run, db_url, key, tmp_path, "1")["html"]
    result = run("verify", html, "--no-db", "--key", str(key.path), "--json")
    assert result.exit_code == 0
    findings = {f["check"]: f["status"] for f in json.loads(result.stdout)["findings"]}
    assert findings == {"key": "ok", "signature": "ok", "hash": "ok", "number": "ok", "document": "ok",
                        "visible": "ok", "database": "skipped"}


@pytest.mark.parametrize("args, message", [
    (("verify", "no-such.html"), "'no-such.html': expected a certificate file or a run id, found neither"),
    (("verify", "99"), "run 99: expected a recorded run, found none"),
    (("certificate", "PW22-999999"), "'PW22-999999': expected a serial with recorded runs or a run id, found neither"),
    (("certificate", "3"), "run 3: expected a run ended with a verdict on the unit (pass or fail), found running"),
])
def test_bad_input_exits_2_with_one_line(run, db_url, key, tmp_path, args, message):
    result = run(*args, "--db", db_url, "--key", str(key.path))
    assert result.exit_code == 2
    assert [ln for ln in result.stderr.splitlines() if ln.startswith("knobline:")] == [f"knobline: error: {message}"]


def test_a_file_that_is_no_certificate_is_bad_input(run, db_url, key, tmp_path):
    page = tmp_path / "page.html"
    page.write_text("<html><body>hello</body></html>", encoding="utf-8")
    assert run("verify", str(page), "--db", db_url, "--key", str(key.path)).exit_code == 2


def test_verify_without_any_station_key_is_bad_input(run, db_url, key, tmp_path):
    html = certify(run, db_url, key, tmp_path, "1")["html"]
    for published in tmp_path.glob("station-key-*.crt.pem"):
        published.unlink()  # the auditor got the file alone
    result = run("verify", html, "--db", db_url)  # the default key location is empty in this test
    assert result.exit_code == 2 and "give --public-key FILE" in result.stderr


def test_digits_that_are_both_a_serial_and_a_run_id_must_be_spelled_out(run, db_url, key, tmp_path):
    from tests.reporting.conftest import DESIGN_SHA, SEQUENCE_SHA

    with open_store(db_url) as store:
        run_id = store.begin_run("1", {}, "line-1", "ana", "0.1.0", SEQUENCE_SHA, DESIGN_SHA)
        store.finish_run(run_id, "pass")
    result = run("certificate", "1", "--db", db_url, "--key", str(key.path), "--out", str(tmp_path))
    assert result.exit_code == 2 and "write run:1 or serial:1" in result.stderr
    assert certify(run, db_url, key, tmp_path, "serial:1")["run_id"] == run_id
    assert certify(run, db_url, key, tmp_path, "run:1")["serial"] == "PW22-000001"


@pytest.mark.parametrize("depth", [900, 100_000])
def test_verify_reports_a_record_nested_too_deep_as_a_mismatch_not_an_internal_error(run, db_url, key, tmp_path,
                                                                                   depth):
    # Python's json module recurses per nesting level and raises RecursionError past the interpreter's
    # limit (Python docs, json: "Changed in 3.x ... RecursionError", from memory). A hostile file is
    # the file's problem: DOES NOT VERIFY (exit 1) or bad input (exit 2), never exit 3.
    made = certify(run, db_url, key, tmp_path, "PW22-000001")
    html = Path(made["html"]).read_text(encoding="utf-8")
    # a valid JSON record whose first value is nested ``depth`` arrays deep
    hostile = html.replace('{"certificate_number":', '{"certificate_number":' + "[" * depth + "]" * depth + ',"x":', 1)
    assert hostile != html
    page = tmp_path / "deep.html"
    page.write_text(hostile, encoding="utf-8")
    result = run("verify", str(page), "--db", db_url, "--key", str(key.path))
    assert result.exit_code in (1, 2), result.output
    assert "internal error" not in result.stderr
