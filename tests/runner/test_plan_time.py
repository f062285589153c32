"""The plan's instrument time: stop order, shortest gates, and the time each stored step records."""

from __future__ import annotations

import itertools
import json
import math
from dataclasses import replace
from pathlib import Path

import pytest
from click.testing import CliRunner

from fixture.cli import main
from fixture.files.sequence_file import load_sequence
from fixture.files.station_file import load_station
from fixture.model.measurement_plan import signal_facts
from fixture.model.measurement_time import shortest_counter_gate
from fixture.model.test_time import path_travel_s
from fixture.runner.plan import compile_plan
from fixture.runner.plan_time import plan_time, unit_start
from fixture.reporting.plan_view import render_plan
from fixture.model.tolerance.space import KnobSetting
from fixture.model.quantities import QUANTITIES
from tests.json_keys import all_keys, documented_json_keys

ROOT = Path(__file__).resolve().parents[2]


def _reading_s_by_hand(design, point) -> float:
    """``(N + 1) T`` per measurement, N = ceil(gate / T), duty two measurements (HP Application Note 200,
    reciprocal counting, from memory); the supply's readback is not modelled (0)."""
    if point.setting.instrument == "supply":
        return 0.0
    period = float(design.signal(design.nominal_values(), point.knob_a_pct, point.knob_b_pct).period_s)
    n = max(1, math.ceil(point.setting.gate_time_s / period - 1e-9))
    return (2 if point.quantity == "duty_pct" else 1) * (n + 1) * period


def test_the_shown_time_per_unit_is_the_sum_of_its_steps(compiled) -> None:
    _, _, plan = compiled
    timing = plan_time(plan)
    assert timing.instrument_s == pytest.approx(sum(s.measuring_s + s.travel_s + s.settling_s
                                                    for s in timing.steps))
    result = CliRunner().invoke(main, ["plan", "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert data["unit"]["instrument_s"] == pytest.approx(sum(s["instrument_s"] for s in data["steps"]))
    for key in ("measuring_s", "travel_s", "settling_s"):
        assert data["unit"][key] == pytest.approx(sum(s[key] for s in data["steps"]))
    assert data["unit"]["units_per_hour"] == pytest.approx(3600.0 / data["unit"]["instrument_s"])
    text = render_plan(plan, timing)
    per_unit = next(line for line in text.splitlines() if line.lstrip().startswith("per unit"))
    assert f"{timing.instrument_s:.3g} s" in per_unit


def test_the_plan_json_keys_are_the_ones_its_help_lists() -> None:
    runner = CliRunner()
    listed = documented_json_keys(runner.invoke(main, ["plan", "--help"]).output,
                                  {"or", "null", "hands", "on", "the", "knobs", "from", "their", "sum", "instrument",
                                   "in", "words", "reading", "numbers", "taken", "true", "when", "that", "is", "not",
                                   "s", "times", "seconds", "by", "hand", "are", "turned"})
    data = json.loads(runner.invoke(main, ["plan", "--json"]).output)
    assert all_keys(data) - listed == set()


def test_each_step_measures_with_the_gate_the_sequence_names_for_its_time_by_hand(compiled) -> None:
    _, sequence, plan = compiled
    for step in plan.steps:
        for point in step.points:
            assert point.reading_s == pytest.approx(_reading_s_by_hand(sequence.design, point), rel=1e-9)


def test_each_step_takes_its_stops_in_an_order_no_permutation_beats(compiled) -> None:
    _, _, plan = compiled
    here = unit_start(plan)
    for step in plan.steps:
        positions = [p.position for _, p in step.in_order() if p.position is not None]
        if not positions:
            continue
        distinct = list(dict.fromkeys(p.position for p in step.points))
        best = min(path_travel_s(plan.motion, here, list(order)) for order in itertools.permutations(distinct))
        assert path_travel_s(plan.motion, here, positions) == pytest.approx(best, abs=1e-12), step.name
        here = positions[-1]


def test_the_demo_plan_travels_less_than_the_sequences_own_order(compiled) -> None:
    _, _, plan = compiled
    as_written = replace(plan, steps=tuple(replace(s, order=()) for s in plan.steps))
    moved = sum(s.travel_s for s in plan_time(plan).steps)
    assert moved < sum(s.travel_s for s in plan_time(as_written).steps)


@pytest.mark.parametrize("target_tur", [4.0, 20_000.0])
def test_a_shortest_gate_is_the_shortest_candidate_reaching_the_target_tur(tmp_path, target_tur: float) -> None:
    # 4 is the demo station's target (every reading reaches it with the shortest gate, 1 ms); 20,000 makes
    # some readings need longer gates and some reach it with none (then the best TUR: the longest gate).
    text = (ROOT / "sequences/demo-sequence.toml").read_text().replace('gate_time = "100 ms"', 'gate_time = "shortest"')
    path = tmp_path / "short.toml"
    path.write_text(text.replace('design = "demo-panel.toml"', f'design = "{ROOT / "sequences/demo-panel.toml"}"'))
    shipped = load_station(ROOT / "sequences/demo-station.toml")
    config = replace(shipped, measurement=replace(shipped.measurement, target_tur=target_tur))
    sequence = load_sequence(path, station=config)
    plan = compile_plan(sequence, sequence.design, config)
    setup = config.measurement
    design = sequence.design
    matrix = [p for s in plan.steps if str(s.kind) == "knob-matrix" for p in s.points]
    assert matrix
    for point in matrix:
        gate = point.setting.gate_time_s
        assert gate in setup.gate_times_s
        knob = QUANTITIES[point.quantity].knob
        setting = KnobSetting(knob, point.knob_a_pct if knob == "a" else point.knob_b_pct, point.knob_a_pct,
                              point.knob_b_pct)

        def alone(g: float, point=point, setting=setting):
            return shortest_counter_gate(point.quantity, signal_facts(design, setting, setup), setup.counter,
                                         point.limits.tolerance_low, point.limits.tolerance_high,
                                         target_tur=target_tur, gate_times_s=(g,))
        if alone(gate).meets_target:
            # No shorter candidate reaches the target (a longer gate never reads quicker: whole periods).
            assert not any(alone(g).meets_target for g in setup.gate_times_s if g < gate)
            assert point.limits.tur >= target_tur
        else:
            assert not any(alone(g).meets_target for g in setup.gate_times_s)
            assert gate == max(setup.gate_times_s)  # the best TUR the counter offers
    if target_tur == 4.0:
        # Quicker than the sequence's fixed 100 ms gates, by the same rules.
        fixed = compile_plan(load_sequence(ROOT / "sequences/demo-sequence.toml", station=config), design, config)
        assert sum(s.measuring_s for s in plan_time(plan).steps) < sum(s.measuring_s for s in plan_time(fixed).steps)
    else:
        assert len({p.setting.gate_time_s for p in matrix}) > 2


def test_each_stored_step_records_the_planned_instrument_time(bench) -> None:
    outcome = bench.test("PW22-000300", seed=1)
    assert outcome.verdict == "pass", outcome.steps
    stored = bench.store.run(outcome.run_id).steps
    planned = plan_time(bench.plan).steps
    assert len(stored) == len(planned)
    design = bench.sequence.design
    for step, plan_step, time in zip(stored, bench.plan.steps, planned, strict=True):
        assert step.instrument is not None
        assert step.instrument.measuring_s == pytest.approx(time.measuring_s, rel=1e-12)
        assert step.instrument.travel_s == pytest.approx(time.travel_s, rel=1e-12)
        assert step.instrument.settling_s == pytest.approx(time.settling_s, rel=1e-12)
        # ... which is the model's, worked from the gate and the design's nominal period by hand.
        assert step.instrument.measuring_s == pytest.approx(
            sum(_reading_s_by_hand(design, p) for p in plan_step.points), rel=1e-9)
        assert step.wall_s >= 0.0
    # Readings are stored in the sequence's order whatever order the knobs were driven in.
    for step, plan_step in zip(stored, bench.plan.steps, strict=True):
        judged = [(m.knob_a_pct, m.knob_b_pct, m.quantity) for m in step.measurements][:len(plan_step.points)]
        assert judged == [(p.knob_a_pct, p.knob_b_pct, p.quantity) for p in plan_step.points]


def test_travel_is_the_knob_angle_over_the_speed_step_by_step(compiled) -> None:
    _, _, plan = compiled
    here = unit_start(plan)
    for step, time in zip(plan.steps, plan_time(plan).steps, strict=True):
        degrees = 0.0
        for _, point in step.in_order():
            if point.position is None:
                continue
            a0, b0 = here
            degrees += abs(point.knob_a_pct - a0) * 270.0 / 100 + abs(point.knob_b_pct - b0) * 270.0 / 100
            here = point.position
        # the demo station's KA-2 states 180 deg/s in its profile; both knobs turn 270 deg over 0..100 %
        assert time.travel_s == pytest.approx(degrees / 180.0)


def test_hands_on_the_knobs_plan_no_travel_and_keep_the_sequences_order(tmp_path) -> None:
    # A manual actuator has no stated speed: travel is not planned, and the operator is asked for the
    # stops in the order the sequence lists them.
    text = (ROOT / "sequences/demo-station.toml").read_text().replace('kind = "motorized"', 'kind = "manual"')
    path = tmp_path / "manual.toml"
    path.write_text(text)
    config = load_station(path)
    sequence = load_sequence(ROOT / "sequences/demo-sequence.toml", station=config)
    plan = compile_plan(sequence, sequence.design, config)
    assert plan.motion is None
    assert all(step.order == () for step in plan.steps)
    timing = plan_time(plan)
    assert not timing.travel_planned and all(s.travel_s == 0.0 for s in timing.steps)
    assert timing.instrument_s > 0  # readings and settling still count
    result = CliRunner().invoke(main, ["plan", "--station", str(path), "--json"])
    assert result.exit_code == 0, result.output
    assert json.loads(result.output)["unit"]["units_per_hour"] is None  # hand turning is not stated


def test_the_runner_drives_the_knobs_in_the_plans_order(bench, monkeypatch) -> None:
    actuator = bench.station.driver("actuator")
    driven: list[tuple[float, float]] = []
    move_both = actuator.move_both

    def recording(a: float, b: float):
        driven.append((a, b))
        return move_both(a, b)

    monkeypatch.setattr(actuator, "move_both", recording)
    assert bench.test("PW22-000301", seed=2).verdict == "pass"
    planned = []
    for step in bench.plan.steps:
        for _, point in step.in_order():
            if point.position is not None and (not planned or planned[-1] != point.position):
                planned.append(point.position)
    assert driven == planned
