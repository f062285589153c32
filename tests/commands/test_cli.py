"""The knobline command line: output, JSON, exit codes, no tracebacks for user mistakes."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

from fixture.cli import main
from fixture.files.design_file import load_design
from tests.demo_lots import LOT_OPTIONS

DEMO = Path("sequences/demo-panel.toml")


@pytest.fixture()
def run():
    runner = CliRunner()

    def invoke(*args: str):
        return runner.invoke(main, list(args), catch_exceptions=False)

    return invoke


CAUTION = "does not verify electrical safety or isolation"


def test_a_command_that_powers_a_unit_states_the_safety_caution_once_as_it_starts(run, tmp_path, monkeypatch) -> None:
    # Common practice, no source: the caution stands where a unit is powered, once, on stderr.
    monkeypatch.setenv("KNOBLINE_DB", str(tmp_path / "r.sqlite"))
    result = run("measure", "--knob-a", "20", "--knob-b", "30")
    assert result.exit_code == 0, result.stderr
    assert result.stderr.count(CAUTION) == 1
    assert "hipot" in result.stderr and "leakage" in result.stderr
    assert CAUTION not in result.stdout


@pytest.mark.parametrize("args", [("info",), ("check",), ("verify", "--help"), ("measure", "--help"),
                                  ("test", "--help"), ("demo", "--help")])
def test_a_command_that_powers_no_unit_prints_no_safety_banner(run, args) -> None:
    result = run(*args)
    assert result.exit_code == 0, result.stderr
    assert CAUTION not in result.stderr


def test_the_top_level_help_states_the_safety_caution(run) -> None:
    result = run("--help")
    assert result.exit_code == 0
    assert CAUTION in " ".join(result.stdout.split())


@pytest.mark.parametrize(("args", "says"), [
    (("limits", "--frob"), "No such option '--frob'"),           # unknown option
    (("unit",), "Missing argument 'SERIAL'"),                    # missing argument
    (("limits", "--method", "nope"), "'nope' is not one of"),    # bad choice
    (("--frob",), "No such option '--frob'"),                    # unknown option of knobline itself
    (("verifyy",), "No such command 'verifyy'"),                 # unknown command
])
def test_a_usage_error_is_one_knobline_error_line_with_exit_2(run, args, says) -> None:
    # click's own text for each (click.exceptions), in knobline's one-line form; exit 2 as click's usage errors.
    result = run(*args)
    assert result.exit_code == 2
    assert result.stdout == ""
    lines = result.stderr.splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("knobline: error: ") and says in lines[0]
    assert "Usage:" not in result.stderr and "Try " not in result.stderr


def test_a_simulated_resource_the_bench_lacks_is_one_error_line_naming_the_key_and_no_warning(run, tmp_path) -> None:
    # pyvisa-sim opens any resource and reads '' with a UserWarning (pyvisa messagebased.read); a real
    # VISA library refuses an unknown resource (VI_ERROR_RSRC_NFOUND, VPP-4.3). knobline refuses it too.
    station = tmp_path / "station.toml"
    station.write_text(Path("sequences/demo-station.toml").read_text(encoding="utf-8").replace(
        "TCPIP0::sim-counter::inst0::INSTR", "TCPIP0::nowhere::inst0::INSTR"), encoding="utf-8")
    result = run("station", str(station))
    assert result.exit_code == 2
    assert result.stderr.splitlines() == [
        f"knobline: error: {station}: instruments.counter.resource: expected one of the simulated bench's resources "
        "(TCPIP0::sim-counter::inst0::INSTR, TCPIP0::sim-scope::inst0::INSTR, TCPIP0::sim-supply::inst0::INSTR, "
        "TCPIP0::sim-actuator::inst0::INSTR), found 'TCPIP0::nowhere::inst0::INSTR'"]


@pytest.mark.filterwarnings("default::UserWarning")  # shown, not raised: what a user's interpreter does
def test_a_python_warning_goes_to_the_log_file_not_the_terminal(run, monkeypatch, _own_log_file) -> None:
    import warnings

    import fixture.commands.info as info_module

    def warning_version(dist: str) -> str:
        warnings.warn("read string doesn't end with termination characters", UserWarning, stacklevel=1)
        return "1.0"

    monkeypatch.setattr(info_module, "_version", warning_version)
    shown = warnings.showwarning
    result = run("info")
    assert result.exit_code == 0, result.stderr
    assert "UserWarning" not in result.stderr + result.stdout
    assert "termination characters" in _own_log_file.read_text(encoding="utf-8")
    assert warnings.showwarning is shown  # the display is the caller's again afterwards


def test_limits_json_has_a_row_per_stop_and_quantity_with_nominal_low_high(run) -> None:
    result = run("limits", "--method", "rss", "--samples", "2000", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    design = load_design(DEMO)
    expected_rows = 2 * len(design.knobs["a"].stops_pct) + len(design.knobs["b"].stops_pct)
    assert len(data["rows"]) == expected_rows
    for row in data["rows"]:
        assert row["low"] < row["nominal"] < row["high"]
        assert row["quantity"] in ("frequency_hz", "period_s", "duty_pct")
    assert data["design"]["sha256"] == design.content_sha256
    assert data["monte_carlo"]["samples"] == 2000


def test_limits_help_spells_out_the_json_keys(run) -> None:
    result = run("limits", "--help")
    for key in ("nominal", "low", "high", "tolerance_low", "predicted_yield", "contributors",
                "predicted_first_pass_yield", "joint_first_pass_yield", "false_reject_share"):
        assert key in result.stdout


def test_limits_predict_first_pass_yield_against_the_acceptance_limits_per_row_and_jointly(run) -> None:
    result = run("limits", "--samples", "2000", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    for row in data["rows"]:
        first_pass = row["predicted_first_pass_yield"]
        assert set(first_pass) == {"fraction", "ci95_low", "ci95_high", "passed", "simulated", "false_reject_share",
                                   "false_accept_share"}
        assert first_pass["simulated"] == 2000
        # (the Wilson bound at 100 % comes out a rounding error below 1)
        assert first_pass["ci95_low"] <= first_pass["fraction"] <= first_pass["ci95_high"] + 1e-12
        if row["predicted_yield"] is not None:  # guarded acceptance (w = U >= 0) costs, never gains, here
            assert first_pass["fraction"] <= row["predicted_yield"]["fraction"]
    joint = data["joint_first_pass_yield"]
    assert joint["simulated"] == 2000 and joint["fraction"] <= data["joint_spec_yield"]["fraction"]
    text = run("limits", "--samples", "2000").stdout
    assert "pred. first pass" in text and "predicted first-pass yield, every reading inside" in text


def test_predict_prints_the_models_nominal_signal(run) -> None:
    result = run("predict", "--knob-a", "25", "--knob-b", "90", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    design = load_design(DEMO)
    signal = design.signal(design.nominal_values(), 25, 90)
    assert data["period_s"] == pytest.approx(float(signal.period_s))
    assert data["duty_pct"] == pytest.approx(100 * float(signal.duty))


def test_knob_position_outside_the_rotation_is_a_usage_error(run) -> None:
    result = run("predict", "--knob-a", "120", "--knob-b", "50")
    assert result.exit_code == 2
    assert "expected 0..100 % of rotation, found 120" in result.stderr


def test_bad_design_file_exits_2_with_one_line_and_no_traceback(run, tmp_path: Path) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text(DEMO.read_text(encoding="utf-8").replace('value = "22k"', 'value = "-22k"'), encoding="utf-8")
    result = run("limits", str(bad))
    assert result.exit_code == 2
    errors = [ln for ln in result.stderr.splitlines() if ln.startswith("knobline: error:")]
    assert errors == [f"knobline: error: {bad}: parts.r_schmitt_fb.value: expected a value above zero, "
                      "found '-22k'"]
    assert "Traceback" not in result.stderr + result.stdout


def test_check_accepts_the_demo_design(run) -> None:
    result = run("check", "--json")
    assert result.exit_code == 0
    assert json.loads(result.stdout)["model"] == "integrator-schmitt"


def test_plot_writes_an_svg(run, tmp_path: Path) -> None:
    out = tmp_path / "limits.svg"
    result = run("limits", "--method", "rss", "--samples", "500", "--plot", str(out))
    assert result.exit_code == 0, result.stderr
    assert out.read_text(encoding="utf-8").lstrip().startswith(("<?xml", "<svg"))


def test_plot_refuses_a_non_svg_name(run, tmp_path: Path) -> None:
    result = run("limits", "--method", "rss", "--samples", "500", "--plot", str(tmp_path / "x.png"))
    assert result.exit_code == 2
    assert "expected a file name ending in .svg" in result.stderr


def test_installed_command_reports_bad_input_without_a_traceback(tmp_path: Path) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text("[product\n", encoding="utf-8")
    proc = subprocess.run([sys.executable, "-m", "fixture.cli", "check", str(bad)], capture_output=True,
                          text=True, timeout=60)
    assert proc.returncode == 2
    assert "expected valid TOML" in proc.stderr
    assert "Traceback" not in proc.stderr


def test_decode_recommends_a_scheme_per_knob_with_its_worst_error(run) -> None:
    result = run("decode", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    for knob in ("a", "b"):
        schemes = data["knobs"][knob]["schemes"]
        best = min(schemes, key=lambda s: s["max_abs_error_pct"])
        assert data["knobs"][knob]["recommend"] == best["name"]


def test_limits_carry_uncertainty_tur_and_acceptance_limits_with_the_rule_sentence(run) -> None:
    result = run("limits", "--method", "rss", "--samples", "1000", "--json")
    data = json.loads(result.stdout)
    assert "ILAC-G8" in data["decision_rule"]
    for row in data["rows"]:
        m = row["measurement"]
        assert m["expanded_uncertainty"] > 0 and m["tur"] > 0
        assert row["tolerance_low"] < m["acceptance_low"] < m["acceptance_high"] < row["tolerance_high"]


def test_rule_override_simple_accepts_up_to_the_tolerance_limits(run) -> None:
    result = run("limits", "--method", "rss", "--samples", "1000", "--rule", "simple", "--json")
    row = json.loads(result.stdout)["rows"][0]
    assert row["measurement"]["acceptance_low"] == row["tolerance_low"]


def test_gate_time_override_needs_a_counter_station(run, tmp_path: Path) -> None:
    station = tmp_path / "scope.toml"
    station.write_text(Path("sequences/demo-station.toml").read_text(encoding="utf-8").replace(
        'instrument = "counter"', 'instrument = "scope"'), encoding="utf-8")
    result = run("limits", "--station", str(station), "--gate-time", "0.1")
    assert result.exit_code == 2
    assert "--gate-time: expected a counter station, found a scope station" in result.stderr


def test_plot_to_an_unwritable_place_is_a_usage_error(run, tmp_path: Path) -> None:
    result = run("limits", "--method", "rss", "--samples", "500", "--plot", str(tmp_path / "no" / "dir.svg"))
    assert result.exit_code == 2
    assert "--plot: expected a writable file" in result.stderr


def test_station_identifies_every_instrument_of_the_simulated_bench(run) -> None:
    result = run("station", "--on", "2026-12-02", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["simulated"] is True
    assert data["instruments"]["counter"]["identity"]["model"] == "YQ-C83"


def test_station_with_an_expired_instrument_is_a_station_fault(run) -> None:
    result = run("station", "--on", "2028-03-15")
    assert result.exit_code == 3
    assert "knobline: station fault: scope" in result.stderr and "VLQ-26-03981" in result.stderr


def test_measure_on_the_simulated_bench_reads_the_simulated_units_own_signal(run, tmp_path: Path) -> None:
    from fixture.sim.dut import build_unit

    result = run("measure", "--knob-a", "25", "--knob-b", "90", "--serial", "T-1", "--seed", "4", "--json",
                 "--db", str(tmp_path / "r.sqlite"))
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    truth = build_unit(load_design(DEMO), "T-1", seed=4).wave(25.0, 90.0)
    assert data["frequency_hz"] == pytest.approx(1 / truth.period_s, rel=1e-4)
    assert data["duty_pct"] == pytest.approx(100 * truth.duty, abs=0.1)
    assert data["simulated_unit"] == {"serial": "T-1", "seed": 4}


def test_measure_refuses_a_station_another_process_holds_and_leaves_its_run_alone(run, tmp_path: Path) -> None:
    # A spot reading powers the unit, moves the knobs and reconfigures the counter: on a station with a
    # live run it would change that run's readings (README "One process per station"; common practice).
    from fixture.runner.ownership import hold_station
    from fixture.store import open_store

    db = str(tmp_path / "r.sqlite")
    with open_store(db) as store, hold_station(store, "PW-22 end-of-line bench 2"):
        result = run("measure", "--db", db, "--json")
        assert result.exit_code == 3, result.stderr
        assert "station 'PW-22 end-of-line bench 2' is in use by process" in result.stderr
        assert result.stdout == ""
    assert run("measure", "--db", db, "--json").exit_code == 0  # released: free again


def test_test_command_exit_codes_follow_the_verdict(run, tmp_path: Path) -> None:
    db = str(tmp_path / "r.sqlite")
    good = run("test", "--serial", "PW22-000001", *LOT_OPTIONS, "--db", db, "--operator", "t", "--json")
    assert good.exit_code == 0, good.stderr
    data = json.loads(good.stdout)
    assert data["verdict"] == "pass" and len(data["steps"]) == 5
    bad_serial = run("test", "--serial", "XX-1", "--db", db)
    assert bad_serial.exit_code == 2
    assert "serial: expected the pattern PW22-[0-9]{6}" in bad_serial.stderr


def test_test_command_refuses_a_malformed_lot(run, tmp_path: Path) -> None:
    result = run("test", "--serial", "PW22-000001", "--lot", "c_integrator", "--db", str(tmp_path / "r.sqlite"))
    assert result.exit_code == 2
    assert "--lot: expected PART=LOT" in result.stderr


@pytest.mark.parametrize("command", [
    ("limits", "--method", "monte-carlo", "--samples", "100"),
    ("decode", "--samples", "3"),
    ("measure",),
    ("test", "--serial", "PW22-000001"),
    ("demo", "--units", "1", "--no-reports"),
])
def test_a_negative_seed_is_bad_input_not_an_internal_error(run, command, tmp_path, monkeypatch) -> None:
    # numpy's generators take only non-negative seeds (numpy.random.SeedSequence docs); a negative
    # one must be refused as usage (exit 2) before anything is simulated, never reach numpy.
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("KNOBLINE_DB", str(tmp_path / "r.sqlite"))
    result = run(*command, "--seed", "-1")
    assert result.exit_code == 2, result.output
    assert "--seed" in result.stderr and "internal error" not in result.stderr


def test_measure_refuses_a_serial_with_a_nul_or_control_character(run) -> None:
    # U+0000 NUL and U+001B ESCAPE are C0 control characters (ECMA-48), never part of a serial; the
    # simulated unit's serial is text like test's --serial and is refused (exit 2), not measured.
    for serial in ("SIM\x00001", "SIM\x1b[2J"):
        result = run("measure", "--serial", serial)
        assert result.exit_code == 2, result.output
        assert "--serial" in result.stderr


def test_a_count_of_one_takes_the_singular_noun(run) -> None:
    # English grammar (common practice, no source): "1 simulated unit", never "1 simulated units".
    one = run("decode", "--samples", "1")
    assert one.exit_code == 0, one.stderr
    assert "1 simulated unit," in one.stdout
    two = run("decode", "--samples", "2")
    assert "2 simulated units," in two.stdout


def test_limits_notes_name_the_quantity_in_words_not_its_key() -> None:
    # The RSS band of the demo's knob A 0 % frequency is capped at the worst case, which adds a note
    # (tests/model/test_limit_caps.py); a person reads "Frequency at A 0 %", never "frequency_hz".
    result = CliRunner().invoke(main, ["limits", "--method", "rss"])
    assert result.exit_code == 0, result.stderr
    notes = [ln for ln in result.stdout.splitlines() if "capped at worst case" in ln]
    assert notes and all("_hz" not in ln and "_pct" not in ln for ln in notes)
    assert any("Frequency at A 0 %" in ln for ln in notes)
