"""Control and bidi characters already in a database: shown visibly on pages, the signed record keeps them."""

from __future__ import annotations

import io
import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from fixture.cli import main
from fixture.commands.certificate import write_certificate
from fixture.commands.verify import read_certificate_file, verify_certificate
from fixture.reporting.operator_view import TerminalReporter, final_banner
from fixture.runner.plan_points import PlanStep
from fixture.store import open_store
from tests.reporting import hostile


def terminal(*args: str):
    # color=True: click passes escape sequences through, as it does to a real terminal.
    return CliRunner().invoke(main, list(args), color=True)


@pytest.fixture
def hostile_db(tmp_path: Path) -> tuple[str, int]:
    url = f"sqlite:///{tmp_path / 'hostile.sqlite'}"
    return url, hostile.hostile_database(url)


def test_certificate_shows_hostile_text_visibly_and_signs_the_original(hostile_db, key, tmp_path) -> None:
    url, run_id = hostile_db
    with open_store(url) as store:
        files = write_certificate(store, run_id, tmp_path / "out", key)
        html = files.html.read_text(encoding="utf-8")
        embedded = read_certificate_file(files.html)
        result = verify_certificate(embedded, key.private_key.public_key(), store)
    assert hostile.raw_characters_in(html) == []  # nowhere in the file, embedded JSON included
    assert hostile.VISIBLE_PASS in html and "&lt;U+202E&gt;" in html and "\\x00" in html
    assert "ana&lt;U+2066&gt;&lt;U+200F&gt;" in html and "C1-\\x9b31m\\x7f" in html
    # The record is data: it keeps every character; only the page shows them visibly.
    assert embedded.record["unit"]["serial"] == hostile.SERIAL
    assert embedded.record["run"]["operator"] == hostile.OPERATOR
    assert embedded.record["steps"][0]["message"] == hostile.MESSAGE
    assert result.verified


def test_batch_report_shows_hostile_text_visibly(hostile_db, tmp_path) -> None:
    url, _ = hostile_db
    result = terminal("report", "batch", "--db", url, "--out", str(tmp_path))
    assert result.exit_code == 0, result.output
    html = (tmp_path / "batch-report.html").read_text(encoding="utf-8")
    assert hostile.raw_characters_in(html) == []
    assert "line\\x1b[8m-1" in html  # the station, in the yield by station
    # The step: in the failing-steps sentence (one failing step gets no chart), its table and the quantities'
    # table; the Pareto chart draws step names too (tests/reporting/test_batch_evidence.py).
    assert html.count("power&lt;U+202A&gt; up") >= 3
    assert hostile.raw_characters_in(result.output) == []


def test_certificate_command_output_shows_the_serial_visibly(hostile_db, key, tmp_path) -> None:
    url, run_id = hostile_db
    result = terminal("certificate", f"run:{run_id}", "--db", url, "--key", str(key.path), "--out", str(tmp_path))
    assert result.exit_code == 0, result.output
    assert hostile.raw_characters_in(result.output) == [] and hostile.VISIBLE_PASS in result.stdout
    verified = terminal("verify", str(next(tmp_path.glob("*.html"))), "--db", url, "--key", str(key.path))
    assert verified.exit_code == 0 and hostile.raw_characters_in(verified.output) == []


def test_an_error_quoting_outside_text_is_shown_visibly(hostile_db, tmp_path) -> None:
    url, _ = hostile_db
    result = terminal("report", "batch", "--db", url, "--templates", f"{tmp_path}/x\x1b[31m")
    assert result.exit_code == 2
    assert hostile.raw_characters_in(result.stderr) == [] and "x\\x1b[31m" in result.stderr


def test_operator_view_shows_step_names_messages_and_serial_visibly() -> None:
    out = io.StringIO()
    step = PlanStep.__new__(PlanStep)
    object.__setattr__(step, "index", 0)
    object.__setattr__(step, "name", hostile.STEP_NAME)
    object.__setattr__(step, "points", ())
    reporter = TerminalReporter(out)
    reporter.step_started(step, 1)
    reporter.step_finished(step, "fail", hostile.MESSAGE)
    banner = final_banner("pass", hostile.SERIAL, 7)
    assert hostile.raw_characters_in(out.getvalue() + banner) == []
    assert hostile.VISIBLE_PASS in banner and "power<U+202A> up" in out.getvalue()


def test_every_commands_text_output_keeps_line_breaks_and_shows_the_rest(capsys) -> None:
    # The last net under every command's text (instrument identities, lot codes, yields by lot...).
    from fixture.commands._common import emit

    emit({"serial": hostile.SERIAL}, False, lambda: f"counter: {hostile.FAKE_PASS}\nlot {hostile.LOT}")
    out = capsys.readouterr().out
    assert out == f"counter: {hostile.VISIBLE_PASS}\nlot C1-\\x9b31m\\x7f\n"
    emit({"serial": hostile.SERIAL}, True, lambda: "")
    assert json.loads(capsys.readouterr().out) == {"serial": hostile.SERIAL}  # JSON: the data, exactly
