"""A step that judges a derived value (a cross-talk shift, a decode error) stores that value with its limit.

The limits come from the demo sequence through the compiled plan (``StepCheck.high``), never typed here;
the expected values are worked by hand from two readings in each test.
"""

from __future__ import annotations

import numpy as np
import pytest
from sqlalchemy import text

from fixture.analytics.measurement_table import load_measurements
from fixture.model.quantities import QUANTITIES
from fixture.model.step_terms import CHECK_QUANTITIES, CheckKind, PointRole, StepKind
from fixture.model.verdicts import Verdict
from fixture.reporting.certificate import build_record
from fixture.reporting.templating import format_limits
from fixture.runner.step_kinds import cross_talk_outcome, decoder_outcome
from fixture.store.models import MeasurementRow
from tests.databases import past_result_triggers

IGNORE = lambda *args: None  # noqa: E731


def step_of(plan, kind):
    return next(s for s in plan.steps if s.kind is kind)


def check_of(step, kind: CheckKind):
    return next(c for c in step.checks if c.kind is kind)


def judged_rows(outcome) -> dict[str, object]:
    return {m.quantity: m for m in outcome.measurements if m.quantity in CHECK_QUANTITIES}


def nominal_reader(design):
    values = design.nominal_values()

    def read(point):
        return float(QUANTITIES[point.quantity].extract(design.signal(values, point.knob_a_pct, point.knob_b_pct)))
    return read


def test_a_duty_shift_beyond_its_limit_is_a_fail_row_with_the_shift_and_the_limit(compiled) -> None:
    _, sequence, plan = compiled
    step = step_of(plan, StepKind.CROSS_TALK)
    duty_check = check_of(step, CheckKind.DUTY_SHIFT_PP)
    hold_a = sequence.design.knobs["a"].hold_pct
    far_a = max(step.points[i].knob_a_pct for i in duty_check.points)
    over_pp = duty_check.high + 0.5  # the limit from the sequence, half a point beyond it

    def leaky(point):
        # Duty 50 % everywhere but at knob A's farthest stop from hold; frequency 400 Hz flat.
        if point.quantity == "duty_pct":
            return 50.0 + (over_pp if point.knob_a_pct == far_a and far_a != hold_a else 0.0)
        return 400.0

    outcome = cross_talk_outcome(step, sequence.design, leaky, IGNORE)
    rows = judged_rows(outcome)
    duty, freq = rows["duty_shift_pp"], rows["frequency_shift_pct"]
    # Worked by hand from two readings: |(50 + over) - 50| = over percentage points.
    assert duty.value == pytest.approx(over_pp)
    assert duty.verdict == "fail" and duty.unit == "pp"
    assert duty.acceptance_high == duty.tolerance_high == duty_check.high
    assert duty.acceptance_low is None and duty.tolerance_low is None and duty.expanded_uncertainty is None
    assert duty.name == "largest duty shift, knob A moving"
    assert duty.decision_rule.startswith("Simple acceptance")
    assert freq.value == 0.0 and freq.verdict == "pass"
    # The step verdict follows the rows; the message stays.
    assert outcome.verdict is Verdict.FAIL and outcome.message.startswith("duty shift as knob A moves")
    # The raw readings are kept ahead of the judged rows, still RECORDED.
    raw = [m for m in outcome.measurements if m.quantity not in CHECK_QUANTITIES]
    assert len(raw) == len(step.points) and {m.verdict for m in raw} == {"recorded"}
    assert outcome.measurements[-2:] == [duty, freq]


def test_a_relative_frequency_shift_is_in_percent_of_the_hold_reading(compiled) -> None:
    _, sequence, plan = compiled
    step = step_of(plan, StepKind.CROSS_TALK)
    freq_check = check_of(step, CheckKind.FREQUENCY_SHIFT_PCT)
    hold_b = sequence.design.knobs["b"].hold_pct
    far_b = max(step.points[i].knob_b_pct for i in freq_check.points)

    def drifting(point):
        # 400 Hz at knob B's hold, 410 Hz at its farthest stop: by hand 100 x (410 - 400) / 400 = 2.5 %.
        if point.quantity == "frequency_hz":
            return 410.0 if point.knob_b_pct == far_b and far_b != hold_b else 400.0
        return 50.0

    rows = judged_rows(cross_talk_outcome(step, sequence.design, drifting, IGNORE))
    freq = rows["frequency_shift_pct"]
    assert freq.value == pytest.approx(2.5)
    assert freq.unit == "%" and freq.acceptance_high == freq_check.high
    assert freq.verdict == ("fail" if 2.5 > freq_check.high else "pass")
    assert freq.name == "largest frequency shift, knob B moving"


def test_a_nominal_unit_gets_pass_rows_whose_shifts_are_worked_from_its_readings(compiled) -> None:
    _, sequence, plan = compiled
    design = sequence.design
    step = step_of(plan, StepKind.CROSS_TALK)
    read = nominal_reader(design)
    outcome = cross_talk_outcome(step, design, read, IGNORE)
    rows = judged_rows(outcome)
    hold_a, hold_b = design.knobs["a"].hold_pct, design.knobs["b"].hold_pct
    duty_check = check_of(step, CheckKind.DUTY_SHIFT_PP)
    duty = [read(step.points[i]) for i in duty_check.points]
    ref = read(next(step.points[i] for i in duty_check.points if step.points[i].knob_a_pct == hold_a))
    assert rows["duty_shift_pp"].value == pytest.approx(max(abs(d - ref) for d in duty))
    freq_check = check_of(step, CheckKind.FREQUENCY_SHIFT_PCT)
    freqs = [read(step.points[i]) for i in freq_check.points]
    f_ref = read(next(step.points[i] for i in freq_check.points if step.points[i].knob_b_pct == hold_b))
    assert rows["frequency_shift_pct"].value == pytest.approx(max(100 * abs(f - f_ref) / f_ref for f in freqs))
    assert outcome.verdict is Verdict.PASS and {r.verdict for r in rows.values()} == {"pass"}


def _linear_reader(step, bump_s: float = 0.0, flat_b: bool = False):
    """Period linear in knob A (1 ms .. 3 ms), duty linear in knob B (10 .. 90 %); ``bump_s`` added to
    the period at knob A's first decode check; ``flat_b`` keeps duty at 50 % whatever knob B does."""
    first_check = next(p for p in step.points if p.role is PointRole.DECODE_CHECK and p.knob == "a")

    def read(point):
        if point.quantity == "period_s":
            bump = bump_s if point.index == first_check.index else 0.0
            return 1e-3 + 2e-3 * point.knob_a_pct / 100.0 + bump
        return 50.0 if flat_b else 10.0 + 80.0 * point.knob_b_pct / 100.0
    return read


def test_a_decode_error_beyond_its_limit_is_a_fail_row_worked_by_two_point_interpolation(compiled) -> None:
    _, sequence, plan = compiled
    step = step_of(plan, StepKind.DECODER_CALIBRATION)
    assert dict(step.decode_schemes)["a"] == "linear-in-period"  # the hand formula below is for this scheme
    a_check = check_of(step, CheckKind.DECODE_ERROR_A_PCT)
    error_pct = a_check.high + 2.0  # the limit from the sequence, two percent of travel beyond it
    # Two-point linear interpolation (common practice, no source): position = 100 (T - T0) / (T100 - T0).
    # A period bump dT at a check reads dT / (T100 - T0) of travel off: dT = error / 100 x (3 ms - 1 ms).
    bump_s = error_pct / 100.0 * 2e-3
    outcome = decoder_outcome(step, _linear_reader(step, bump_s), IGNORE)
    rows = judged_rows(outcome)
    a, b = rows["decode_error_a_pct"], rows["decode_error_b_pct"]
    assert a.value == pytest.approx(error_pct)
    assert a.verdict == "fail" and a.unit == "%" and a.acceptance_high == a.tolerance_high == a_check.high
    assert a.name == "largest decode error, knob A" and a.expanded_uncertainty is None
    assert b.value == pytest.approx(0.0, abs=1e-9) and b.verdict == "pass"
    assert outcome.verdict is Verdict.FAIL and "decode error of knob A" in outcome.message
    assert outcome.decoder.max_decode_error_a_pct == pytest.approx(error_pct)


def test_a_decoder_step_of_a_linear_unit_gets_pass_rows(compiled) -> None:
    _, _, plan = compiled
    step = step_of(plan, StepKind.DECODER_CALIBRATION)
    outcome = decoder_outcome(step, _linear_reader(step), IGNORE)
    rows = judged_rows(outcome)
    assert set(rows) == {"decode_error_a_pct", "decode_error_b_pct"}
    assert {r.verdict for r in rows.values()} == {"pass"} and outcome.verdict is Verdict.PASS


def test_a_knob_that_does_not_move_the_output_fails_without_storing_an_infinite_error(compiled) -> None:
    _, _, plan = compiled
    step = step_of(plan, StepKind.DECODER_CALIBRATION)
    outcome = decoder_outcome(step, _linear_reader(step, flat_b=True), IGNORE)
    rows = judged_rows(outcome)
    assert "decode_error_b_pct" not in rows and rows["decode_error_a_pct"].verdict == "pass"
    assert outcome.verdict is Verdict.FAIL and "knob does not move the output" in outcome.message


def test_a_run_stores_the_judged_rows_and_the_certificate_prints_value_and_limit(bench) -> None:
    outcome = bench.test("PW22-900001")
    assert outcome.verdict is Verdict.PASS
    record = build_record(bench.store, outcome.run_id)
    stored = [m for st in record["steps"] for m in st["measurements"] if m["quantity"] in CHECK_QUANTITIES]
    assert {m["quantity"] for m in stored} == set(CHECK_QUANTITIES)
    duty = next(m for m in stored if m["quantity"] == "duty_shift_pp")
    limits = format_limits(duty["acceptance_low"], duty["acceptance_high"], duty["unit"], duty["quantity"])
    # The plan's limit for the duty shift, printed without an SI prefix (a "2 pp" limit, never "2000 mpp").
    limit = check_of(step_of(bench.plan, StepKind.CROSS_TALK), CheckKind.DUTY_SHIFT_PP).high
    assert duty["verdict"] == "pass" and limits == f"≤ {limit:g} pp"


def test_judged_rows_leave_the_readings_lot_and_spc_statistics_load_unchanged(bench) -> None:
    for n in range(3):
        bench.test(f"PW22-90001{n}", seed=n + 10)
    before = load_measurements(bench.store, runs="all")
    assert not {k.quantity for k in before.keys} & CHECK_QUANTITIES
    with bench.store.engine.begin() as con:
        derived = con.execute(text(f"SELECT count(*) FROM {MeasurementRow.__tablename__} WHERE quantity IN "
                                   f"({', '.join(repr(q) for q in sorted(CHECK_QUANTITIES))})")).scalar_one()
        assert derived == 3 * len(CHECK_QUANTITIES)
        with past_result_triggers(con, MeasurementRow.__tablename__):  # as a database from before judged rows
            con.execute(text(f"DELETE FROM {MeasurementRow.__tablename__} WHERE quantity IN "
                             f"({', '.join(repr(q) for q in sorted(CHECK_QUANTITIES))})"))
    after = load_measurements(bench.store, runs="all")
    assert before.keys == after.keys
    for column in ("series", "run_id", "unit_id", "value", "acceptance_low", "acceptance_high", "passed"):
        np.testing.assert_array_equal(getattr(before, column), getattr(after, column))
