"""Compiling a sequence into test points with tolerance and acceptance limits, and judging readings."""

from __future__ import annotations

import hashlib
import math
from dataclasses import replace
from pathlib import Path

import pytest

from fixture.files.sequence_file import Sequence, load_sequence
from fixture.model.decision import DecisionRule
from fixture.files.station_file import load_station
from fixture.files.toml_reader import FileProblems
from fixture.model.tolerance.space import KnobSetting, ParameterSpace
from fixture.model.tolerance.worst_case import worst_case
from fixture.runner.plan import compile_plan
from fixture.runner.plan_points import (
    InstrumentSetting,
    PointLimits,
    StepCheck,
    TestPlan,
    TestPoint,
    decode_error_pct,
    judge,
    judge_check,
    largest_shift,
)
from tests.files.edits import edited_copy

DEMO = Path("sequences/demo-sequence.toml")
SHIPPED = (Path("sequences"),)
STATION = load_station("sequences/demo-station.toml")


def compiled(path: Path) -> tuple[Sequence, TestPlan]:
    sequence = load_sequence(path, station=STATION, search_dirs=SHIPPED)
    return sequence, compile_plan(sequence, sequence.design, STATION)


@pytest.fixture(scope="module")
def demo() -> tuple[Sequence, TestPlan]:
    return compiled(DEMO)


def matrix_points(plan: TestPlan) -> list[TestPoint]:
    return [p for s in plan.steps if s.kind == "knob-matrix" for p in s.points]


def test_demo_plan_covers_every_design_stop(demo: tuple[Sequence, TestPlan]) -> None:
    sequence, plan = demo
    design = sequence.design
    freq = [p for p in matrix_points(plan) if p.quantity == "frequency_hz"]
    duty = [p for p in matrix_points(plan) if p.quantity == "duty_pct"]
    assert [p.knob_a_pct for p in freq] == list(design.knobs["a"].stops_pct)
    assert {p.knob_b_pct for p in freq} == {design.knobs["b"].hold_pct}
    assert [p.knob_b_pct for p in duty] == list(design.knobs["b"].stops_pct)
    assert all(p.setting.gate_time_s == pytest.approx(0.1) and p.setting.instrument == "counter"
               for p in matrix_points(plan))


def test_guarded_acceptance_limits_are_tolerance_narrowed_by_u(demo: tuple[Sequence, TestPlan]) -> None:
    # ILAC-G8:09/2019 guarded acceptance: acceptance = tolerance limit -/+ w, w = r U (r = 1 in the demo).
    for point in matrix_points(demo[1]):
        lim = point.limits
        assert lim is not None and lim.rule == "guarded" and lim.expanded_u is not None and lim.expanded_u > 0
        assert lim.tolerance_low < lim.acceptance_low < lim.acceptance_high < lim.tolerance_high
        assert lim.acceptance_low == pytest.approx(lim.tolerance_low + lim.expanded_u, rel=1e-12)
        assert lim.acceptance_high == pytest.approx(lim.tolerance_high - lim.expanded_u, rel=1e-12)
        # TUR = tolerance span / (2 U), ANSI/NCSL Z540.3 handbook (from memory)
        assert lim.tur == pytest.approx((lim.tolerance_high - lim.tolerance_low) / (2 * lim.expanded_u))
        assert "guarded acceptance" in lim.rule_statement


def test_simple_acceptance_limits_equal_the_tolerance_limits(tmp_path: Path) -> None:
    # ILAC-G8:09/2019 simple acceptance: guard band w = 0.
    path = edited_copy(DEMO, tmp_path, 'decision_rule = "guarded"', 'decision_rule = "simple"')
    _, plan = compiled(path)
    step = plan.steps[1]
    for point in step.points:
        lim = point.limits
        assert lim is not None and lim.rule == "simple"
        assert (lim.acceptance_low, lim.acceptance_high) == (lim.tolerance_low, lim.tolerance_high)
    assert all(p.limits.rule == "guarded" for p in plan.steps[2].points)  # the other step keeps its rule


def test_spec_limit_narrows_the_tolerance_at_its_stop(demo: tuple[Sequence, TestPlan]) -> None:
    sequence, plan = demo
    spec = next(s for s in sequence.design.spec if s.quantity == "frequency_hz" and s.stop_pct == 0)
    point = next(p for p in matrix_points(plan) if p.quantity == "frequency_hz" and p.knob_a_pct == 0)
    assert point.limits.tolerance_low >= spec.low and point.limits.tolerance_high <= spec.high


def test_explicit_limits_are_the_tolerance_limits(tmp_path: Path) -> None:
    path = edited_copy(DEMO, tmp_path, 'from = "design"\nmethod = "worst-case"\ndecision_rule = "guarded"\n',
                       'from = "explicit"\ndecision_rule = "simple"\n\n[steps.limits.duty_pct]\n'
                       'low = 1\nhigh = 99\n')
    sequence, plan = compiled(path)
    design = sequence.design
    space = ParameterSpace(design, design.conditions["production"])
    for point in plan.steps[2].points:
        # Worst case bounds every unit the tolerances allow (extreme-value analysis; from memory), so an
        # explicit limit beyond it is capped there, and the point's note says so.
        setting = KnobSetting("b", point.knob_b_pct, point.knob_a_pct, point.knob_b_pct)
        wc = worst_case(lambda x, s=setting: space.quantity(x, s, "duty_pct"), space.lower, space.upper,
                        space.centre_point())
        assert point.limits.tolerance_low == pytest.approx(max(1.0, wc.low.value), rel=1e-12)
        assert point.limits.tolerance_high == pytest.approx(min(99.0, wc.high.value), rel=1e-12)
        assert point.limits.basis == "explicit"
        if wc.low.value > 1.0:
            assert "explicit low limit 1.000 % lies beyond the worst case" in point.limits.note
            assert "capped at worst case" in point.limits.note


def test_explicit_limits_that_would_accept_a_stuck_output_are_refused(tmp_path: Path) -> None:
    # A sequence on a design whose worst corner sticks high at knob B 100 % (R7 at 11.5k): a duty window
    # reaching 100 % would pass a unit whose output never goes low.
    design = edited_copy(Path("sequences/demo-panel.toml"), tmp_path, 'value = "12k"', 'value = "11.5k"')
    path = edited_copy(DEMO, tmp_path, 'from = "design"\nmethod = "worst-case"\ndecision_rule = "guarded"\n',
                       'from = "explicit"\ndecision_rule = "simple"\n\n[steps.limits.duty_pct]\n'
                       'low = 1\nhigh = 100\n')
    path.write_text(path.read_text(encoding="utf-8").replace('design = "demo-panel.toml"', f'design = "{design}"'),
                    encoding="utf-8")
    with pytest.raises(FileProblems) as caught:
        compiled(path)
    [problem] = caught.value.problems
    assert '(knob-matrix "duty at knob B stops").limits: expected limits that cannot accept a stuck output' \
        in problem.message
    assert "stop B 100 %" in problem.message and "stuck high" in problem.message and "RV2" in problem.message


def test_gate_by_cycles_is_recorded_and_costs_uncertainty_like_the_same_time(tmp_path: Path) -> None:
    path = edited_copy(DEMO, tmp_path, 'gate_time = "100 ms"', "gate_cycles = 10")
    _, plan = compiled(path)
    cycled = plan.steps[1].points
    _, demo_plan = compiled(DEMO)
    assert all(p.setting.gate_cycles == 10 and p.setting.gate_time_s is None for p in cycled)
    # 10 periods of a few ms average fewer periods than a 100 ms gate: the uncertainty must be larger.
    for short, long in zip(cycled, demo_plan.steps[1].points, strict=True):
        assert short.limits.expanded_u > long.limits.expanded_u


def test_plan_records_the_content_hashes(demo: tuple[Sequence, TestPlan]) -> None:
    # hashlib SHA-256 of the files' bytes (FIPS 180-4)
    _, plan = demo
    assert plan.sequence_sha256 == hashlib.sha256(DEMO.read_bytes()).hexdigest()
    assert plan.design_sha256 == hashlib.sha256(Path("sequences/demo-panel.toml").read_bytes()).hexdigest()
    assert plan.station_sha256 == hashlib.sha256(Path("sequences/demo-station.toml").read_bytes()).hexdigest()


def test_power_up_current_is_judged_by_simple_acceptance(demo: tuple[Sequence, TestPlan]) -> None:
    step = demo[1].steps[0]
    assert step.kind == "power-up" and step.supply_v == 12.0 and step.current_limit_a == pytest.approx(0.1)
    (point,) = step.points
    assert point.setting.instrument == "supply" and point.limits.rule == "simple"
    assert (point.limits.acceptance_low, point.limits.acceptance_high) == pytest.approx((0.002, 0.015))


def test_cross_talk_and_decoder_steps_say_which_readings_each_check_uses(demo: tuple[Sequence, TestPlan]) -> None:
    _, plan = demo
    cross = plan.steps[3]
    duty, freq = cross.checks
    assert {cross.points[i].quantity for i in duty.points} == {"duty_pct"}
    assert {cross.points[i].quantity for i in freq.points} == {"frequency_hz"}
    assert all(p.limits is None for p in cross.points)
    decoder = plan.steps[4]
    endpoints = [p for p in decoder.points if p.role == "endpoint"]
    assert [(p.knob_a_pct, p.knob_b_pct, p.quantity) for p in endpoints] == [
        (0.0, 50.0, "period_s"), (100.0, 50.0, "period_s"), (50.0, 0.0, "duty_pct"), (50.0, 100.0, "duty_pct")]
    checks = [p for p in decoder.points if p.role == "decode-check"]
    assert all(0 < (p.knob_a_pct if p.quantity == "period_s" else p.knob_b_pct) < 100 for p in checks)


def test_compiling_for_a_station_without_a_needed_role_is_refused(demo: tuple[Sequence, TestPlan]) -> None:
    import dataclasses

    sequence, _ = demo
    bare = dataclasses.replace(STATION, instruments={k: v for k, v in STATION.instruments.items()
                                                     if k != "supply"})
    with pytest.raises(FileProblems, match=r"sequence.requires\[1\]: expected a role station"):
        compile_plan(sequence, sequence.design, bare)


def test_a_gate_too_short_for_any_acceptance_zone_is_a_sequence_problem(tmp_path: Path) -> None:
    # The sequence reader refuses r above 10; the compiler must still refuse a guard band that leaves no
    # acceptance zone, so the rule is set past the reader here.
    shipped = load_sequence(DEMO, station=STATION, search_dirs=SHIPPED)
    step = shipped.steps[1]
    wide = replace(step, limits=replace(step.limits, rule=DecisionRule(kind="guarded", guard_multiple=1e9)))
    sequence = replace(shipped, steps=(*shipped.steps[:1], wide, *shipped.steps[2:]))
    with pytest.raises(FileProblems) as info:
        compile_plan(sequence, sequence.design, STATION)
    assert all('step 2 (knob-matrix "frequency at knob A stops").limits: expected an acceptance zone' in str(p)
               for p in info.value.problems)


def point(low: float = 1.0, high: float = 2.0) -> TestPoint:
    limits = PointLimits(quantity="frequency_hz", unit="Hz", nominal=1.5, basis="explicit", tolerance_low=0.9,
                         tolerance_high=2.1, acceptance_low=low, acceptance_high=high, expanded_u=0.1, tur=6.0,
                         rule="guarded", guard_multiple=1.0, rule_statement="")
    return TestPoint(index=0, knob_a_pct=0.0, knob_b_pct=50.0, quantity="frequency_hz", unit="Hz",
                     setting=InstrumentSetting("counter", "frequency", gate_time_s=0.1), limits=limits)


def test_reading_on_an_acceptance_limit_passes_and_just_beyond_fails() -> None:
    # closed acceptance zone: common practice, no source (stated in judge's docstring)
    p = point()
    assert judge(p, 1.0) == "pass" and judge(p, 2.0) == "pass" and judge(p, 1.5) == "pass"
    assert judge(p, math.nextafter(1.0, 0.0)) == "fail"
    assert judge(p, math.nextafter(2.0, 3.0)) == "fail"
    # between an acceptance and a tolerance limit: inside tolerance, but not accepted under guarded acceptance
    assert judge(p, 0.95) == "fail" and judge(p, 2.05) == "fail"


def test_judging_something_that_is_not_a_reading_is_refused() -> None:
    with pytest.raises(ValueError):
        judge(point(), math.nan)
    no_limits = TestPoint(index=1, knob_a_pct=0.0, knob_b_pct=50.0, quantity="duty_pct", unit="%",
                          setting=InstrumentSetting("counter", "duty", gate_time_s=0.1), role="cross-talk")
    with pytest.raises(ValueError, match="no limits"):
        judge(no_limits, 50.0)


def test_step_checks_pass_up_to_their_bound() -> None:
    check = StepCheck("duty_shift_pp", "pp", 2.0, (0, 1), "")
    assert judge_check(check, 2.0) == "pass" and judge_check(check, math.nextafter(2.0, 3.0)) == "fail"


def test_largest_shift_is_from_the_reference_reading() -> None:
    # arithmetic by hand: |48 - 50| = 2 pp; |1010 - 1000| / 1000 = 1 %
    assert largest_shift([50.0, 48.0, 51.0], 50.0, relative=False) == pytest.approx(2.0)
    assert largest_shift([1000.0, 1010.0, 995.0], 1000.0, relative=True) == pytest.approx(1.0)


def test_decode_error_interpolates_between_the_units_endpoints() -> None:
    # straight-line interpolation by hand: 3 ms between 4 ms (0 %) and 2 ms (100 %) decodes as 50 %
    assert decode_error_pct(3e-3, 4e-3, 2e-3, 50.0) == pytest.approx(0.0, abs=1e-12)
    assert decode_error_pct(3e-3, 4e-3, 2e-3, 45.0) == pytest.approx(5.0)
    assert decode_error_pct(30.0, 10.0, 90.0, 20.0) == pytest.approx(5.0)


def test_a_knob_that_does_not_move_the_wave_fails_the_decode_check() -> None:
    error = decode_error_pct(3e-3, 3e-3, 3e-3, 50.0)
    assert judge_check(StepCheck("decode_error_a_pct", "%", 5.0, (0,), ""), abs(error)) == "fail"
