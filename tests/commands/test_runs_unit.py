"""``knobline runs`` and ``knobline unit``: what the results database holds, for people and for scripts."""

from __future__ import annotations

import datetime as dt
import hashlib
import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from fixture.cli import main
from fixture.store import DB_ENV_VAR, DecoderConstants, MeasurementRecord, open_store
from tests.json_keys import all_keys, documented_json_keys
from tests.reporting import hostile

DESIGN_SHA = hashlib.sha256(b"a design file").hexdigest()
SEQUENCE_SHA = hashlib.sha256(b"a sequence file").hexdigest()
STATION_SHA = hashlib.sha256(b"a station file").hexdigest()
T0 = dt.datetime(2026, 3, 2, 8, 0, tzinfo=dt.UTC)

# Invented readings; the commands must hand them back exactly as recorded.
PERIOD = MeasurementRecord("period at A 25 %", "period", 3.1234567e-3, "s", "pass", knob_a_pct=25.0,
                           knob_b_pct=50.0, tolerance_low=2.9e-3, tolerance_high=3.4e-3, acceptance_low=2.91e-3,
                           acceptance_high=3.39e-3, expanded_uncertainty=2.0e-6, coverage_factor=2.0,
                           decision_rule="guarded acceptance, w = 1 x U")
DUTY = MeasurementRecord("duty at B 90 %", "duty", 0.9312, "1", "fail", knob_a_pct=50.0, knob_b_pct=90.0,
                         tolerance_high=0.92, acceptance_high=0.919)
CURRENT = MeasurementRecord("supply current", "supply_current", 6.6e-3, "A", "pass", acceptance_low=2e-3,
                            acceptance_high=15e-3)


def _documented(help_text: str) -> set[str]:
    return documented_json_keys(help_text, {"or", "null", "part", "lot"})


@pytest.fixture
def db_url(tmp_path: Path) -> str:
    """A database with two units: PW22-000001 failed once then passed its retest; PW22-000002 is running."""
    url = f"sqlite:///{tmp_path / 'results.sqlite'}"
    with open_store(url) as store:
        store.record_design("PW-22", "C", "demo-panel.toml", DESIGN_SHA)
        store.record_sequence("final test", "demo-sequence.toml", SEQUENCE_SHA)
        store.record_station("line-1", "hall 2", STATION_SHA, "demo-station.toml")

        counter = store.record_instrument("counter", "Tessaly Instruments", "YQ-C83", "T31-0042", "1.04",
                                          calibration_certificate="CAL-26-0117",
                                          calibration_due=dt.date(2027, 1, 31), calibration_lab="in-house")

        def begin(serial: str, operator: str, started: dt.datetime) -> int:
            return store.begin_run(serial, {"c_integrator": "C1-2611A", "knob_a_pot": "RV1-2604A"}, "line-1",
                                   operator, "0.1.0", SEQUENCE_SHA, DESIGN_SHA, started_at=started,
                                   instruments=[counter])

        first = begin("PW22-000001", "ana", T0)
        store.record_step(first, 0, "power up", "pass", T0, T0 + dt.timedelta(seconds=1), "", [CURRENT])
        store.record_step(first, 1, "duty at stops", "fail", T0 + dt.timedelta(seconds=1),
                          T0 + dt.timedelta(seconds=4), "duty high at B 90 %", [PERIOD, DUTY])
        store.finish_run(first, "fail", ended_at=T0 + dt.timedelta(seconds=4.5))

        t1 = T0 + dt.timedelta(minutes=10)
        retest = begin("PW22-000001", "ben", t1)
        store.record_step(retest, 0, "power up", "pass", t1, t1 + dt.timedelta(seconds=1), "", [CURRENT])
        store.record_decoder_calibration(retest, DecoderConstants(3.6e-3, 1.9e-3, 0.08, 0.93, "linear-in-period",
                                                                  "linear-in-duty", 1.25, 0.5))
        store.finish_run(retest, "pass", ended_at=t1 + dt.timedelta(seconds=12.25))

        begin("PW22-000002", "ana", T0 + dt.timedelta(minutes=20))
    return url


@pytest.fixture
def run(monkeypatch: pytest.MonkeyPatch, tmp_path: Path):
    # Never touch the developer's own results database.
    monkeypatch.delenv(DB_ENV_VAR, raising=False)
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    runner = CliRunner()

    def invoke(*args: str, env: dict[str, str] | None = None):
        return runner.invoke(main, list(args), catch_exceptions=False, env=env)

    return invoke


def test_runs_lists_newest_first_with_verdict_duration_and_retest_link(run, db_url: str) -> None:
    result = run("runs", "--db", db_url, "--json")
    assert result.exit_code == 0, result.stderr
    runs = json.loads(result.stdout)["runs"]
    assert [(r["run_id"], r["serial"], r["verdict"]) for r in runs] == [
        (3, "PW22-000002", "running"), (2, "PW22-000001", "pass"), (1, "PW22-000001", "fail")]
    # Durations are end minus start of what was recorded (plain arithmetic).
    assert [r["duration_s"] for r in runs] == [None, 12.25, 4.5]
    assert [r["retest_of"] for r in runs] == [None, 1, None]
    assert runs[2]["started_at"] == "2026-03-02T08:00:00+00:00"  # ISO 8601 with UTC offset
    assert runs[1]["operator"] == "ben" and runs[1]["station"] == "line-1"


def test_runs_text_is_a_table_with_one_line_per_run(run, db_url: str) -> None:
    result = run("runs", "--db", db_url)
    assert result.exit_code == 0, result.stderr
    lines = result.stdout.splitlines()
    assert lines[0].split()[:3] == ["run", "serial", "verdict"]
    assert len(lines) == 4
    assert lines[2].split() == ["2", "PW22-000001", "pass", "line-1", "ben", "2026-03-02", "08:10:00", "12.2",
                                "s", "1"]


def test_runs_filters_by_serial_and_limits_the_count(run, db_url: str) -> None:
    result = run("runs", "--db", db_url, "--serial", "PW22-000001", "--limit", "1", "--json")
    assert [r["run_id"] for r in json.loads(result.stdout)["runs"]] == [2]


def test_runs_reads_the_database_named_by_the_environment(run, db_url: str) -> None:
    result = run("runs", "--json", env={DB_ENV_VAR: db_url})
    assert result.exit_code == 0, result.stderr
    assert len(json.loads(result.stdout)["runs"]) == 3


def test_runs_json_keys_are_the_ones_the_help_lists(run, db_url: str) -> None:
    documented = _documented(run("runs", "--help").stdout)
    found = all_keys(json.loads(run("runs", "--db", db_url, "--json").stdout))
    assert found == documented


def test_unit_json_keys_are_the_ones_the_help_lists(run, db_url: str) -> None:
    documented = _documented(run("unit", "--help").stdout)
    data = json.loads(run("unit", "PW22-000001", "--db", db_url, "--json").stdout)
    found = all_keys(data) - set(data["lots"])  # lot keys are the design's part keys
    assert found == documented


def test_unit_shows_lots_and_every_reading_with_its_limits_and_verdict(run, db_url: str) -> None:
    result = run("unit", "PW22-000001", "--db", db_url, "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["lots"] == {"c_integrator": "C1-2611A", "knob_a_pot": "RV1-2604A"}
    assert data["design"] == {"name": "PW-22", "revision": "C"}
    first, retest = data["runs"]
    assert (first["verdict"], retest["verdict"], retest["retest_of"]) == ("fail", "pass", 1)
    step = first["steps"][1]
    assert (step["name"], step["verdict"], step["message"]) == ("duty at stops", "fail", "duty high at B 90 %")
    period, duty = step["measurements"]
    assert MeasurementRecord(**period) == PERIOD  # JSON floats round-trip exactly (repr is shortest-exact)
    assert MeasurementRecord(**duty) == DUTY
    assert first["decoder"] is None
    assert retest["decoder"]["scheme_a"] == "linear-in-period"
    assert retest["instruments"] == [{"role": "counter", "make": "Tessaly Instruments", "model": "YQ-C83",
                                      "serial": "T31-0042", "firmware": "1.04", "calibration_certificate": "CAL-26-0117",
                                      "calibration_due": "2027-01-31"}]


def test_unit_text_shows_each_step_and_reading(run, db_url: str) -> None:
    result = run("unit", "PW22-000001", "--db", db_url)
    assert result.exit_code == 0, result.stderr
    text = result.stdout
    # parts in words (no design text stored here: the circuit's role words), never the key
    assert "Integrator capacitor" in text and "C1-2611A" in text and "c_integrator" not in text
    assert "step 2 duty at stops: FAIL: 1 reading outside its acceptance limits." in text  # steps from 1
    # Duty is recorded as a fraction; people read percent: 0.9312 -> 93.12 %.
    duty_line = next(ln for ln in text.splitlines() if "Duty cycle at knob A 50 %, B 90 %:" in ln)
    assert duty_line.split()[0] == "FAIL" and "93.12 %" in duty_line and "91.9 %" in duty_line
    # U = 2.0 µs: the period to U's last place, 0.1 µs (JCGM 100 7.2.6)
    period_line = next(ln for ln in text.splitlines() if "Period at knob A 25 %, B 50 %:" in ln)
    assert "3.1235 ms, U = 2.0 µs (k = 2)" in period_line


def test_unknown_serial_exits_2_with_one_line(run, db_url: str) -> None:
    for args in (("unit", "PW22-999999"), ("runs", "--serial", "PW22-999999")):
        result = run(*args, "--db", db_url)
        assert result.exit_code == 2
        errors = [ln for ln in result.stderr.splitlines() if ln.startswith("knobline:")]
        assert errors == [f"knobline: error: serial 'PW22-999999': expected a unit with recorded runs in "
                          f"{db_url}, found none"]


def test_reading_a_database_that_does_not_exist_does_not_create_it(run, tmp_path: Path) -> None:
    missing = tmp_path / "typo.sqlite"
    result = run("runs", "--db", str(missing))
    assert result.exit_code == 0
    assert "no runs recorded" in result.stdout
    assert run("unit", "PW22-000001", "--db", str(missing)).exit_code == 2
    assert not missing.exists()


def test_runs_and_unit_show_escape_sequences_nul_and_overrides_visibly(run, tmp_path: Path) -> None:
    # Rows written past the input readers (another tool, an older knobline): the terminal must not obey them.
    url = f"sqlite:///{tmp_path / 'hostile.sqlite'}"
    hostile.hostile_database(url)
    runner = CliRunner()  # color=True: pass escape sequences through as a terminal would get them

    def terminal(*args: str):
        return runner.invoke(main, list(args), catch_exceptions=False, color=True)

    for result in (terminal("runs", "--db", url), terminal("unit", hostile.SERIAL, "--db", url)):
        assert result.exit_code == 0, result.stderr
        assert hostile.raw_characters_in(result.output) == []
        assert hostile.VISIBLE_PASS + "\\x00<U+202E>0001-XX" in result.stdout
        assert "ana<U+2066><U+200F>" in result.stdout
    history = run("unit", hostile.SERIAL, "--db", url).stdout
    assert "C1-\\x9b31m\\x7f" in history and "power<U+202A> up" in history and "ok\\x1b]0;owned\\x07\\x0d" in history
    # JSON stays exact data (RFC 8259 escapes), and ASCII: no raw control byte on the terminal either.
    as_json = run("runs", "--db", url, "--json").stdout
    assert as_json.isascii() and json.loads(as_json)["runs"][0]["serial"] == hostile.SERIAL


@pytest.mark.parametrize("db", ["://", "a/" * 3000 + "x.sqlite", "dir"])
def test_runs_names_a_database_path_or_url_it_cannot_use_as_bad_input(db: str, tmp_path, monkeypatch) -> None:
    # Linux refuses a path over PATH_MAX (4096 bytes, limits.h) with ENAMETOOLONG; SQLite cannot
    # use a directory as its file. Both are the user's mistake: exit 2, one line, no internal error.
    monkeypatch.chdir(tmp_path)
    (tmp_path / "dir").mkdir()
    result = CliRunner().invoke(main, ["runs", "--db", db], catch_exceptions=False)
    assert result.exit_code == 2, result.output
    last = result.stderr.strip().splitlines()[-1]
    assert last.startswith("knobline: error: database") and "internal error" not in result.stderr


def test_unit_json_and_the_certificate_record_state_a_run_alike(run, db_url: str) -> None:
    # One serialiser of run details: what `unit --json` says of a run's steps, readings, instruments and
    # decoder is what the signed certificate record says (common practice, no source).
    from fixture.reporting.certificate import build_record

    unit = json.loads(run("unit", "PW22-000001", "--db", db_url, "--json").stdout)["runs"][1]
    with open_store(db_url) as store:
        record = build_record(store, unit["run_id"])
    assert unit["steps"] == record["steps"] and unit["instruments"] == record["instruments"]
    assert unit["decoder"] == record["decoder"] and unit["decoder"] is not None
    assert record["instruments"][0]["calibration_certificate"] == "CAL-26-0117"
