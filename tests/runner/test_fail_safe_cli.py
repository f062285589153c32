"""`knobline test` exits 3 (station fault) or 4 (aborted) for every way a run ends early, and stores no pass.

Exit codes are the ones README and `knobline test --help` document (ours; common practice, no source).
Faults are injected by a custom step (tests/runner/custom_steps.py) that leaves an instrument misbehaving
for the rest of the run, or by a custom step that is itself broken.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from fixture.cli import main
from fixture.store import open_store
from tests.demo_lots import LOT_OPTIONS

ROOT = Path(__file__).resolve().parents[2]


def sequence_with(tmp_path: Path, call: str, parameters: dict[str, str], *, first: bool) -> Path:
    """The demo sequence with a custom step calling ``call`` first or right after the power-up (no lots required)."""
    text = (ROOT / "sequences/demo-sequence.toml").read_text(encoding="utf-8")
    text = text.replace('design = "demo-panel.toml"', f'design = "{ROOT / "sequences/demo-panel.toml"}"')
    text = text.replace("requires = [", "required_lots = []  # these tests are about ending early, not lots\nrequires = [")
    params = "".join(f'{k} = "{v}"\n' for k, v in parameters.items())
    step = f'[[steps]]\nkind = "custom"\nname = "injected"\ncall = "{call}"\n[steps.parameters]\n{params}\n'
    head, sep, rest = text.partition("\n[[steps]]")
    if first:
        text = head + "\n" + step + sep + rest
    else:
        second = rest.index("\n[[steps]]") + 1
        text = head + sep + rest[:second] + step + rest[second:]
    path = tmp_path / "injected.toml"
    path.write_text(text, encoding="utf-8")
    return path


CASES = [
    ("sabotage", {"role": "counter", "fault": "nan"}, False, 3),
    ("sabotage", {"role": "counter", "fault": "inf"}, False, 3),
    ("sabotage", {"role": "counter", "fault": "reset"}, False, 3),
    ("sabotage", {"role": "counter", "fault": "value-error"}, False, 3),
    ("sabotage", {"role": "counter", "fault": "overflow"}, False, 3),
    ("sabotage", {"role": "supply", "fault": "overflow"}, True, 3),
    ("sabotage", {"role": "supply", "fault": "nan"}, True, 3),
    ("sabotage", {"role": "actuator", "fault": "overflow"}, False, 3),
    ("sabotage", {"role": "actuator", "fault": "reset"}, False, 3),
    ("sabotage", {"role": "counter", "fault": "interrupt"}, False, 4),
    ("sabotage", {"role": "actuator", "fault": "interrupt"}, False, 4),
    ("raises", {}, False, 3),
    ("returns", {"value": "maybe"}, False, 3),
    ("interrupted", {}, False, 4),
]


@pytest.mark.parametrize(("function", "parameters", "first", "exit_code"), CASES,
                         ids=[f"{f}-{'-'.join(p.values())}" for f, p, _, _ in CASES])
def test_knobline_test_exits_3_or_4_and_stores_no_pass_when_a_run_ends_early(tmp_path, function, parameters,
                                                                          first, exit_code) -> None:
    sequence = sequence_with(tmp_path, f"tests.runner.custom_steps:{function}", parameters, first=first)
    db = tmp_path / "results.sqlite"
    result = CliRunner().invoke(main, ["test", str(sequence), "--serial", "PW22-000600", "--db", str(db),
                                       "--operator", "t", "--json"], catch_exceptions=False)
    assert result.exit_code == exit_code, result.stderr
    data = json.loads(result.stdout)
    expected = {3: "station-fault", 4: "aborted"}[exit_code]
    assert data["verdict"] == expected
    with open_store(str(db)) as store:
        run = store.run(data["run_id"])
        assert run.summary.verdict == expected
        assert run.steps[-1].verdict == expected and "pass" not in {s.verdict for s in run.steps[2:]}


def test_the_operator_sees_a_station_fault_apart_from_a_unit_fail_and_what_to_do(tmp_path) -> None:
    sequence = sequence_with(tmp_path, "tests.runner.custom_steps:sabotage", {"role": "counter", "fault": "nan"},
                             first=False)
    result = CliRunner().invoke(main, ["test", str(sequence), "--serial", "PW22-000601", "--db",
                                       str(tmp_path / "r.sqlite"), "--operator", "t"], catch_exceptions=False)
    assert result.exit_code == 3
    assert "STATION FAULT (not the unit's fault)" in result.stderr
    assert "the unit was NOT judged" in result.stdout and "test this unit again" in result.stdout
    assert "!!!!" in result.stdout and "====" not in result.stdout


def test_demo_counts_a_unit_the_station_could_not_judge_apart_and_never_as_pass(tmp_path, monkeypatch) -> None:
    import math

    import fixture.commands.demo as demo_command

    real_run_unit = demo_command.run_unit
    victim = {}

    def run_unit(plan, sequence, station, store, *, serial, **kwargs):
        victim.setdefault("serial", serial)  # the batch's first unit meets a counter answering NaN
        if serial != victim["serial"]:
            return real_run_unit(plan, sequence, station, store, serial=serial, **kwargs)
        counter = station.driver("counter")
        counter.read = lambda: math.nan  # an instance attribute shadows the driver's method for this unit
        try:
            return real_run_unit(plan, sequence, station, store, serial=serial, **kwargs)
        finally:
            del counter.read

    monkeypatch.setattr(demo_command, "run_unit", run_unit)
    result = CliRunner().invoke(main, ["demo", "--units", "4", "--seed", "5", "--out", str(tmp_path),
                                       "--no-reports", "--json"], catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["verdicts"]["station-fault"] == 1
    assert data["not_judged"] == [victim["serial"]]
    assert {r["serial"]: r["verdict"] for r in data["runs"]}[victim["serial"]] == "station-fault"
    assert data["first_pass_yield"] == data["verdicts"]["pass"] / 4 and data["verdicts"]["pass"] <= 3


def test_a_software_fault_leaves_its_traceback_in_the_log_and_the_operator_is_told_where(tmp_path, monkeypatch):
    log = tmp_path / "station.log"
    monkeypatch.setenv("KNOBLINE_LOG", str(log))
    sequence = sequence_with(tmp_path, "tests.runner.custom_steps:raises", {}, first=False)
    result = CliRunner().invoke(main, ["test", str(sequence), "--serial", "PW22-000602", "--db",
                                       str(tmp_path / "r.sqlite"), "--operator", "t"], catch_exceptions=False)
    assert result.exit_code == 3
    assert f"details for the test engineer: {log.resolve()}" in result.stderr
    text = log.read_text(encoding="utf-8")
    assert "Traceback (most recent call last)" in text
    assert "ValueError: could not convert string to float: '4.7.1'" in text


def test_an_instrument_fault_is_written_to_the_log_with_its_run_and_step(tmp_path, monkeypatch):
    log = tmp_path / "station.log"
    monkeypatch.setenv("KNOBLINE_LOG", str(log))
    sequence = sequence_with(tmp_path, "tests.runner.custom_steps:sabotage", {"role": "counter", "fault": "nan"},
                             first=False)
    result = CliRunner().invoke(main, ["test", str(sequence), "--serial", "PW22-000603", "--db",
                                       str(tmp_path / "r.sqlite"), "--operator", "t"], catch_exceptions=False)
    assert result.exit_code == 3
    text = log.read_text(encoding="utf-8")
    assert "(PW22-000603) step 3 'frequency at knob A stops': station fault: counter: reading nan" in text


def test_a_custom_step_that_calls_sys_exit_0_ends_the_run_station_fault_and_knobline_test_exits_3(tmp_path):
    # exit 0 means "the unit passed" to whatever drives the line; a custom step ending the process must
    # not say that (README "Exit codes"; the project's fail-safe rule, no source)
    sequence = sequence_with(tmp_path, "tests.runner.custom_steps:exits", {"code": "0"}, first=False)
    db = tmp_path / "results.sqlite"
    result = CliRunner().invoke(main, ["test", str(sequence), "--serial", "PW22-000604", "--db", str(db),
                                       "--operator", "t", "--json"], catch_exceptions=False)
    assert result.exit_code == 3, result.stderr
    data = json.loads(result.stdout)
    assert data["verdict"] == "station-fault"
    with open_store(str(db)) as store:
        run = store.run(data["run_id"])
        assert run.summary.verdict == "station-fault"
        assert "SystemExit" in run.steps[-1].message


def test_sigterm_mid_run_ends_the_run_station_fault_switches_the_supply_off_and_exits_3(tmp_path):
    # A supervisor's SIGTERM is not the operator's Ctrl-C: the run ended early, so station-fault, exit 3
    # (README "Verdicts", "Exit codes"); the process must not die leaving the run running and the unit powered.
    import subprocess
    import sys

    sequence = sequence_with(tmp_path, "tests.runner.custom_steps:terminated", {"seconds": "30"}, first=False)
    db = tmp_path / "results.sqlite"
    code = ("import sys; import fixture.instruments.supply as s; real = s.Supply.output\n"
            "def output(self, on):\n    real(self, on); print('supply output', on, file=sys.stderr, flush=True)\n"
            "s.Supply.output = output\n"
            "from fixture.cli import main; main()")
    result = subprocess.run([sys.executable, "-c", code, "test", str(sequence), "--serial", "PW22-000605",
                             "--db", str(db), "--operator", "t", "--json"], capture_output=True, text=True,
                            timeout=120, cwd=ROOT)
    assert result.returncode == 3, result.stderr
    assert result.stderr.rstrip().count("supply output False") >= 1
    assert result.stderr.index("supply output True") < result.stderr.rindex("supply output False")
    with open_store(str(db)) as store:
        (summary,) = store.runs(limit=5)
        run = store.run(summary.run_id)
        assert run.summary.verdict == "station-fault"
        assert "pass" not in {s.verdict for s in run.steps[1:]}
        assert "SIGTERM" in run.steps[-1].message


def test_ctrl_c_at_a_manual_knob_prompt_ends_the_run_aborted_with_exit_4(tmp_path):
    # README "Verdicts": aborted = the operator pressed Ctrl-C; "Exit codes": 4. click turns Ctrl-C at a
    # prompt into its Abort exception, which must not pass for a software fault (station-fault, exit 3).
    import signal
    import subprocess
    import sys

    text = (ROOT / "sequences/demo-station.toml").read_text(encoding="utf-8")
    head, rest = text.split("[instruments.actuator]\n", 1)
    station = tmp_path / "manual-station.toml"
    station.write_text(head + '[instruments.actuator]\nkind = "manual"\n\n' + rest[rest.index("[instruments.actuator.knob_a]"):],
                       encoding="utf-8")
    db = tmp_path / "results.sqlite"
    proc = subprocess.Popen([sys.executable, "-m", "fixture.cli", "test", "--station", str(station), "--serial",
                             "PW22-000606", *LOT_OPTIONS, "--db", str(db), "--operator", "t", "--json"], cwd=ROOT,
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        seen = ""
        while "then confirm." not in seen:  # the first knob prompt: the power-up has passed
            char = proc.stderr.read(1)
            assert char, seen
            seen += char
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert proc.returncode == 4, err
    assert json.loads(out)["verdict"] == "aborted"
    with open_store(str(db)) as store:
        (summary,) = store.runs(limit=5)
        run = store.run(summary.run_id)
        assert run.summary.verdict == "aborted"
        assert run.steps[-1].verdict == "aborted" and "software fault" not in run.steps[-1].message


@pytest.mark.parametrize("command", [["measure", "--knob-a", "50", "--knob-b", "50"], ["station", "--self-check"]],
                         ids=["measure", "self-check"])
def test_sigterm_while_the_unit_is_powered_switches_the_supply_off_and_exits_3(tmp_path, command):
    # Same rule as a run's (README "Exit codes": 3 for a station stopped early): a supervisor's SIGTERM
    # while the supply is on must not leave the unit powered.
    import subprocess
    import sys

    code = ("import os, signal, sys; import fixture.instruments.supply as s; real = s.Supply.output\n"
            "def output(self, on):\n    real(self, on); print('supply output', on, file=sys.stderr, flush=True)\n"
            "    if on: os.kill(os.getpid(), signal.SIGTERM)\n"
            "s.Supply.output = output\n"
            "from fixture.cli import main; main()")
    result = subprocess.run([sys.executable, "-c", code, *command, "--db", str(tmp_path / "r.sqlite")],
                            capture_output=True, text=True, timeout=120, cwd=ROOT)
    assert result.returncode == 3, result.stderr
    assert "stopped by SIGTERM" in result.stderr
    assert result.stderr.index("supply output True") < result.stderr.rindex("supply output False")
