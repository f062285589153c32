"""Reading sequence files: every mistake is one line naming the file, the step and the key."""

from __future__ import annotations

import dataclasses
import hashlib
from pathlib import Path
from typing import Any

import pytest

from fixture.files.sequence_file import load_sequence
from fixture.files.step_specs import (
    CustomStep,
    DecoderCalibrationStep,
    KnobMatrixStep,
    PowerUpStep,
)
from fixture.files.station_file import load_station
from fixture.files.toml_reader import FileProblems
from tests.files.edits import edited_copy
from tests.files.edits import only_problem as one_line

DEMO = Path("sequences/demo-sequence.toml")
SHIPPED = (Path("sequences"),)
STATION = load_station("sequences/demo-station.toml")


def example_custom_step(context: Any, parameters: dict[str, Any]) -> None:
    """Importable target for the custom-step tests."""


def load(path: Path) -> Any:
    return load_sequence(path, station=STATION, search_dirs=SHIPPED)


def variant(tmp_path: Path, old: str, new: str) -> Path:
    return edited_copy(DEMO, tmp_path, old, new)


def only_problem(path: Path) -> str:
    return one_line(load, path)


def test_demo_sequence_loads_with_its_design_and_steps() -> None:
    sequence = load(DEMO)
    assert sequence.design.name == "PW-22 dual-knob setpoint panel"
    assert [type(s) for s in sequence.steps][:2] == [PowerUpStep, KnobMatrixStep]
    assert isinstance(sequence.steps[-1], DecoderCalibrationStep)
    power = sequence.steps[0]
    assert isinstance(power, PowerUpStep)
    assert (power.supply_v, power.current_limit_a, power.current_low_a) == pytest.approx((12.0, 0.1, 0.002))
    assert sequence.steps[1].measuring.gate_time_s == pytest.approx(0.1)
    assert all(s.station_fault_retries == 2 for s in sequence.steps)
    assert sequence.roles() == ("counter", "supply", "actuator")


def test_content_hashes_are_sha256_of_the_file_bytes() -> None:
    # FIPS 180-4 SHA-256 as implemented by hashlib: the hash must be of the bytes, not the parsed TOML.
    sequence = load(DEMO)
    assert sequence.content_sha256 == hashlib.sha256(DEMO.read_bytes()).hexdigest()
    assert sequence.design.content_sha256 == hashlib.sha256(Path("sequences/demo-panel.toml").read_bytes()
                                                           ).hexdigest()


def test_serial_pattern_must_match_the_whole_serial() -> None:
    sequence = load(DEMO)
    assert sequence.serial_ok("PW22-000123")
    assert not sequence.serial_ok("PW22-000123x")
    assert not sequence.serial_ok("xPW22-000123")


def test_unknown_key_is_one_line(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'settle = "200 ms"', 'setle = "200 ms"'))
    assert line.startswith(f'{tmp_path / DEMO.name}: step 1 (power-up "power up").setle: '
                           "expected one of the keys")
    assert line.endswith("found an unknown key")


def test_unknown_step_kind_is_one_line(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'kind = "cross-talk"', 'kind = "crosstalk"'))
    assert 'step 4 (crosstalk "knobs independent").kind: expected one of power-up, knob-matrix, ' in line
    assert line.endswith("found 'crosstalk'")


def test_stop_outside_the_travel_is_one_line(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, "duty_over_knob_a = [0, 50, 100]", "duty_over_knob_a = [0, 50, 120]"))
    assert line.endswith('step 4 (cross-talk "knobs independent").duty_over_knob_a[2]: expected a knob '
                         "position between 0 and 100 % of rotation, found 120")


def test_bad_gate_time_is_one_line_naming_file_step_and_key(tmp_path: Path) -> None:
    path = variant(tmp_path, 'gate_time = "100 ms"', 'gate_time = "-1 s"')
    assert only_problem(path) == (f'{path}: step 2 (knob-matrix "frequency at knob A stops").gate_time: '
                                  "expected a gate time such as '100 ms', above 0 and at most 100 s, or 'shortest', "
                                  "found '-1 s'")


def test_a_counter_step_naming_no_gate_leaves_it_to_the_plan(tmp_path: Path) -> None:
    sequence = load(variant(tmp_path, 'gate_time = "100 ms"\n', ""))
    first = next(s.measuring for s in sequence.steps if hasattr(s, "measuring"))
    assert first.shortest_gate and first.gate_time_s is None and first.gate_cycles is None


def test_a_counter_step_naming_both_gates_is_one_line(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'gate_time = "100 ms"', 'gate_time = "100 ms"\ngate_cycles = 10'))
    assert line.endswith(".gate_time: expected at most one of gate_time and gate_cycles for the counter, found both")


def test_a_shortest_gate_leaves_the_gate_to_the_plan(tmp_path: Path) -> None:
    sequence = load(variant(tmp_path, 'gate_time = "100 ms"', 'gate_time = "shortest"'))
    first, *others = [s.measuring for s in sequence.steps if hasattr(s, "measuring")]  # the first step edited
    assert first.shortest_gate and first.gate_time_s is None and first.gate_cycles is None
    assert not any(m.shortest_gate for m in others) and others[0].gate_time_s == pytest.approx(0.1)


def test_unknown_quantity_is_one_line(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'measure = ["duty_pct"]', 'measure = ["duty_percent"]'))
    assert line.endswith('step 3 (knob-matrix "duty at knob B stops").measure[0]: expected one of '
                         "frequency_hz, period_s, duty_pct, found 'duty_percent'")


def test_role_the_station_cannot_provide_is_one_line(tmp_path: Path) -> None:
    no_scope = dataclasses.replace(STATION, instruments={k: v for k, v in STATION.instruments.items()
                                                         if k != "scope"})
    path = variant(tmp_path, 'requires = ["counter", "supply", "actuator"]', 'requires = ["scope", "supply"]')
    line = one_line(lambda p: load_sequence(p, station=no_scope, search_dirs=SHIPPED), path)
    assert line.endswith("sequence.requires[0]: expected a role station 'PW-22 end-of-line bench 2' provides "
                         "(counter, supply, actuator), found 'scope'")
    load_sequence(path, search_dirs=SHIPPED)  # without a station there is nothing to check it against


def test_step_on_an_instrument_the_station_does_not_measure_with_is_one_line(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'instrument = "counter"\ngate_time = "100 ms"',
                                'instrument = "scope"\nrecord_cycles = 12'))
    assert 'step 2 (knob-matrix "frequency at knob A stops").instrument: expected the instrument station ' in line
    assert line.endswith("found 'scope'")


def test_invalid_serial_pattern_is_one_line(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'serial_pattern = "PW22-[0-9]{6}"', 'serial_pattern = "PW22-[0-9"'))
    assert line.endswith("sequence.serial_pattern: expected a pattern from the safe subset (literals, classes, "
                         "groups, | and bounded quantifiers), found an unclosed character class at character 10 "
                         "of 'PW22-[0-9'")


CUSTOM = '\n[[steps]]\nkind = "custom"\nname = "firmware version"\ncall = "{call}"\n\n[steps.parameters]\nwant = "2.1"\n'


def with_custom_step(tmp_path: Path, call: str) -> Path:
    path = tmp_path / DEMO.name
    path.write_text(DEMO.read_text(encoding="utf-8") + CUSTOM.format(call=call), encoding="utf-8")
    return path


def test_custom_step_that_does_not_import_is_one_line(tmp_path: Path) -> None:
    path = with_custom_step(tmp_path, "no_such_knobline_plugin:check")
    line = only_problem(path)
    assert line.startswith(f'{path}: step 6 (custom "firmware version").call: expected an importable module, '
                           "found 'no_such_knobline_plugin:check' (ModuleNotFoundError")


def test_custom_step_names_an_attribute_that_is_not_callable(tmp_path: Path) -> None:
    path = with_custom_step(tmp_path, "tests.files.test_sequence_file:DEMO")
    assert "call: expected a callable in module tests.files.test_sequence_file, found" in only_problem(path)


def test_custom_step_keeps_its_target_and_parameters(tmp_path: Path) -> None:
    path = with_custom_step(tmp_path, "tests.files.test_sequence_file:example_custom_step")
    step = load(path).steps[-1]
    assert isinstance(step, CustomStep)
    assert step.call == "tests.files.test_sequence_file:example_custom_step"
    assert step.parameters == {"want": "2.1"}


def test_retries_are_bounded(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, "station_fault_retries = 2", "station_fault_retries = 50"))
    assert "retest.station_fault_retries: expected a whole number of retries 0..5, found 50" in line


def test_design_problems_come_with_the_design_file_name(tmp_path: Path) -> None:
    design = edited_copy(Path("sequences/demo-panel.toml"), tmp_path, 'value = "100n"', 'value = "100 nH"')
    path = variant(tmp_path, 'design = "demo-panel.toml"', f'design = "{design.name}"')
    line = only_problem(path)
    assert line.startswith(f"{design}: parts.c_integrator.value: expected")


def test_missing_design_is_named_at_its_key(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'design = "demo-panel.toml"', 'design = "no-such-panel"'))
    assert "sequence.design: expected an existing design file (looked in " in line
    assert line.endswith("found 'no-such-panel'")


def test_design_by_shipped_name_resolves() -> None:
    # demo-sequence names "demo-panel.toml"; the bare shipped name works the same way.
    assert load(DEMO).design.source.endswith("demo-panel.toml")


def test_every_problem_is_listed_at_once(tmp_path: Path) -> None:
    path = variant(tmp_path, 'serial_pattern = "PW22-[0-9]{6}"', 'serial_pattern = "("')
    text = path.read_text().replace('measure = ["duty_pct"]', 'measure = ["volts"]')
    path.write_text(text)
    with pytest.raises(FileProblems) as info:
        load(path)
    assert len(info.value.problems) == 2


def sequence_requiring(tmp_path: Path, value: str) -> Path:
    return variant(tmp_path, "requires = [", f"required_lots = {value}\nrequires = [")


def test_by_default_a_sequence_requires_the_lots_of_the_designs_lot_tracked_parts() -> None:
    sequence = load(DEMO)
    assert sequence.required_lots == sequence.design.lot_tracked_parts()
    assert "c_integrator" in sequence.required_lots and "supply_v" not in sequence.required_lots


def test_a_sequence_names_the_parts_whose_lots_it_requires_or_none(tmp_path: Path) -> None:
    assert load(sequence_requiring(tmp_path, '["knob_a_pot", "c_integrator"]')).required_lots == \
        ("knob_a_pot", "c_integrator")
    # supply_v is not lot-tracked in the demo design; a sequence may still require its lot
    assert load(sequence_requiring(tmp_path, '["supply_v"]')).required_lots == ("supply_v",)
    assert load(sequence_requiring(tmp_path, "[]")).required_lots == ()


@pytest.mark.parametrize(("value", "key", "found"), [
    ('["c_integrator", "c99"]', "sequence.required_lots[1]", "found 'c99'"),
    ('["c_integrator", "c_integrator"]', "sequence.required_lots[1]", "found 'c_integrator' again"),
    ('"c_integrator"', "sequence.required_lots", "found 'c_integrator'"),
    ("false", "sequence.required_lots", "found False"),
])
def test_required_lots_that_are_not_part_keys_of_the_design_are_one_line_each(tmp_path: Path, value: str, key: str,
                                                                              found: str) -> None:
    line = only_problem(sequence_requiring(tmp_path, value))
    assert f"demo-sequence.toml: {key}: expected " in line and line.endswith(found)
    if "c99" in value:  # an unknown part: the line names the design's parts to choose from
        assert "a part of PW-22 dual-knob setpoint panel (supply_v, " in line and "knob_b_pot)" in line
