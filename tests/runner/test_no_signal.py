"""No signal is the unit's fault only when the station can show it is healthy.

The rule is the project's (issue 8, item 2): a second instrument or a station
self-check this shift must vouch for the signal path; common practice, no source.
SCPI's overflow value 9.91E37 is what a counter returns when it could not measure
(SCPI-1999 Vol. 1, 7.2.1.5 "NaN"/overflow; from memory).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from fixture.errors import OverflowReading
from fixture.model.step_terms import PointRole, StepKind
from fixture.model.verdicts import Verdict
from fixture.model.waveform.record import ScopeRecord
from fixture.runner.plan_points import InstrumentSetting, TestPlan, TestPoint
from fixture.runner.readings import PointReader, check_value
from fixture.runner.spot import output_levels, scope_capture
from fixture.sim.dut import Defect

STUCK_LOW = Defect("stuck-output", level="low")
SELF_CHECK = "the golden-unit check of 06:02 on this station (run 41), passed"


def only_up_to(plan: TestPlan, kind: StepKind) -> TestPlan:
    """The plan's steps up to and including the first step of ``kind``."""
    end = next(i for i, s in enumerate(plan.steps) if s.kind is kind)
    return replace(plan, steps=plan.steps[:end + 1])


def scope_plan(plan: TestPlan, design) -> TestPlan:
    """Power-up and the first knob-matrix step, every reading of it taken with the scope."""
    short = only_up_to(plan, StepKind.KNOB_MATRIX)
    matrix = short.steps[-1]
    points = []
    for p in matrix.points:
        period_s = float(design.signal(design.nominal_values(), p.knob_a_pct, p.knob_b_pct).period_s)
        rate, length = scope_capture(period_s, 10e6)
        points.append(replace(p, setting=InstrumentSetting("scope", p.quantity, sample_rate_hz=rate,
                                                           record_length=length)))
    return replace(short, steps=(*short.steps[:-1], replace(matrix, points=tuple(points))))


def silence_counter(monkeypatch, station) -> None:
    def overflow():
        raise OverflowReading("counter: 9.91E37 (simulated: input cable unplugged)")
    monkeypatch.setattr(station.driver("counter"), "read", overflow)


def flatten_scope(monkeypatch, station, design) -> None:
    low_v, _ = output_levels(design)
    flat = ScopeRecord(volts=np.full(10_000, low_v), sample_interval_s=1e-6)
    monkeypatch.setattr(station.driver("scope"), "acquire", lambda: flat)


def stored_step(bench, outcome, kind: StepKind):
    index = next(s.index for s in bench.plan.steps if s.kind is kind)
    return next(s for s in bench.store.run(outcome.run_id).steps if s.index == index)


def test_counter_overflow_and_a_flat_scope_fail_the_unit_as_a_stuck_output(bench) -> None:
    outcome = bench.test("PW22-000500", STUCK_LOW)
    assert outcome.verdict is Verdict.FAIL
    step = stored_step(bench, outcome, StepKind.KNOB_MATRIX)
    assert step.verdict == "fail"
    assert step.message.startswith("no signal on the output: stuck low at knob A")
    assert step.message.endswith("(counter overflow, scope flat)")


def test_a_silent_counter_while_the_scope_sees_the_wave_is_a_station_fault(bench, monkeypatch) -> None:
    silence_counter(monkeypatch, bench.station)
    outcome = bench.test("PW22-000501")
    assert outcome.verdict is Verdict.STATION_FAULT
    step = stored_step(bench, outcome, StepKind.KNOB_MATRIX)
    assert step.verdict == "station-fault"
    assert "the counter reads no signal but the scope sees" in step.message
    assert step.message.endswith("check the counter input and cable")


def test_a_transient_counter_overflow_is_retried_and_the_unit_still_judged(bench, monkeypatch) -> None:
    counter = bench.station.driver("counter")
    real, calls = counter.read, {"n": 0}

    def once():
        calls["n"] += 1
        if calls["n"] == 2:
            raise OverflowReading("counter: 9.91E37 (simulated, once)")
        return real()

    monkeypatch.setattr(counter, "read", once)
    assert bench.test("PW22-000502").verdict is Verdict.PASS


def test_no_second_instrument_and_no_self_check_cannot_fail_a_silent_unit(counter_only_bench) -> None:
    outcome = counter_only_bench.test("PW22-000503", STUCK_LOW)
    assert outcome.verdict is Verdict.STATION_FAULT
    step = stored_step(counter_only_bench, outcome, StepKind.KNOB_MATRIX)
    assert step.message.startswith("cannot tell a dead unit from a dead counter: no second instrument and no "
                                   "self-check this shift")


def test_no_second_instrument_but_a_self_check_this_shift_fails_a_silent_unit(counter_only_bench) -> None:
    outcome = counter_only_bench.test("PW22-000504", STUCK_LOW, signal_path_check=SELF_CHECK)
    assert outcome.verdict is Verdict.FAIL
    step = stored_step(counter_only_bench, outcome, StepKind.KNOB_MATRIX)
    assert step.message.startswith("no signal on the output (counter overflow at knob A")
    assert SELF_CHECK in step.message


@pytest.mark.parametrize(("role", "method"), [("supply", "measure_current"), ("actuator", "move_both")])
def test_an_overflow_from_the_supply_or_the_actuator_is_a_station_fault_not_no_signal(bench, monkeypatch, role,
                                                                                    method) -> None:
    def overflow(*args, **kwargs):
        raise OverflowReading(f"{role}: 9.91E37 (simulated)")

    monkeypatch.setattr(bench.station.driver(role), method, overflow)
    outcome = bench.test("PW22-000505")
    assert outcome.verdict is Verdict.STATION_FAULT
    last = bench.store.run(outcome.run_id).steps[-1]
    assert last.verdict == "station-fault" and "no signal" not in last.message
    assert f"{role}: 9.91E37" in last.message


def test_a_flat_scope_record_and_a_silent_counter_fail_a_stuck_unit(bench) -> None:
    plan = scope_plan(bench.plan, bench.sequence.design)
    outcome = bench.test("PW22-000506", STUCK_LOW, plan=plan)
    assert outcome.verdict is Verdict.FAIL
    message = bench.store.run(outcome.run_id).steps[-1].message
    assert message.startswith("no signal on the output: stuck low") and message.endswith("(scope flat, counter "
                                                                                          "overflow)")


def test_a_flat_scope_record_while_the_counter_reads_the_wave_is_a_station_fault(bench, monkeypatch) -> None:
    flatten_scope(monkeypatch, bench.station, bench.sequence.design)
    outcome = bench.test("PW22-000507", plan=scope_plan(bench.plan, bench.sequence.design))
    assert outcome.verdict is Verdict.STATION_FAULT
    message = bench.store.run(outcome.run_id).steps[-1].message
    assert "the scope sees a flat line but the counter reads" in message
    assert message.endswith("check the scope probe and channel")


def test_a_silent_counter_with_an_unreadable_scope_record_judges_nothing(bench, monkeypatch) -> None:
    silence_counter(monkeypatch, bench.station)
    # a line floating between the output's levels: neither a wave nor a stuck output
    mid_v = 0.5 * sum(output_levels(bench.sequence.design))
    noise = ScopeRecord(volts=np.random.default_rng(1).normal(mid_v, 1e-3, 10_000), sample_interval_s=1e-6)
    monkeypatch.setattr(bench.station.driver("scope"), "acquire", lambda: noise)
    outcome = bench.test("PW22-000508")
    assert outcome.verdict is Verdict.STATION_FAULT
    assert "the scope record is inconclusive" in bench.store.run(outcome.run_id).steps[-1].message


def _point(quantity: str) -> TestPoint:
    return TestPoint(index=0, knob_a_pct=50.0, knob_b_pct=50.0, quantity=quantity, unit="", role=PointRole.JUDGED,
                     setting=InstrumentSetting("counter", "frequency", gate_time_s=0.1))


@pytest.mark.parametrize(("quantity", "value"), [
    ("frequency_hz", 0.0), ("frequency_hz", -1e300), ("period_s", float("nan")), ("period_s", float("inf")),
    ("duty_pct", 100.5), ("duty_pct", -0.1), ("supply_current_a", -1e-3), ("frequency_hz", "412"),
])
def test_a_reading_the_quantity_cannot_have_is_an_instrument_fault(quantity, value) -> None:
    # A frequency or period is positive, a duty lies in 0..100 %, a current drawn is not negative
    # (definitions; common practice, no source).
    from fixture.errors import InstrumentFault

    with pytest.raises(InstrumentFault, match="is not a possible value of that quantity"):
        check_value("counter", _point(quantity), value)


@pytest.mark.parametrize(("quantity", "value"), [("frequency_hz", 412.0), ("duty_pct", 0.0), ("duty_pct", 100.0),
                                                 ("supply_current_a", 0.0)])
def test_possible_readings_pass_the_check_unchanged(quantity, value) -> None:
    assert check_value("counter", _point(quantity), value) == value


def test_the_reader_has_no_verdict_of_its_own_for_a_silence_without_a_point(bench) -> None:
    # the cross-check needs the knob setting the silence was seen at
    from fixture.runner.readings import SilentOutput

    with pytest.raises(AssertionError):
        PointReader(bench.station, bench.sequence.design).cross_check(SilentOutput("x"), None)
