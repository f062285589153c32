"""Design checks over the whole knob travel: where the output sticks, found between the stops too."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

from fixture.cli import main
from fixture.files.design_file import load_design
from fixture.files.toml_reader import FileProblems
from fixture.model.design import Knob, ProductDesign
from fixture.model.pot import PotGeometry
from fixture.model.travel import HIGH, LOW, stuck_ranges, travel_problems
from tests.files.edits import edited_copy
from tests.model.test_plugin_model import PLUGIN_REF, design_toml, write

DEMO = Path("sequences/demo-panel.toml")


def with_values(design: ProductDesign, **nominals: float) -> ProductDesign:
    """``design`` with some parts' nominal values replaced (tolerances kept)."""
    parts = tuple(replace(p, nominal=nominals[p.key]) if p.key in nominals else p for p in design.parts)
    return replace(design, parts=parts)


def with_knob_b(design: ProductDesign, **changes: object) -> ProductDesign:
    knob: Knob = replace(design.knobs["b"], **changes)
    return replace(design, knobs={**design.knobs, "b": knob})


def ideal(design: ProductDesign) -> ProductDesign:
    """The demo with an ideal op-amp: no slew limit, no delay, so the triangle is exactly its trip points."""
    return with_values(design, opamp_slew_v_per_s=1e15, opamp_delay_s=0.0)


def rotation_where_threshold_is(v_target: float, d: ProductDesign) -> float:
    """Knob B rotation (%) where the divider supply - R6 - RV2 - R7 - ground puts ``v_target`` on the wiper.

    Divider: v = Vcc (R7 + cw) / (R6 + P + R7), cw the wiper-to-CW side (Ohm's law, from memory).
    Pot with end resistance e and electrical travel t centred in the rotation (fixture/model/pot.py
    docstring): ccw = e + p (P - 2 e), p = (rotation - (1 - t)/2) / t, cw = P - ccw.
    """
    vals = d.nominal_values()
    vcc, rt, rb, pot = vals["supply_v"], vals["r_threshold_top"], vals["r_threshold_bottom"], vals["knob_b_pot"]
    geo = d.knobs["b"].geometry
    cw = v_target * (rt + pot + rb) / vcc - rb
    ccw = pot - cw
    p = (ccw - geo.end_resistance_ohm) / (pot - 2 * geo.end_resistance_ohm)
    return 100.0 * (p * geo.electrical_travel + (1 - geo.electrical_travel) / 2)


def trip_points(d: ProductDesign) -> tuple[float, float]:
    """Schmitt trip points about Vref: V_H = Vref + (Vref - V_OL) R3/R4, V_L = Vref - (V_OH - Vref) R3/R4
    (non-inverting Schmitt trigger, any op-amp text; from memory)."""
    v = d.nominal_values()
    vref = v["supply_v"] * v["r_ref_bottom"] / (v["r_ref_top"] + v["r_ref_bottom"])
    k = v["r_schmitt_in"] / v["r_schmitt_fb"]
    v_oh = v["supply_v"] - v["opamp_headroom_v"]
    return vref - (v_oh - vref) * k, vref + (vref - v["opamp_low_v"]) * k


def test_the_shipped_demo_switches_over_both_knobs_whole_travel() -> None:
    assert stuck_ranges(load_design(DEMO)) == []


@pytest.mark.parametrize(("r_bottom", "state"), [(30e3, LOW), (9.7e3, HIGH)])
def test_scan_finds_where_the_threshold_leaves_the_triangle_as_the_comparator_relation_says(r_bottom, state) -> None:
    # A comparator whose threshold lies outside its input's range never switches (from memory; any op-amp
    # text): with a threshold above the triangle's top the slicer output stays low, below its bottom high.
    d = ideal(with_values(load_design(DEMO), r_threshold_bottom=r_bottom))
    v_low, v_high = trip_points(d)
    ranges = stuck_ranges(d)
    assert [(r.knob, r.state, r.other_pct) for r in ranges] == [("b", state, None)]
    found = ranges[0]
    if state == LOW:  # threshold falls as knob B turns CW: too high from the CCW end up to the crossing
        assert found.first_pct == 0.0
        assert found.last_pct == pytest.approx(rotation_where_threshold_is(v_high, d), abs=1e-4)
    else:
        assert found.first_pct == pytest.approx(rotation_where_threshold_is(v_low, d), abs=1e-4)
        assert found.last_pct == 100.0
    # The model itself agrees: duty is exactly 0 or 1 just inside the range, and a pulse just outside.
    inside = found.last_pct - 0.01 if state == LOW else found.first_pct + 0.01
    outside = found.last_pct + 0.01 if state == LOW else found.first_pct - 0.01
    duty_in = float(d.signal(d.nominal_values(), 50, inside).duty)
    duty_out = float(d.signal(d.nominal_values(), 50, outside).duty)
    assert duty_in == (0.0 if state == LOW else 1.0)
    assert 0.0 < duty_out < 1.0


def test_a_dead_zone_beyond_the_last_stop_is_found_though_every_stop_switches() -> None:
    # Stops 10..90 % with the threshold leaving the triangle near the CW end: the per-stop check is blind.
    d = with_knob_b(with_values(load_design(DEMO), r_threshold_bottom=9.7e3), stops_pct=(10.0, 50.0, 90.0))
    nominal = d.nominal_values()
    for stop in d.knobs["b"].stops_pct:
        rotation = {"a": np.asarray(0.5), "b": np.asarray(stop / 100)}
        assert d.model.check(d.model_inputs(nominal, rotation)) == []
    [found] = stuck_ranges(d)
    assert found.state == HIGH and 90.0 < found.first_pct < 100.0 and found.last_pct == 100.0


def test_end_resistance_and_electrical_travel_move_the_boundary_as_the_pot_geometry_says() -> None:
    base = ideal(with_values(load_design(DEMO), r_threshold_bottom=30e3))
    d = with_knob_b(base, geometry=PotGeometry("linear", electrical_travel=0.8, end_resistance_ohm=400.0))
    [found] = stuck_ranges(d)
    _, v_high = trip_points(d)
    assert found.last_pct == pytest.approx(rotation_where_threshold_is(v_high, d), abs=1e-4)
    [plain] = stuck_ranges(base)
    assert abs(found.last_pct - plain.last_pct) > 1.0  # the geometry really moved it


def test_the_problem_names_the_knob_the_range_and_the_parts_in_words() -> None:
    d = with_values(load_design(DEMO), r_threshold_bottom=30e3)
    [problem] = travel_problems(d)
    assert problem.key == "knobs.b"
    assert "knob B (level, RV2)" in problem.expected
    assert "stuck low (duty 0 %) from 0 % to " in problem.found
    assert "R7 threshold divider, ground side of knob B" in problem.found
    assert "R6 threshold divider, supply side of knob B" in problem.found
    assert "triangle top: " in problem.found and "R3 Schmitt input resistor" in problem.found


def test_check_command_fails_a_design_whose_output_sticks_beyond_the_stops(tmp_path: Path) -> None:
    path = edited_copy(DEMO, tmp_path, 'value = "12k"', 'value = "9.7k"')
    text = path.read_text(encoding="utf-8").replace("stops = [0, 10, 50, 90, 100]", "stops = [0, 10, 50, 90, 95]")
    path.write_text(text.replace("at = 100\nlow = 80", "at = 95\nlow = 80"), encoding="utf-8")
    result = CliRunner().invoke(main, ["check", str(path)], catch_exceptions=False)
    assert result.exit_code == 2
    lines = [ln for ln in result.stderr.splitlines() if "error:" in ln]
    assert len(lines) == 1 and "knobs.b: expected an output that switches over knob B" in lines[0]
    assert "stuck high (duty 100 %) from 9" in lines[0] and "% to 100 % of rotation" in lines[0]
    assert "Traceback" not in result.output


def test_plugin_models_own_rule_is_checked_between_the_stops(tmp_path: Path) -> None:
    # R_A = R1 + knob A's CW side must stay >= 1 kohm (plugin_555's rule). With R1 = 500 ohm that fails
    # only above ~95 % of knob A, beyond its last stop at 90 %: a linear pot (end 20 ohm, 10 kohm) has
    # cw = 20 + (1 - r)(10000 - 40), so cw = 500 ohm at r = 1 - 480/9960 (definition of end resistance).
    text = design_toml(PLUGIN_REF, r1="500").replace("stops = [0, 50, 100]", "stops = [0, 50, 90]", 1)
    with pytest.raises(FileProblems) as caught:
        load_design(write(tmp_path, text))
    [problem] = caught.value.problems
    assert problem.key == "parts.r1"
    boundary = 100.0 * (1.0 - 480.0 / 9960.0)
    assert f"at knob A {boundary:.4g} % to 100 % of rotation" in problem.message


class _SlicedRamp:
    """A made-up model where both knobs matter: knob A sets the ramp's top (0.5..1 V), knob B the
    threshold (0..1 V, falling as B turns CW); the output is high while the ramp is above the threshold."""

    name = "test-sliced-ramp"
    description = "ramp top from knob A, threshold from knob B"
    parameters = ()

    def evaluate(self, values):
        from fixture.model.circuits.base import Signal

        top = 0.5 + 0.5 * values["knob_a_cw_ohm"] / (values["knob_a_ccw_ohm"] + values["knob_a_cw_ohm"])
        th = values["knob_b_cw_ohm"] / (values["knob_b_ccw_ohm"] + values["knob_b_cw_ohm"])
        period = np.full(np.broadcast(top, th).shape, 1e-3)
        # a ramp 0..top: time above th is the fraction (top - th)/top of the period, clipped
        return Signal(period_s=period, high_s=period * np.clip((top - th) / top, 0.0, 1.0),
                      internals={"v_threshold": th, "v_low": np.zeros_like(top), "v_high": top})

    def check(self, values):
        return []


def test_a_dead_zone_that_depends_on_both_knobs_names_the_other_knobs_range() -> None:
    # Stuck low where the threshold is at or above the ramp's top (comparator relation, from memory):
    # with linear pots of full travel and no end resistance, th = 1 - rB and top = 1 - rA/2, so the
    # output sticks for rB <= rA/2: knob B up to 50 % when knob A is at 100 %, only B = 0 with A at 0.
    design = replace(load_design(DEMO), model=_SlicedRamp())
    full = PotGeometry("linear", electrical_travel=1.0, end_resistance_ohm=0.0)
    knobs = {k: replace(v, geometry=full) for k, v in design.knobs.items()}
    ranges = stuck_ranges(replace(design, knobs=knobs))
    joint = [r for r in ranges if r.other_pct is not None]
    assert len(joint) == 1 and joint[0].knob == "b" and joint[0].state == LOW
    assert joint[0].last_pct == pytest.approx(50.0, abs=1e-4)
    assert joint[0].other_pct[1] == 100.0
    # Wherever knob A sits, only the very ends of knob B stick: B = 0 (threshold 1 V, at least the top)
    # and B = 100 % (threshold 0 V, at the ramp's bottom: stuck high).
    assert sorted((r.state, r.first_pct) for r in ranges if r.other_pct is None) == [(LOW, 0.0), (HIGH, 100.0)]
    assert all(r.first_pct == r.last_pct for r in ranges if r.other_pct is None)


@settings(max_examples=12, deadline=None, derandomize=True)
@given(r_bottom=st.floats(8e3, 40e3), top=st.floats(2e3, 20e3), end_ohm=st.floats(0.0, 400.0))
def test_scan_agrees_with_the_comparator_relation_on_a_dense_sweep(r_bottom, top, end_ohm) -> None:
    # Independent of the scan: sweep knob B densely and mark every position where the threshold is outside
    # the Schmitt trip points (comparator relation and trip points as above, from memory). The scan's
    # ranges must cover exactly those positions, to the sweep's resolution.
    base = ideal(with_values(load_design(DEMO), r_threshold_bottom=r_bottom, r_threshold_top=top))
    d = with_knob_b(base, geometry=PotGeometry("linear", electrical_travel=0.94, end_resistance_ohm=end_ohm))
    v_low, v_high = trip_points(d)
    rotations = np.linspace(0.0, 100.0, 2001)
    v = d.nominal_values()
    pot, geo = v["knob_b_pot"], d.knobs["b"].geometry
    p = np.clip((rotations / 100 - (1 - geo.electrical_travel) / 2) / geo.electrical_travel, 0.0, 1.0)
    cw = pot - (end_ohm + p * (pot - 2 * end_ohm))
    v_th = v["supply_v"] * (v["r_threshold_bottom"] + cw) / (v["r_threshold_top"] + pot + v["r_threshold_bottom"])
    expected = (v_th >= v_high) | (v_th <= v_low)
    covered = np.zeros_like(expected)
    for r in stuck_ranges(d):
        assert r.knob == "b" and r.other_pct is None
        covered |= (rotations >= r.first_pct - 1e-6) & (rotations <= r.last_pct + 1e-6)
    assert np.array_equal(covered, expected)


def test_a_threshold_inside_the_op_amps_overshoot_counts_as_stuck() -> None:
    # The demo's real op-amp (0.5 V/us, 1 us) carries the triangle a few tens of mV past its trip points,
    # so a threshold just below the bottom trip point still gets pulses of a few microseconds from the
    # overshoot alone. Those rest on the least certain figures of the design (delay, slew), so the scan
    # counts them as stuck (the documented choice in fixture/model/travel.py; common practice, no source).
    d = with_values(load_design(DEMO), r_threshold_bottom=9.7e3)
    v_low, _ = trip_points(d)
    signal = d.signal(d.nominal_values(), 50.0, 100.0)
    assert float(signal.internals["v_threshold"]) < v_low  # below the trip point ...
    assert float(signal.internals["v_trough"]) < float(signal.internals["v_threshold"])  # ... but not the trough
    assert 0.99 < float(signal.duty) < 1.0  # so the model still gives narrow low pulses
    [found] = stuck_ranges(d)
    assert found.state == HIGH and found.last_pct == 100.0
    assert found.first_pct == pytest.approx(rotation_where_threshold_is(v_low, d), abs=1e-4)
