"""Reading station files: instrument accuracy, measurement settings, decision rule."""

from __future__ import annotations

from pathlib import Path

import datetime

import pytest

from fixture.errors import CalibrationExpired
from fixture.files.station_file import load_station
from tests.files.edits import edited_copy
from tests.files.edits import only_problem as one_line

DEMO = Path("sequences/demo-station.toml")


def variant(tmp_path: Path, old: str, new: str) -> Path:
    return edited_copy(DEMO, tmp_path, old, new)


def only_problem(path: Path) -> str:
    return one_line(load_station, path)


def test_demo_station_reads_counter_figures_in_si_units() -> None:
    setup = load_station(DEMO).measurement
    assert setup.instrument == "counter"
    assert setup.counter is not None
    assert setup.counter.timebase_error == pytest.approx(1e-6)
    assert setup.counter.resolution_s == pytest.approx(250e-12)
    assert setup.counter.trigger_level_error_v == pytest.approx(15e-3)
    assert setup.overhead_s == pytest.approx(20e-3)
    assert setup.rule.kind == "guarded" and setup.rule.guard_multiple == 1.0
    assert setup.gate_time_s is None  # the shortest gate reaching the target is chosen


def test_scope_station_reads_the_sample_rate(tmp_path: Path) -> None:
    setup = load_station(variant(tmp_path, 'instrument = "counter"', 'instrument = "scope"')).measurement
    assert setup.instrument == "scope" and setup.scope is not None
    assert setup.scope_sample_rate_hz == pytest.approx(10e6)
    assert setup.scope.vertical_resolution_v == pytest.approx(62.5e-3)


def test_unknown_key_is_one_line(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, "target_tur = 4", "target_tir = 4"))
    assert "measurement.target_tir: expected one of the keys" in line


def test_missing_datasheet_figure_is_named(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'resolution = "250 ps"', ""))
    assert "instruments.counter.accuracy.resolution: expected the datasheet figure, found nothing" in line


def test_unknown_decision_rule_lists_the_choices(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'decision_rule = "guarded"', 'decision_rule = "lenient"'))
    assert "measurement.decision_rule: expected one of simple, guarded, guarded-rejection, found 'lenient'" in line


def test_value_in_the_wrong_unit_is_refused(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'overhead = "20 ms"', 'overhead = "20 mV"'))
    assert "measurement.overhead: expected a value in s" in line


def test_demo_station_maps_every_role_to_a_resource_and_profile() -> None:
    config = load_station(DEMO)
    assert set(config.instruments) == {"counter", "scope", "supply", "actuator"}
    for entry in config.instruments.values():
        assert entry.resource and entry.profile and entry.simulated
    assert config.instruments["counter"].calibration.due == datetime.date(2028, 4, 30)
    assert config.instruments["actuator"].options["knob_a_travel_deg"] == 270.0


def test_testing_with_an_expired_instrument_is_refused(tmp_path: Path) -> None:
    config = load_station(DEMO)
    with pytest.raises(CalibrationExpired, match="VLQ-26-03981 was due 2028-02-28"):
        config.require_calibrated(datetime.date(2028, 3, 1))
    assert config.require_calibrated(datetime.date(2028, 2, 28)) == []  # due day itself is still in


def test_an_allowed_expired_instrument_is_returned_for_the_record(tmp_path: Path) -> None:
    config = load_station(variant(tmp_path, "allow_expired_calibration = false", "allow_expired_calibration = true"))
    expired = config.require_calibrated(datetime.date(2028, 5, 1))
    assert sorted(s.role for s in expired) == ["counter", "scope", "supply"]
    assert all(s.allowed for s in expired)


def test_due_date_must_be_a_toml_date(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, "due = 2028-04-30\nlab", 'due = "next spring"\nlab'))
    assert "instruments.counter.calibration.due: expected a TOML date such as 2027-03-31" in line


def test_a_visa_instrument_needs_a_resource(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'resource = "TCPIP0::sim-supply::inst0::INSTR"\n', ""))
    assert "instruments.supply.resource: expected a non-empty string, found nothing" in line


def test_a_manual_actuator_needs_no_resource(tmp_path: Path) -> None:
    path = variant(tmp_path, 'kind = "motorized"', 'kind = "manual"')
    text = path.read_text(encoding="utf-8").replace('resource = "TCPIP0::sim-actuator::inst0::INSTR"\n', "")
    path.write_text(text, encoding="utf-8")
    entry = load_station(path).instruments["actuator"]
    assert entry.backend == "manual" and entry.resource == ""


@pytest.mark.parametrize("value", ["-5", "1e30", "nan"])
def test_a_nonsense_record_length_is_refused_on_a_counter_station_too(tmp_path: Path, value: str) -> None:
    # A record is a whole number of samples, at least 2 (common practice, no source). The key is the
    # scope's, but a counter station that writes it with a nonsense value must be told, not ignored:
    # the day the bench switches to its scope, the value would suddenly count.
    line = only_problem(variant(tmp_path, "target_tur = 4", f"target_tur = 4\nrecord_length = {value}"))
    assert "measurement.record_length" in line and "whole number of samples" in line


def test_a_calibration_due_with_a_time_is_named_as_a_date_and_time_not_a_python_repr(tmp_path: Path) -> None:
    # TOML 1.0 "Local Date-Time" (toml.io): 2027-04-30T10:00:00 is a date and a time, not a date.
    line = only_problem(variant(tmp_path, "due = 2028-04-30\nlab", "due = 2027-04-30T10:00:00\nlab"))
    assert "calibration.due" in line and "2027-04-30 10:00:00" in line and "datetime" not in line


def test_an_expired_instrument_the_work_does_not_use_does_not_stop_it(tmp_path: Path) -> None:
    # Demo station: scope due 2028-02-28, counter and supply 2028-04-30. A sequence reading with the
    # counter only does not measure with the scope, so the scope's calibration cannot bear on a verdict.
    config = load_station(DEMO)
    uses = ("counter", "supply", "actuator")
    (scope,) = config.require_calibrated(datetime.date(2028, 3, 1), uses)
    assert (scope.role, scope.used, scope.due) == ("scope", False, datetime.date(2028, 2, 28))
    assert "VLQ-26-03981 was due 2028-02-28" in scope.unused_warning and "does not use it" in scope.unused_warning
    # ... while an expired instrument it uses still refuses, naming only what stops it
    with pytest.raises(CalibrationExpired) as info:
        config.require_calibrated(datetime.date(2028, 5, 1), uses)
    assert "counter" in info.value.message and "supply" in info.value.message
    assert "scope" not in info.value.message
    # without a sequence (knobline station) every instrument counts, as before
    with pytest.raises(CalibrationExpired, match="VLQ-26-03981"):
        config.require_calibrated(datetime.date(2028, 3, 1))


def test_a_station_served_by_the_bench_server_says_so_and_may_name_only_sockets_on_this_computer(tmp_path) -> None:
    # Sim-only commands and planted defects must never reach a real instrument (fail safe, common practice).
    from fixture.files.toml_reader import FileProblems
    from fixture.runner.station import is_simulated

    shipped = Path(__file__).resolve().parents[2] / "sequences" / "demo-station-tcp.toml"
    config = load_station(shipped)
    assert config.served_simulation and is_simulated(config)
    moved = tmp_path / "lan.toml"
    moved.write_text(shipped.read_text().replace("127.0.0.1::5027", "192.168.1.20::5025"))
    with pytest.raises(FileProblems, match=r"instruments\.supply\.resource: expected with \[station\] simulated"):
        load_station(moved)
    real = tmp_path / "real.toml"
    real.write_text(moved.read_text().replace("simulated = true", "simulated = false"))
    assert not is_simulated(load_station(real))
