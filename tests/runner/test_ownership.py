"""Station ownership across processes: one live process per station, runs of gone owners only marked."""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

from fixture.errors import StationInUse
from fixture.runner.ownership import hold_station
from fixture.store import open_store
from fixture.store.lease import claim_lease, lease_holder
from fixture.store.owner import ProcessIdentity
from tests.demo_lots import LOT_OPTIONS

ROOT = Path(__file__).resolve().parents[2]
STATION = "PW-22 end-of-line bench 2"


def held_sequence(tmp_path: Path, flag: Path, name: str = "held.toml") -> Path:
    """The demo sequence plus a last step that waits for ``flag``: a run that stays open on demand (no lots required)."""
    text = (ROOT / "sequences/demo-sequence.toml").read_text(encoding="utf-8")
    text = text.replace('design = "demo-panel.toml"', f'design = "{ROOT / "sequences/demo-panel.toml"}"')
    text = text.replace("requires = [", "required_lots = []  # these tests are about ownership, not lots\nrequires = [")
    text += ('\n[[steps]]\nkind = "custom"\nname = "hold"\ncall = "tests.runner.ownership_steps:wait_for_flag"\n'
             f'[steps.parameters]\nflag = "{flag}"\nseconds = 120\n')
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def second_station(tmp_path: Path) -> Path:
    text = (ROOT / "sequences/demo-station.toml").read_text(encoding="utf-8")
    path = tmp_path / "bench-3.toml"
    path.write_text(text.replace(f'name = "{STATION}"', 'name = "PW-22 end-of-line bench 3"'), encoding="utf-8")
    return path


def knobline(*args: str) -> subprocess.Popen[str]:
    return subprocess.Popen([sys.executable, "-m", "fixture.cli", *args], cwd=ROOT, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def wait_for_steps(db: Path, count: int, timeout_s: float = 90) -> None:
    """Wait until ``count`` steps are committed (the run has reached the holding step)."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if db.exists():
            with sqlite3.connect(db) as con:
                try:
                    if con.execute("select count(*) from step_result").fetchone()[0] >= count:
                        return
                except sqlite3.OperationalError:
                    pass
        time.sleep(0.1)
    raise AssertionError(f"{count} steps were not recorded in time")


@pytest.fixture
def processes() -> Iterator[list[subprocess.Popen[str]]]:
    started: list[subprocess.Popen[str]] = []
    yield started
    for proc in started:
        if proc.poll() is None:
            proc.kill()
        proc.communicate(timeout=30)


def verdicts(db: Path) -> dict[int, str]:
    with sqlite3.connect(db) as con:
        return dict(con.execute("select id, verdict from run"))


def test_a_second_process_on_the_same_station_is_refused_and_the_first_run_completes(tmp_path, processes) -> None:
    flag, db = tmp_path / "go", tmp_path / "r.sqlite"
    first = knobline("test", str(held_sequence(tmp_path, flag)), "--serial", "PW22-000401", "--db", str(db),
                     "--operator", "one")
    processes.append(first)
    wait_for_steps(db, 5)
    second = knobline("test", "--serial", "PW22-000402", *LOT_OPTIONS, "--db", str(db), "--operator", "two")
    processes.append(second)
    out, err = second.communicate(timeout=120)
    # Exit 3: a station fault (README exit codes); one line naming the holder.
    assert second.returncode == 3, err
    assert f"station '{STATION}' is in use by process {first.pid} on host" in err and " since " in err
    assert "Traceback" not in err
    flag.touch()
    first.communicate(timeout=120)
    assert first.returncode in (0, 1)
    assert verdicts(db) == {1: "pass"} or verdicts(db) == {1: "fail"}


def test_two_stations_on_one_database_run_in_parallel_and_both_complete(tmp_path, processes) -> None:
    flag, db = tmp_path / "go", tmp_path / "r.sqlite"
    sequence = held_sequence(tmp_path, flag)
    processes.append(knobline("test", str(sequence), "--serial", "PW22-000411", "--db", str(db)))
    processes.append(knobline("test", str(sequence), "--serial", "PW22-000412", "--db", str(db),
                              "--station", str(second_station(tmp_path))))
    wait_for_steps(db, 10)  # both runs are open at once, each on its own station
    assert set(verdicts(db).values()) == {"running"} and len(verdicts(db)) == 2
    flag.touch()
    for proc in processes:
        _, err = proc.communicate(timeout=120)
        assert proc.returncode in (0, 1), err
    assert sorted(verdicts(db).values()) == ["pass", "pass"]


def test_a_killed_owners_run_is_marked_incomplete_by_the_next_start(tmp_path, processes) -> None:
    flag, db = tmp_path / "go", tmp_path / "r.sqlite"
    first = knobline("test", str(held_sequence(tmp_path, flag)), "--serial", "PW22-000421", "--db", str(db))
    processes.append(first)
    wait_for_steps(db, 5)
    os.kill(first.pid, signal.SIGKILL)
    first.communicate(timeout=30)
    # Its lease row is left behind with a dead pid: the next start takes it over.
    with open_store(str(db)) as store:
        stale = lease_holder(store, STATION)
        assert stale is not None and stale.owner.pid == first.pid
    flag.touch()
    nxt = knobline("test", "--serial", "PW22-000422", *LOT_OPTIONS, "--db", str(db))
    processes.append(nxt)
    _, err = nxt.communicate(timeout=120)
    assert nxt.returncode == 0, err
    assert "run 1 was left running by a stopped process: marked incomplete" in err
    assert verdicts(db) == {1: "incomplete", 2: "pass"}
    with open_store(str(db)) as store:
        assert lease_holder(store, STATION) is None  # released at the end


def test_a_station_is_held_once_per_process_and_others_stay_free(tmp_path) -> None:
    with open_store(str(tmp_path / "r.sqlite")) as store:
        with hold_station(store, STATION) as hold:
            assert hold.still_held
            with pytest.raises(StationInUse, match=rf"station '{STATION}' is in use by process {os.getpid()} "
                                                   r"on host \S+ since \d\d:\d\d UTC; wait for it"):
                hold_station(store, STATION)
            with hold_station(store, "PW-22 end-of-line bench 3"):
                pass
        with hold_station(store, STATION):  # released: free again
            pass


def test_a_live_lease_on_another_host_refuses_the_station(tmp_path) -> None:
    with open_store(str(tmp_path / "r.sqlite")) as store:
        remote = ProcessIdentity("line3-pc-elsewhere", 4711, "b:1")
        assert claim_lease(store, STATION, remote) is None
        with pytest.raises(StationInUse, match="in use by process 4711 on host line3-pc-elsewhere since"):
            hold_station(store, STATION)


def test_the_heartbeat_thread_renews_the_lease_while_a_step_waits(tmp_path) -> None:
    with open_store(str(tmp_path / "r.sqlite")) as store, hold_station(store, STATION, heartbeat_s=0.02):
        first = lease_holder(store, STATION)
        assert first is not None
        for _ in range(500):  # bounded wait for a beat; no assertion on wall time
            time.sleep(0.01)
            now = lease_holder(store, STATION)
            if now is not None and now.heartbeat_at > first.heartbeat_at:
                break
        else:
            raise AssertionError("the heartbeat never renewed the lease")
