"""``knobline demo --bench tcp`` and ``knobline bench-server``: the batch over pyvisa-py sockets, end to end.

The demo starts a bench server on ports the system chooses, tests over TCPIP0::127.0.0.1::PORT::SOCKET
through pyvisa-py and stops it; what is checked is the chain (every unit judged, stored under the
network station, the served station file written, no server thread left), common practice, no source.
"""

from __future__ import annotations

import json
import threading
from pathlib import Path

from click.testing import CliRunner

from fixture.cli import main
from fixture.files.station_file import load_station
from fixture.store import open_store


def test_demo_over_tcp_sockets_tests_every_unit_through_pyvisa_py_and_stops_its_server(tmp_path: Path) -> None:
    before = set(threading.enumerate())
    result = CliRunner().invoke(main, ["demo", "--bench", "tcp", "--units", "3", "--no-reports", "--json",
                                       "--out", str(tmp_path / "demo")])
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    assert sum(data["verdicts"].values()) == 3 and data["verdicts"]["station-fault"] == 0
    station = load_station(tmp_path / "demo" / "bench-server-station.toml")
    assert all(e.backend == "@py" and e.resource.endswith("::SOCKET") for e in station.instruments.values())
    with open_store(str(tmp_path / "demo" / "results.sqlite")) as store:
        runs = store.runs(limit=10)
        assert len(runs) == 3 and {r.station for r in runs} == {station.name}
    assert [t.name for t in set(threading.enumerate()) - before if t.name.startswith("bench-server")] == []


def test_demo_over_tcp_refuses_several_stations(tmp_path: Path) -> None:
    result = CliRunner().invoke(main, ["demo", "--bench", "tcp", "--stations", "2", "--out", str(tmp_path)])
    assert result.exit_code == 2 and "expected 1 with --bench tcp" in result.output


def test_bench_server_serves_on_free_ports_and_writes_a_station_file_pointing_at_them(tmp_path: Path) -> None:
    out = tmp_path / "served.toml"
    result = CliRunner().invoke(main, ["bench-server", "--any-ports", "--write-station", str(out), "--for", "0.2"])
    assert result.exit_code == 0, result.output
    served = {line.split(": ")[0]: line.split(": ")[1] for line in result.stdout.splitlines() if "::SOCKET" in line}
    assert set(served) == {"counter", "scope", "supply", "actuator"}
    station = load_station(out)
    assert {role: e.resource for role, e in station.instruments.items()} == served
    assert station.served_simulation


def test_bench_server_refuses_a_fault_it_cannot_read() -> None:
    result = CliRunner().invoke(main, ["bench-server", "--any-ports", "--fault", "counter:melt", "--for", "0"])
    assert result.exit_code == 2 and "expected ROLE:KIND" in result.output


def test_the_same_batch_gets_the_same_verdicts_and_readings_on_both_benches(tmp_path: Path) -> None:
    # Both benches answer from the same pyvisa-sim definitions and the same seeded world: the chain
    # over sockets must not change a reading (parity by construction, common practice, no source).
    readings = {}
    for bench in ("sim", "tcp"):
        out = tmp_path / bench
        result = CliRunner().invoke(main, ["demo", "--bench", bench, "--units", "4", "--no-reports", "--json",
                                           "--seed", "7", "--out", str(out)])
        assert result.exit_code == 0, result.output
        runs = json.loads(result.stdout)["runs"]
        with open_store(str(out / "results.sqlite")) as store:
            readings[bench] = {r["serial"]: (r["verdict"], [(m.quantity, m.value) for s in store.run(r["run_id"]).steps
                                                            for m in s.measurements]) for r in runs}
    assert readings["sim"] == readings["tcp"] and len(readings["sim"]) == 4
    assert all(len(steps) > 20 for _, steps in readings["sim"].values())


def test_knobline_test_runs_unchanged_against_a_bench_server_in_another_process(tmp_path: Path) -> None:
    import os
    import signal
    import subprocess
    import sys
    import time

    station = tmp_path / "served.toml"
    server = subprocess.Popen([sys.executable, "-m", "fixture.cli", "bench-server", "--any-ports", "--write-station",
                               str(station), "--for", "120"], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                              text=True, env={**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])})
    try:
        deadline = time.monotonic() + 60
        while not station.exists() and server.poll() is None and time.monotonic() < deadline:
            time.sleep(0.1)
        assert station.exists(), server.communicate(timeout=10)
        lots = [arg for part in ("c_integrator", "r_integrator", "knob_a_pot", "knob_b_pot", "r_ref_top", "r_ref_bottom",
                                 "r_schmitt_in", "r_schmitt_fb", "r_threshold_top", "r_threshold_bottom")
                for arg in ("--lot", f"{part}=L-{part}")]
        result = CliRunner().invoke(main, ["test", "--station", str(station), "--serial", "PW22-000001", "--json",
                                           "--db", str(tmp_path / "r.sqlite"), *lots])
        assert result.exit_code == 0, result.output  # 0: the unit passed
        assert json.loads(result.stdout)["verdict"] == "pass"
    finally:
        server.send_signal(signal.SIGTERM)
        out, err = server.communicate(timeout=30)
    assert server.returncode == 0 and "stopped" in err  # SIGTERM stops it cleanly
