"""The built-in integrator + Schmitt relaxation oscillator model."""

from __future__ import annotations

import numpy as np
import pytest

from fixture.model.circuits import IntegratorSchmittModel

MODEL = IntegratorSchmittModel()


def inputs(**overrides: float) -> dict[str, np.ndarray]:
    """A symmetric, ideal circuit (rails 0..10 V, Vref 5 V) unless overridden. Values are ours."""
    v = dict(supply_v=10.0, opamp_low_v=0.0, opamp_headroom_v=0.0, opamp_slew_v_per_s=1e15,
             opamp_delay_s=0.0, r_ref_top=10e3, r_ref_bottom=10e3, r_schmitt_in=10e3, r_schmitt_fb=20e3,
             r_integrator=10e3, c_integrator=100e-9, r_threshold_top=10e3, r_threshold_bottom=10e3,
             knob_a_ccw_ohm=5e3, knob_a_cw_ohm=5e3, knob_b_ccw_ohm=5e3, knob_b_cw_ohm=5e3)
    v.update(overrides)
    return {k: np.asarray(x, dtype=float) for k, x in v.items()}


@pytest.mark.parametrize(("r_a", "r_b", "r_int", "cap"), [(10e3, 20e3, 15e3, 100e-9), (4.7e3, 22e3, 33e3, 47e-9),
                                                          (10e3, 10e3, 1e3, 1e-6)])
def test_symmetric_ideal_case_equals_textbook_triangle_generator_frequency(r_a, r_b, r_int, cap) -> None:
    # Integrator + non-inverting Schmitt square/triangle generator: f = R2 / (4 R1 R C)
    # with R1 the Schmitt input and R2 its feedback resistor (Sedra & Smith, Microelectronic
    # Circuits, section on astable multivibrators / triangle generators; from memory).
    v = inputs(r_schmitt_in=r_a, r_schmitt_fb=r_b, r_integrator=r_int, knob_a_cw_ohm=0.0, c_integrator=cap)
    f = float(MODEL.evaluate(v).frequency_hz)
    assert f == pytest.approx(r_b / (4 * r_a * r_int * cap), rel=1e-9)


def test_symmetric_triangle_peaks_are_vref_plus_minus_half_swing_times_resistor_ratio() -> None:
    # Same textbook derivation: triangle peak = +/- (R1/R2) * Vsat about the reference (from memory).
    lv = MODEL.levels(inputs())
    assert float(lv["v_high"]) == pytest.approx(5.0 + 5.0 * 10e3 / 20e3)
    assert float(lv["v_low"]) == pytest.approx(5.0 - 5.0 * 10e3 / 20e3)


def test_slew_and_delay_lengthen_a_symmetric_period_by_two_slews_and_four_delays() -> None:
    # Derived in the model's docstring for a piecewise-linear square wave; the ngspice
    # cross-check (test_against_ngspice.py) is the independent confirmation of the slew term.
    swing, slew, delay = 10.0, 0.5e6, 1e-6
    ideal = float(MODEL.evaluate(inputs()).period_s)
    real = float(MODEL.evaluate(inputs(opamp_slew_v_per_s=slew, opamp_delay_s=delay)).period_s)
    assert real - ideal == pytest.approx(2 * swing / slew + 4 * delay, rel=1e-9)


def test_slow_op_amp_lowers_a_few_hundred_hertz_oscillator_by_about_one_percent() -> None:
    # Order of magnitude the issue states for a ~0.5 V/us general-purpose op-amp (common practice).
    ideal = float(MODEL.evaluate(inputs()).frequency_hz)
    slow = float(MODEL.evaluate(inputs(opamp_slew_v_per_s=0.5e6)).frequency_hz)
    assert 300 < ideal < 700
    assert -0.03 < slow / ideal - 1 < -0.005


@pytest.mark.parametrize("low_v,headroom_v", [(0.0, 0.0), (0.05, 1.5), (1.0, 0.2)])
def test_ideal_duty_is_the_fraction_of_the_triangle_above_the_threshold_whatever_the_swing(low_v, headroom_v) -> None:
    # For linear ramps the time above a level is the same fraction of each ramp, so
    # duty = (V_H - V_th) / (V_H - V_L) independently of asymmetric slopes (geometry; common practice).
    v = inputs(opamp_low_v=low_v, opamp_headroom_v=headroom_v, knob_b_cw_ohm=np.linspace(3.5e3, 6.5e3, 7),
               knob_b_ccw_ohm=10e3 - np.linspace(3.5e3, 6.5e3, 7))
    lv = MODEL.levels(v)
    expected = (lv["v_high"] - lv["v_threshold"]) / (lv["v_high"] - lv["v_low"])
    np.testing.assert_allclose(MODEL.evaluate(v).duty, expected, rtol=1e-9)


def test_duty_clips_to_zero_and_one_when_the_threshold_leaves_the_triangle() -> None:
    above = inputs(r_threshold_top=1e3, knob_b_cw_ohm=10e3, knob_b_ccw_ohm=0.0)
    below = inputs(r_threshold_bottom=1e3, r_threshold_top=100e3, knob_b_cw_ohm=0.0, knob_b_ccw_ohm=10e3)
    assert float(MODEL.evaluate(above).duty) == 0.0
    assert float(MODEL.evaluate(below).duty) == pytest.approx(1.0)


def test_duty_stays_continuous_when_the_threshold_sits_in_the_rounded_turn_of_a_slow_triangle() -> None:
    slow = dict(opamp_slew_v_per_s=0.2e6, opamp_delay_s=2e-6)
    lv = MODEL.levels(inputs())
    # thresholds sweeping through the top turn, where the triangle is a parabola
    v_th = np.linspace(float(lv["v_high"]) - 0.05, float(lv["v_high"]) + 0.05, 201)
    r_total = 20e3 + 10e3
    cw = v_th / 10.0 * r_total - 10e3
    duty = MODEL.evaluate(inputs(**slow, knob_b_cw_ohm=cw, knob_b_ccw_ohm=10e3 - cw)).duty
    assert np.all(np.diff(duty) <= 1e-12)  # monotonic: a higher threshold never raises the duty
    assert np.max(np.abs(np.diff(duty))) < 2e-3  # no jump anywhere


def test_model_is_vectorised_and_agrees_with_scalar_evaluation() -> None:
    caps = np.array([90e-9, 100e-9, 110e-9])
    vector = MODEL.evaluate(inputs(c_integrator=caps, opamp_slew_v_per_s=0.5e6))
    for i, c in enumerate(caps):
        scalar = MODEL.evaluate(inputs(c_integrator=c, opamp_slew_v_per_s=0.5e6))
        assert float(vector.period_s[i]) == pytest.approx(float(scalar.period_s), rel=1e-15)


def test_check_reports_a_threshold_outside_the_triangle() -> None:
    problems = MODEL.check(inputs(r_threshold_top=1e3, knob_b_cw_ohm=10e3, knob_b_ccw_ohm=0.0))
    assert [p.key for p in problems] == ["parts.r_threshold_top/r_threshold_bottom"]
    assert "clips at 0 %" in problems[0].found


def test_check_reports_an_integrator_that_would_saturate() -> None:
    problems = MODEL.check(inputs(r_schmitt_in=30e3, r_schmitt_fb=20e3))
    assert any("integrator would saturate" in p.found for p in problems)


def test_check_passes_a_sound_design() -> None:
    assert MODEL.check(inputs(opamp_slew_v_per_s=0.5e6)) == []
