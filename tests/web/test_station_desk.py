"""A station page's runs: the same path as ``knobline test``, one at a time, stopped runs never pass.

The desk runs units on the simulated demo station in a worker thread; what it stores is compared
with what ``knobline test`` stores for the same unit (same serial, lots and seed: the same readings).
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

import pytest

from fixture._data import data_dir
from fixture.errors import UserInputError
from fixture.store import open_store
from fixture.web.station_desk import RunView, StationDesk, WebReporter
from tests.web.serving import BAD_SERIAL, GOOD_SERIAL, SECOND_SERIAL, _fresh_database, demo_station

ROOT = Path(__file__).resolve().parents[2]


def _finish(desk: StationDesk, view: RunView, timeout_s: float = 120.0) -> dict:
    deadline = time.monotonic() + timeout_s
    while not view.finished:
        assert time.monotonic() < deadline, "the run did not end"
        desk.wait_for_events(view, len(view.events), 1.0)
    assert view.end is not None
    return view.end


def _readings(db_url: str, run_id: int) -> list[tuple[str, float | None, str]]:
    with open_store(db_url) as store:
        detail = store.run(run_id)
    return [(m.quantity, m.value, m.verdict) for step in detail.steps for m in step.measurements]


def test_a_good_unit_passes_with_every_step_and_reading_reported(tmp_path) -> None:
    db = _fresh_database(tmp_path)
    desk = StationDesk(demo_station(db))
    view = desk.start(GOOD_SERIAL, {}, "olwen.test")
    end = _finish(desk, view)
    assert end["verdict"] == "pass" and end["shape"] == "pass" and end["why"] == ""
    assert end["not_for_shipment"]  # the demo station is an engineering one, its files not released here
    kinds = [e["kind"] for e in view.events]
    steps = [e for e in view.events if e["kind"] == "step"]
    assert kinds[-1] == "end" and len(steps) == steps[0]["total"]
    assert kinds.count("step_end") == len(steps)
    with open_store(db) as store:
        assert store.runs(limit=1)[0].verdict == "pass"
    plan = desk.tester.plan  # type: ignore[attr-defined]
    assert sum(1 for e in view.events if e["kind"] == "point") == sum(len(s.points) for s in plan.steps)


def test_a_unit_built_with_a_wrong_part_fails_and_the_verdict_names_the_step(tmp_path) -> None:
    desk = StationDesk(demo_station(_fresh_database(tmp_path)))
    view = desk.start(BAD_SERIAL, {}, "olwen.test")
    end = _finish(desk, view)
    assert end["verdict"] == "fail" and end["shape"] == "fail"
    assert end["step"] == "frequency at knob A stops"  # the demo sequence's step of the integrator's readings
    assert "outside" in end["why"] and "Frequency at knob A" in end["why"]
    assert end["action"].startswith("the unit is bad")
    failed = [e for e in view.events if e["kind"] == "point" and not e["ok"]]
    assert failed and all(e["note"] == "outside its limits" and e["value"] != "no reading" for e in failed)


def test_a_failed_point_without_a_reading_is_not_called_outside_its_limits(tmp_path) -> None:
    # a silent output fails a point with no value: there is nothing to compare with limits (common practice)
    desk = StationDesk(demo_station(_fresh_database(tmp_path)))
    plan = desk.tester.plan  # type: ignore[attr-defined]
    view = RunView(number=1, serial="PW22-X", operator="olwen.test")
    reporter = WebReporter(view, lambda: None)
    step = plan.steps[1]
    reporter.point_done(step, step.points[0], None, "fail")
    (event,) = [e for e in view.events if e["kind"] == "point"]
    assert (event["value"], event["note"], event["ok"]) == ("no reading", "", False)


def test_stop_ends_the_run_aborted_never_pass_and_the_store_says_so(tmp_path) -> None:
    db = _fresh_database(tmp_path)
    desk = StationDesk(demo_station(db), pace_s=0.2)  # slow enough to stop in the middle
    view = desk.start(GOOD_SERIAL, {}, "olwen.test")
    while not any(e["kind"] == "point" for e in view.events):
        desk.wait_for_events(view, len(view.events), 1.0)
    assert desk.stop(view.number)
    end = _finish(desk, view)
    assert end["verdict"] == "aborted" and end["shape"] == "stopped"
    assert "NOT judged" in end["action"]
    with open_store(db) as store:
        assert store.runs(limit=1)[0].verdict == "aborted"


def test_one_run_at_a_time_per_station(tmp_path) -> None:
    desk = StationDesk(demo_station(_fresh_database(tmp_path)), pace_s=0.2)
    view = desk.start(GOOD_SERIAL, {}, "olwen.test")
    with pytest.raises(UserInputError, match="still going"):
        desk.start(SECOND_SERIAL, {}, "olwen.test")
    desk.stop(view.number)
    _finish(desk, view)
    desk.pace_s = 0.0  # the second run at full speed
    second = desk.start(SECOND_SERIAL, {}, "olwen.test")
    assert _finish(desk, second)["verdict"] == "pass"


def test_a_serial_or_lot_refused_before_anything_is_powered(tmp_path) -> None:
    db = _fresh_database(tmp_path)
    desk = StationDesk(demo_station(db, traveller=False))
    with pytest.raises(UserInputError, match="pattern"):
        desk.start("NOT-A-SERIAL", {}, "olwen.test")
    with pytest.raises(UserInputError, match="field under Component lots") as refused:
        desk.start(GOOD_SERIAL, {}, "olwen.test")  # no traveller, no lots typed: the sequence requires them
    assert "--lot" not in str(refused.value)  # the page's words, not the command line's
    assert desk.current() is None
    with open_store(db) as store:
        assert store.runs() == []


def test_a_unit_tested_from_the_page_is_stored_as_knobline_test_stores_it(tmp_path) -> None:
    web_db = _fresh_database(tmp_path)
    desk = StationDesk(demo_station(web_db))
    end = _finish(desk, desk.start(GOOD_SERIAL, {}, "olwen.test"))
    cli_db = tmp_path / "cli.sqlite"
    proc = subprocess.run([sys.executable, "-m", "fixture.cli", "test", "--serial", GOOD_SERIAL, "--traveller",
                           str(data_dir("sequences") / "demo-traveller.csv"), "--db", str(cli_db), "--json",
                           "--operator", "olwen.test"],
                          cwd=tmp_path, env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin",
                                             "KNOBLINE_LOG": str(tmp_path / "cli.log")},
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert _readings(web_db, end["run_id"]) == _readings(str(cli_db), 1)  # same unit, seed and plan


def test_a_server_stopping_mid_run_ends_the_run_aborted_in_the_store(tmp_path) -> None:
    from starlette.testclient import TestClient

    from tests.web.clients import form_token, log_in
    from tests.web.serving import served_app, state_of

    app = served_app(tmp_path, pace_s=0.2)
    with TestClient(app) as client:
        log_in(client, "operator")
        client.post("/station/1/start", data={"serial": GOOD_SERIAL, "csrf_token": form_token(client, "/station/1")})
        desk = next(iter(state_of(app).desks.values()))
        view = desk.current()
        assert view is not None
        while not any(e["kind"] == "point" for e in view.events):
            desk.wait_for_events(view, len(view.events), 1.0)
    # leaving the block shut the application down: its lifespan stops the run and waits for it
    assert view.finished and view.end is not None and view.end["verdict"] == "aborted"
    with open_store(state_of(app).settings.db_url) as store:
        assert store.runs(limit=1)[0].verdict == "aborted"


class RaisingTester:
    """A tester whose every run raises ``error`` (a bug, a station fault) before any step."""

    def __init__(self, name: str, error: Exception) -> None:
        self.name, self.error = name, error

    def lot_parts(self):
        return []

    def traveller_note(self):
        return None

    def check(self, serial, lots):
        return lots

    def run(self, serial, lots, operator, reporter, stop):
        raise self.error


def test_a_tester_that_breaks_ends_the_run_a_station_fault_on_the_page(tmp_path) -> None:
    desk = StationDesk(RaisingTester("broken bench", RuntimeError("a bug")))
    end = _finish(desk, desk.start(GOOD_SERIAL, {}, "olwen.test"))
    assert end["verdict"] == "station-fault" and "RuntimeError: a bug" in end["why"]


def test_a_message_with_control_or_override_characters_reaches_the_page_shown_not_obeyed(tmp_path) -> None:
    from fixture.errors import InstrumentFault

    desk = StationDesk(RaisingTester("bench", InstrumentFault("counter said \u202eTLUAF\u202c \x1b[31mred\x1b[0m")))
    end = _finish(desk, desk.start(GOOD_SERIAL, {}, "olwen.test"))
    # Unicode TR 9: U+202E/U+202C reorder what follows; ECMA-48: ESC starts a terminal control sequence
    assert "\u202e" not in end["why"] and "\x1b" not in end["why"]
    assert "TLUAF" in end["why"] and "red" in end["why"]
