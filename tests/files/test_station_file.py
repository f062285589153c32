"""Reading station files: instrument accuracy, measurement settings, decision rule."""

from __future__ import annotations

from pathlib import Path

import pytest

from fixture.files.station_file import load_station
from tests.files.edits import edited_copy
from tests.files.edits import only_problem as one_line

DEMO = Path("sequences/demo-station.toml")


def variant(tmp_path: Path, old: str, new: str) -> Path:
    return edited_copy(DEMO, tmp_path, old, new)


def only_problem(path: Path) -> str:
    return one_line(load_station, path)


def test_demo_station_reads_counter_figures_in_si_units() -> None:
    setup = load_station(DEMO)
    assert setup.instrument == "counter"
    assert setup.counter is not None
    assert setup.counter.timebase_error == pytest.approx(1e-6)
    assert setup.counter.resolution_s == pytest.approx(250e-12)
    assert setup.counter.trigger_level_error_v == pytest.approx(15e-3)
    assert setup.overhead_s == pytest.approx(20e-3)
    assert setup.rule.kind == "guarded" and setup.rule.guard_multiple == 1.0
    assert setup.gate_time_s is None  # the shortest gate reaching the target is chosen


def test_scope_station_reads_the_sample_rate(tmp_path: Path) -> None:
    setup = load_station(variant(tmp_path, 'instrument = "counter"', 'instrument = "scope"'))
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
