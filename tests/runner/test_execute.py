"""Testing units end to end on the simulated bench: verdicts, retries, the store."""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from fixture.errors import InstrumentTimeout
from fixture.sim.dut import Defect
from fixture.store import open_store

ROOT = Path(__file__).resolve().parents[2]


def first_failing_step(outcome) -> str:
    return next(name for name, verdict, _ in outcome.steps if verdict != "pass")


def test_good_units_pass_and_every_step_is_stored(line) -> None:
    test_unit, store, _ = line
    for i in range(3):
        outcome = test_unit(f"PW22-{100 + i:06d}", seed=i)
        assert outcome.verdict == "pass", outcome.steps
        detail = store.run(outcome.run_id)
        assert [s.verdict for s in detail.steps] == ["pass"] * 5
        assert detail.decoder is not None


@pytest.mark.parametrize(("defect", "step"), [
    (Defect("supply-current", current_a=0.05), "power up"),
    (Defect("wrong-part", part="c_integrator", factor=1.5), "frequency at knob A stops"),
    (Defect("open-wiper", part="a"), "frequency at knob A stops"),
    (Defect("stuck-output", level="high"), "frequency at knob A stops"),
    (Defect("wrong-part", part="r_threshold_bottom", factor=2.0), "duty at knob B stops"),
])
def test_each_injected_defect_fails_at_the_step_that_should_catch_it(line, defect, step) -> None:
    test_unit, store, _ = line
    outcome = test_unit("PW22-000200", defect)
    assert outcome.verdict == "fail"
    assert first_failing_step(outcome) == step
    assert store.run(outcome.run_id).summary.verdict == "fail"


def test_a_failed_power_up_stops_the_run(line) -> None:
    test_unit, store, _ = line
    outcome = test_unit("PW22-000201", Defect("supply-current", current_a=0.05))
    assert [name for name, _, _ in outcome.steps] == ["power up"]


def test_a_station_timeout_is_never_recorded_as_a_unit_fail(line, monkeypatch) -> None:
    test_unit, store, station = line

    def broken(*args, **kwargs):
        raise InstrumentTimeout("counter: no reply within 2 s (simulated fault)")

    monkeypatch.setattr(station.driver("counter"), "read", broken)
    outcome = test_unit("PW22-000202")
    assert outcome.verdict == "station-fault"
    verdicts = [s.verdict for s in store.run(outcome.run_id).steps]
    assert "fail" not in verdicts and verdicts[-1] == "station-fault"


def test_a_transient_timeout_is_retried_and_the_unit_still_judged(line, monkeypatch) -> None:
    test_unit, store, station = line
    counter = station.driver("counter")
    real_read = counter.read
    calls = {"n": 0}

    def flaky():
        calls["n"] += 1
        if calls["n"] == 1:
            raise InstrumentTimeout("counter: no reply (simulated, once)")
        return real_read()

    monkeypatch.setattr(counter, "read", flaky)
    assert test_unit("PW22-000203").verdict == "pass"


def test_operator_stop_ends_the_run_aborted(line, monkeypatch) -> None:
    test_unit, store, station = line

    def stop(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(station.driver("actuator"), "move_both", stop)
    outcome = test_unit("PW22-000204")
    assert outcome.verdict == "aborted"
    assert store.run(outcome.run_id).steps[-1].verdict == "aborted"


def test_a_retest_is_a_new_run_linked_to_the_earlier_one(line) -> None:
    test_unit, store, _ = line
    first = test_unit("PW22-000205", Defect("wrong-part", part="c_integrator", factor=1.5))
    second = test_unit("PW22-000205")
    assert second.run_id != first.run_id
    assert store.run(second.run_id).summary.retest_of == first.run_id


def test_a_killed_process_leaves_its_completed_steps_and_the_next_start_marks_the_run_incomplete(tmp_path) -> None:
    # SQLite WAL + synchronous=FULL: a committed step survives the process (SQLite docs; from memory).
    sequence = tmp_path / "slow.toml"
    text = (ROOT / "sequences/demo-sequence.toml").read_text(encoding="utf-8")
    text = text.replace('design = "demo-panel.toml"', f'design = "{ROOT / "sequences/demo-panel.toml"}"')
    text = text.replace("requires = [", "required_lots = []  # this test is about the crash, not lots\nrequires = [")
    text += ('\n[[steps]]\nkind = "custom"\nname = "hang"\ncall = "tests.runner.custom_steps:wait_forever"\n'
             '[steps.parameters]\nseconds = 120\n')
    sequence.write_text(text, encoding="utf-8")
    db = tmp_path / "crash.sqlite"
    proc = subprocess.Popen([sys.executable, "-m", "fixture.cli", "test", str(sequence), "--serial", "PW22-000300",
                             "--db", str(db), "--operator", "crash"], cwd=ROOT, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 60
        steps = 0
        while time.monotonic() < deadline and steps < 5:
            time.sleep(0.2)
            if db.exists():
                with sqlite3.connect(db) as con:
                    try:
                        steps = con.execute("select count(*) from step_result").fetchone()[0]
                    except sqlite3.OperationalError:
                        steps = 0
        assert steps == 5, "the run did not reach the hanging step in time"
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=10)
    finally:
        if proc.poll() is None:
            proc.kill()
    with open_store(str(db)) as store:
        assert store.mark_incomplete_runs("PW-22 end-of-line bench 2") == [1]
        detail = store.run(1)
        assert detail.summary.verdict == "incomplete"
        assert len(detail.steps) == 5
    with sqlite3.connect(db) as con:
        assert con.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
