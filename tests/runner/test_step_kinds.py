"""The built-in step kinds find their readings by role, knob and end, and their checks by kind."""

from __future__ import annotations

from dataclasses import replace

import pytest

from fixture.model.quantities import QUANTITIES
from fixture.model.step_terms import StepKind
from fixture.model.verdicts import Verdict
from fixture.runner.step_kinds import cross_talk_outcome, decoder_outcome


def nominal_reader(design):
    """Reads the design's nominal wave: the unit the limits are centred on."""
    values = design.nominal_values()

    def read(point):
        return float(QUANTITIES[point.quantity].extract(design.signal(values, point.knob_a_pct, point.knob_b_pct)))
    return read


def shuffled(step):
    """The step with its readings in reverse order and every check's indices following them."""
    order = list(reversed(range(len(step.points))))
    where = {old: new for new, old in enumerate(order)}
    points = tuple(replace(step.points[old], index=new) for new, old in enumerate(order))
    checks = tuple(replace(c, points=tuple(where[i] for i in c.points)) for c in step.checks)
    return replace(step, points=points, checks=checks)


def step_of(plan, kind):
    return next(s for s in plan.steps if s.kind is kind)


def test_the_decoder_takes_its_endpoints_by_role_knob_and_end_wherever_they_sit(compiled) -> None:
    _, sequence, plan = compiled
    design = sequence.design
    step = step_of(plan, StepKind.DECODER_CALIBRATION)
    read = nominal_reader(design)
    ignore = lambda *args: None  # noqa: E731
    straight = decoder_outcome(step, read, ignore)
    reversed_ = decoder_outcome(shuffled(step), read, ignore)
    assert straight.decoder == reversed_.decoder
    # the constants are the nominal wave's own period at knob A's ends (the decoder's definition)
    hold_b = design.knobs["b"].hold_pct
    nominal = design.nominal_values()
    assert straight.decoder.period_at_a0_s == pytest.approx(float(design.signal(nominal, 0.0, hold_b).period_s))
    assert straight.decoder.period_at_a100_s == pytest.approx(float(design.signal(nominal, 100.0, hold_b).period_s))


def test_cross_talk_takes_its_reference_by_the_moving_knobs_hold_wherever_it_sits(compiled) -> None:
    _, sequence, plan = compiled
    step = step_of(plan, StepKind.CROSS_TALK)
    hold_a = sequence.design.knobs["a"].hold_pct

    def leaky(point):
        # a unit at 50 % duty and 400 Hz whose duty drifts 0.2 pp per percent of knob A away from its
        # hold: the shift is 0.2 x the largest distance from hold only when measured from the hold reading
        if point.quantity == "duty_pct":
            return 50.0 + 0.2 * abs(point.knob_a_pct - hold_a)
        return 400.0

    ignore = lambda *args: None  # noqa: E731
    straight = cross_talk_outcome(step, sequence.design, leaky, ignore)
    reversed_ = cross_talk_outcome(shuffled(step), sequence.design, leaky, ignore)
    assert straight.verdict is Verdict.FAIL and straight.message == reversed_.message
    duty_a = [p.knob_a_pct for p in step.points if p.quantity == "duty_pct"]
    expected = 0.2 * max(abs(a - hold_a) for a in duty_a)
    assert straight.message.startswith(f"duty shift as knob A moves {expected:.3g} pp above")
