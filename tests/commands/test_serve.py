"""``knobline serve``: it starts on the loopback address with the safety caution, refuses a host name,
and ``--demo`` makes users that can log in and a station whose planted unit fails."""

from __future__ import annotations

import os
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

from click.testing import CliRunner

from fixture.cli import main
from fixture.commands._serve_demo import prepare_demo
from fixture.safety import SAFETY_CAUTION
from fixture.store import open_store
from fixture.store.web_users import find_web_user
from fixture.web.passwords import check_password
from fixture.web.station_desk import StationDesk
from tests.web.serving import free_port

ROOT = Path(__file__).resolve().parents[2]


def test_serve_listens_on_the_loopback_address_and_says_the_safety_caution(tmp_path) -> None:
    port = free_port()
    env = {**os.environ, "PYTHONPATH": str(ROOT), "KNOBLINE_LOG": str(tmp_path / "log")}
    proc = subprocess.Popen([sys.executable, "-m", "fixture.cli", "serve", "--port", str(port), "--db",
                             str(tmp_path / "r.sqlite")], cwd=tmp_path, env=env, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 120
        while True:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/login", timeout=5) as answer:
                    assert answer.status == 200
                    break
            except OSError:
                assert proc.poll() is None and time.monotonic() < deadline, "serve did not start"
                time.sleep(0.2)
    finally:
        proc.terminate()
        _, err = proc.communicate(timeout=60)
    assert SAFETY_CAUTION in " ".join(err.split())
    assert f"http://127.0.0.1:{port}/" in err


def test_serve_refuses_a_host_that_is_not_an_address(tmp_path) -> None:
    result = CliRunner().invoke(main, ["serve", "--host", "plant.example", "--db", str(tmp_path / "r.sqlite")])
    assert result.exit_code == 2 and "expected an IP address" in result.output


def test_the_demo_prints_users_that_log_in_and_serves_a_station_whose_planted_unit_fails(tmp_path) -> None:
    prepared = prepare_demo(tmp_path / "demo", batch_units=5, pace_s=0.0, say=False)
    assert len(prepared.passwords) == 3
    with open_store(prepared.db_url) as store:
        roles = set()
        for name, password in prepared.passwords.items():
            user = find_web_user(store, name)
            assert user is not None and check_password(user.password_hash, password)
            roles.add(user.role)
        assert roles == {"operator", "engineer", "quality"}
        assert len(store.runs(limit=100)) == 5  # the demo batch, tested before the pages open
    station = prepared.station
    serials = [line.split(",")[0] for line in station.traveller.read_text().splitlines()[1:]]
    bad = next(s for s in serials if station.planted_for(s) and station.planted_for(s).defects)
    desk = StationDesk(station)
    view = desk.start(bad, {}, "mira.okafor")
    while not view.finished:
        desk.wait_for_events(view, len(view.events), 1.0)
    assert view.end["verdict"] in ("fail", "station-fault")  # a planted defect is never a pass
    good = next(s for s in serials if not station.planted_for(s).defects and not station.planted_for(s).part_shifts)
    view = desk.start(good, {}, "mira.okafor")
    while not view.finished:
        desk.wait_for_events(view, len(view.events), 1.0)
    assert view.end["verdict"] == "pass"
    assert not view.end["not_for_shipment"]  # the demo released its files in its own database


def test_the_demo_refuses_a_database_given_but_leaves_the_lines_database_alone(tmp_path, monkeypatch) -> None:
    given = CliRunner().invoke(main, ["serve", "--demo", "--db", str(tmp_path / "line.sqlite")])
    assert given.exit_code == 2 and "--demo" in given.output
    monkeypatch.setenv("KNOBLINE_DB", str(tmp_path / "line.sqlite"))
    monkeypatch.setattr("fixture.commands._serve_demo.prepare_demo",
                        lambda out: (_ for _ in ()).throw(RuntimeError("demo prepared")))
    result = CliRunner().invoke(main, ["serve", "--demo", "--out", str(tmp_path / "d")])
    assert result.exit_code == 3 and "demo prepared" in result.output  # it went on to the demo, not refused
    assert not (tmp_path / "line.sqlite").exists()
