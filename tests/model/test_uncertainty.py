"""Uncertainty budgets checked against GUM formulas, scipy.stats, the `uncertainties` package and brute force.

The instrument and signal figures below are invented test inputs of plausible size; every expected value is
computed here from a published formula or by an independent method, never copied from the code under test.
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from scipy import stats
from uncertainties import ufloat

from fixture.errors import UserInputError
from fixture.model.uncertainty import (
    CounterAccuracy,
    CounterGate,
    ScopeAccuracy,
    ScopeTimebase,
    SignalFacts,
    UncertaintyBudget,
    UncertaintyComponent,
    counter_budget,
    coverage_probability,
    interpolation_error_bound_s,
    period_weights,
    quantity_value,
    scope_budget,
)

PERIOD_S = 1.0 / 1234.5
HIGH_S = 0.37 * PERIOD_S
SLEW_RISE = 4.0e5  # V/s
SLEW_FALL = 2.5e5  # V/s
FACTS = SignalFacts(period_s=PERIOD_S, high_s=HIGH_S, swing_v=9.0, slew_rise_v_per_s=SLEW_RISE,
                    slew_fall_v_per_s=SLEW_FALL, noise_v_rms=3e-3)
COUNTER = CounterAccuracy(timebase_error=2e-6, resolution_s=500e-12, trigger_level_error_v=15e-3,
                          input_noise_v_rms=300e-6, time_interval_error_s=1e-9)
SCOPE = ScopeAccuracy(timebase_error=50e-6, noise_v_rms=4e-3, vertical_resolution_v=20.0 / 256)
QUANTITY_NAMES = ("frequency_hz", "period_s", "duty_pct", "high_time_s")


def component(budget: UncertaintyBudget, starts: str) -> UncertaintyComponent:
    found = [c for c in budget.components if c.name.startswith(starts)]
    assert len(found) == 1, [c.name for c in budget.components]
    return found[0]


def test_rectangular_bound_becomes_a_over_sqrt3():
    budget = counter_budget("period_s", FACTS, COUNTER, CounterGate(0.01))
    a = COUNTER.timebase_error * PERIOD_S
    # GUM JCGM 100:2008 4.3.7: a quantity equally likely anywhere in ±a has u = a/sqrt(3);
    # scipy's uniform distribution on [-a, a] gives the same standard deviation independently.
    assert component(budget, "time base").standard_uncertainty == pytest.approx(stats.uniform(-a, 2 * a).std(),
                                                                                rel=1e-12)


def test_adc_step_becomes_q_over_sqrt12_at_each_crossing():
    settings = ScopeTimebase(sample_rate_hz=2e6, record_length=20_000)
    budget = scope_budget("period_s", FACTS, SCOPE, settings)
    q = SCOPE.vertical_resolution_v
    n = math.floor(settings.record_duration_s / PERIOD_S) + 1  # rising crossings
    # GUM F.2.2.1: rounding to a step q is rectangular in ±q/2, u = q/sqrt(12) (scipy's uniform as reference);
    # the least-squares slope over n points has variance sigma^2 / sum((i - mean)^2) (ordinary least squares).
    sxx = np.sum((np.arange(n) - (n - 1) / 2) ** 2)
    expected = stats.uniform(-q / 2, q).std() / SLEW_RISE / math.sqrt(sxx)
    assert component(budget, "ADC quantisation").standard_uncertainty == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("k", [1.0, 2.0, 3.0])
def test_coverage_factor_matches_normal_distribution(k):
    # GUM 6.3.3 / G.1.3: k = 2 covers about 95.45 % of a normal distribution; scipy.stats.norm is the reference.
    assert coverage_probability(k) == pytest.approx(stats.norm.cdf(k) - stats.norm.cdf(-k), abs=1e-12)
    budget = counter_budget("frequency_hz", FACTS, COUNTER, CounterGate(0.1))
    assert budget.coverage_factor == 2.0
    assert budget.expanded_uncertainty == pytest.approx(2.0 * budget.combined_standard_uncertainty, rel=1e-15)


def test_combined_uncertainty_is_root_sum_square_of_components():
    budget = counter_budget("high_time_s", FACTS, COUNTER, CounterGate(0.01))
    us = np.array([c.standard_uncertainty for c in budget.components])
    # GUM eq. (10), uncorrelated inputs with sensitivities folded in: u_c = sqrt(sum u_i^2).
    assert budget.combined_standard_uncertainty == pytest.approx(float(np.sqrt(np.sum(us ** 2))), rel=1e-12)
    assert budget.combined_standard_uncertainty < us.sum()  # not a linear sum


def _counter_model(quantity: str, n: int):
    """The counter reading as a function of its error sources, for `uncertainties` to propagate.

    Each input's standard uncertainty is written from its source formula (HP AN 200-3 trigger error
    noise/slew per edge, from memory; GUM 4.3.7 for bounds); the time base is ONE shared input.
    """
    s_r, s_f, sig_in, sig_s = SLEW_RISE, SLEW_FALL, COUNTER.input_noise_v_rms, FACTS.noise_v_rms
    timebase = ufloat(0.0, COUNTER.timebase_error / math.sqrt(3))
    period_errors = [ufloat(0.0, COUNTER.resolution_s / math.sqrt(3) / n),
                     ufloat(0.0, math.sqrt(2) * sig_in / s_r / n), ufloat(0.0, math.sqrt(2) * sig_s / s_r / n)]
    width_errors = [ufloat(0.0, COUNTER.resolution_s / math.sqrt(3) / math.sqrt(n)),
                    ufloat(0.0, sig_in * math.hypot(1 / s_r, 1 / s_f) / math.sqrt(n)),
                    ufloat(0.0, sig_s * math.hypot(1 / s_r, 1 / s_f) / math.sqrt(n)),
                    ufloat(0.0, COUNTER.trigger_level_error_v * (1 / s_r + 1 / s_f) / math.sqrt(3)),
                    ufloat(0.0, COUNTER.time_interval_error_s / math.sqrt(3))]
    period = (PERIOD_S + sum(period_errors)) * (1 + timebase)
    width = (HIGH_S + sum(width_errors)) * (1 + timebase)
    return {"period_s": period, "frequency_hz": 1 / period, "high_time_s": width,
            "duty_pct": 100 * width / period}[quantity]


@pytest.mark.parametrize("quantity", QUANTITY_NAMES)
def test_counter_budget_matches_uncertainties_propagation(quantity):
    gate_s = 0.02
    n = math.ceil(Fraction(gate_s) / Fraction(PERIOD_S))
    reference = _counter_model(quantity, n)
    budget = counter_budget(quantity, FACTS, COUNTER, CounterGate(gate_s))
    # The `uncertainties` package propagates to first order with the correlation of the shared time base,
    # i.e. GUM eq. (13); it must agree with our budget, where the time base cancels in the duty.
    assert budget.value == pytest.approx(reference.nominal_value, rel=1e-12)
    assert budget.combined_standard_uncertainty == pytest.approx(reference.std_dev, rel=1e-9)


@pytest.mark.parametrize("quantity", ["frequency_hz", "duty_pct"])
def test_scope_budget_matches_uncertainties_propagation(quantity):
    settings = ScopeTimebase(sample_rate_hz=250e3, record_length=50_000)  # 4 us samples: edges of 22-36 us
    m = math.floor(settings.record_duration_s / PERIOD_S)
    n = m + 1
    x = np.arange(n) - (n - 1) / 2
    sxx = np.sum(x ** 2)
    sigma_v = math.sqrt(SCOPE.noise_v_rms ** 2 + SCOPE.vertical_resolution_v ** 2 / 12 + FACTS.noise_v_rms ** 2)
    timebase = ufloat(0.0, SCOPE.timebase_error / math.sqrt(3))
    # Least-squares slope of the crossing times (ordinary least squares, from memory): sigma_t / sqrt(Sxx).
    period = (PERIOD_S + ufloat(0.0, sigma_v / SLEW_RISE / math.sqrt(sxx))) * (1 + timebase)
    width = (HIGH_S + ufloat(0.0, sigma_v * math.hypot(1 / SLEW_RISE, 1 / SLEW_FALL) / math.sqrt(m))) * (1 + timebase)
    reference = 1 / period if quantity == "frequency_hz" else 100 * width / period
    budget = scope_budget(quantity, FACTS, SCOPE, settings)
    assert budget.combined_standard_uncertainty == pytest.approx(reference.std_dev, rel=1e-9)


def test_counter_resolution_term_falls_as_one_over_n():
    gates = [1e-3, 1e-2, 1e-1, 1.0]
    ns, terms = [], []
    for gate in gates:
        # A reciprocal counter averages the whole periods started in the gate, N = ceil(gate * f)
        # (common practice, from memory); Fraction keeps the reference free of rounding.
        n = math.ceil(Fraction(gate) / Fraction(PERIOD_S))
        assert CounterGate(gate).averaged_periods(PERIOD_S) == n
        budget = counter_budget("period_s", FACTS, COUNTER, CounterGate(gate))
        ns.append(n)
        terms.append(component(budget, "resolution").standard_uncertainty)
    assert ns == sorted(ns) and len(set(ns)) == len(ns)
    # ±1 count on an N-period interval: a = resolution / N, rectangular (GUM 4.3.7).
    for n, term in zip(ns, terms, strict=True):
        assert term == pytest.approx(COUNTER.resolution_s / (math.sqrt(3) * n), rel=1e-12)
    assert terms[0] / terms[-1] == pytest.approx(ns[-1] / ns[0], rel=1e-12)


@pytest.mark.parametrize(("gate", "period", "expected"), [("0.3", "0.1", 3), ("0.35", "0.1", 4),
                                                          ("0", "0.1", 1), ("0.001", "0.0025", 1)])
def test_averaged_periods_counts_periods_started_in_gate(gate, period, expected):
    # ceil(gate / period), at least one (common practice for reciprocal counters, from memory).
    assert max(1, math.ceil(Fraction(gate) / Fraction(period))) == expected
    assert CounterGate(float(gate)).averaged_periods(float(period)) == expected


SCOPE_WITH_THRESHOLD_ERROR = ScopeAccuracy(timebase_error=50e-6, noise_v_rms=4e-3, vertical_resolution_v=0.08,
                                           threshold_error_v=COUNTER.trigger_level_error_v)


@pytest.mark.parametrize(("budget", "name"), [
    (counter_budget("high_time_s", FACTS, COUNTER, CounterGate(0.01)), "trigger level"),
    (scope_budget("high_time_s", FACTS, SCOPE_WITH_THRESHOLD_ERROR, ScopeTimebase(1e6, 10_000)), "threshold level"),
])
def test_level_error_moves_width_by_both_edges(budget, name):
    # Independent check: find the crossings of a finely sampled trapezoid pulse numerically at two levels.
    t = np.linspace(0, PERIOD_S, 400_001)
    rise_end = 9.0 / SLEW_RISE
    v = np.minimum(t * SLEW_RISE, 9.0)
    fall_start = HIGH_S
    v = np.where(t > fall_start, np.maximum(9.0 - (t - fall_start) * SLEW_FALL, 0.0), v)
    assert rise_end < fall_start

    def width_at(level: float) -> float:
        rising = np.interp(level, v[t <= fall_start], t[t <= fall_start])
        falling = np.interp(-level, -v[t > fall_start], t[t > fall_start])
        return falling - rising

    dv = COUNTER.trigger_level_error_v
    shift = abs(width_at(4.5 + dv) - width_at(4.5))
    # The budget carries that shift as a rectangular bound (GUM 4.3.7): u * sqrt(3) is the bound.
    assert component(budget, name).standard_uncertainty * math.sqrt(3) == pytest.approx(shift, rel=1e-4)


@pytest.mark.parametrize("ratio", [0.0, 0.2, 0.5, 0.8, 1.0, 1.5, 1.9, 2.0, 3.0])
def test_interpolation_bound_matches_brute_force(ratio):
    ts = 1.0
    edge = ratio * ts
    phases = np.linspace(0.0, ts, 20_001, endpoint=False)
    times = phases[:, None] + ts * np.arange(-4, 5)[None, :]  # samples around a crossing at t = 0
    values = np.where(times < 0, -0.5, 0.5) if edge == 0 else np.clip(times / edge, -0.5, 0.5)
    after = np.argmax(values > 0, axis=1)  # first sample above the mid level
    rows = np.arange(len(phases))
    t0, t1 = times[rows, after - 1], times[rows, after]
    v0, v1 = values[rows, after - 1], values[rows, after]
    crossing = t0 + (0 - v0) * (t1 - t0) / (v1 - v0)
    worst = float(np.max(np.abs(crossing)))
    # Our own derivation of the bound; the brute force over sampling phases must reach it and never exceed it.
    bound = interpolation_error_bound_s(ts, edge)
    assert worst <= bound + 1e-12
    assert worst == pytest.approx(bound, abs=2e-4 * ts)


@pytest.mark.parametrize("cycles", [1, 2, 5, 50, 51])
def test_least_squares_period_weights_match_numpy(cycles):
    n = cycles + 1
    design = np.column_stack([np.ones(n), np.arange(n)])
    slope_weights = np.linalg.pinv(design)[1]  # the OLS slope is this row of the pseudo-inverse
    sum_w2, sum_abs_w = period_weights(cycles)
    assert sum_w2 == pytest.approx(float(np.sum(slope_weights ** 2)), rel=1e-9)
    assert sum_abs_w == pytest.approx(float(np.sum(np.abs(slope_weights))), rel=1e-9)


def test_coarse_sampling_adds_worst_case_interpolation_error():
    settings = ScopeTimebase(sample_rate_hz=50e3, record_length=1000)  # 20 us samples: edges of 22.5 and 36 us
    m = math.floor(settings.record_duration_s / PERIOD_S)
    a_rise = interpolation_error_bound_s(20e-6, 9.0 / SLEW_RISE)
    a_fall = interpolation_error_bound_s(20e-6, 9.0 / SLEW_FALL)
    assert a_rise > 0 and a_fall > 0
    design = np.column_stack([np.ones(m + 1), np.arange(m + 1)])
    worst_slope = a_rise * float(np.sum(np.abs(np.linalg.pinv(design)[1])))  # worst case of an OLS slope
    period = scope_budget("period_s", FACTS, SCOPE, settings)
    width = scope_budget("high_time_s", FACTS, SCOPE, settings)
    # Bounds carried as rectangular (GUM 4.3.7); a width takes one rising and one falling crossing.
    assert component(period, "crossing interpolation").standard_uncertainty == pytest.approx(
        worst_slope / math.sqrt(3), rel=1e-9)
    assert component(width, "crossing interpolation").standard_uncertainty == pytest.approx(
        (a_rise + a_fall) / math.sqrt(3), rel=1e-12)


def test_least_squares_period_noise_matches_monte_carlo():
    cycles, sigma_t = 40, 1e-7
    rng = np.random.default_rng(20240611)
    i = np.arange(cycles + 1)
    crossings = i[:, None] * PERIOD_S + sigma_t * rng.standard_normal((cycles + 1, 20_000))
    slopes = np.polyfit(i, crossings, 1)[0]
    sum_w2, _ = period_weights(cycles)
    # Slope variance sigma^2 / Sxx (ordinary least squares, from memory), about sqrt(12) sigma / M^(3/2);
    # 20 000 draws estimate a standard deviation to about 0.5 %.
    assert float(np.std(slopes)) == pytest.approx(sigma_t * math.sqrt(sum_w2), rel=0.03)
    assert math.sqrt(sum_w2) == pytest.approx(math.sqrt(12) / cycles ** 1.5, rel=0.05)


def test_scope_record_shorter_than_a_period_is_refused():
    short = ScopeTimebase(sample_rate_hz=1e6, record_length=int(0.9 * PERIOD_S * 1e6))
    with pytest.raises(UserInputError, match="whole period"):
        scope_budget("period_s", FACTS, SCOPE, short)


def test_values_convert_between_frequency_period_and_duty_percent():
    # Frequency is 1/period; duty cycle is pulse duration over period (IEC 60469, from memory), here in percent.
    assert quantity_value("frequency_hz", FACTS) == pytest.approx(1234.5, rel=1e-12)
    assert quantity_value("period_s", FACTS) == PERIOD_S
    assert quantity_value("duty_pct", FACTS) == pytest.approx(37.0, rel=1e-12)
    assert quantity_value("high_time_s", FACTS) == HIGH_S
    with pytest.raises(UserInputError, match="expected one of"):
        quantity_value("duty", FACTS)


def test_budget_names_dominant_component_and_shares_sum_to_whole():
    sloppy = CounterAccuracy(timebase_error=1e-3, resolution_s=1e-9, trigger_level_error_v=0.0, input_noise_v_rms=0.0)
    budget = counter_budget("frequency_hz", FACTS, sloppy, CounterGate(1.0))
    assert budget.dominant.name == "time base"
    shares = [float(row[2].rstrip(" %")) for row in budget.rows()]
    assert sum(shares) == pytest.approx(100.0, abs=0.1 * len(shares))  # common practice, no source
    assert "U = " in budget.summary() and "k = 2" in budget.summary()


@pytest.mark.parametrize("make", [
    lambda: SignalFacts(period_s=1e-3, high_s=1e-3, swing_v=5, slew_rise_v_per_s=1e6),
    lambda: SignalFacts(period_s=-1e-3, high_s=1e-4, swing_v=5, slew_rise_v_per_s=1e6),
    lambda: CounterAccuracy(timebase_error=float("nan"), resolution_s=1e-9, trigger_level_error_v=0,
                            input_noise_v_rms=0),
    lambda: ScopeAccuracy(timebase_error=1e-5, noise_v_rms=-1e-3, vertical_resolution_v=0.01),
    lambda: ScopeTimebase(sample_rate_hz=1e6, record_length=1),
    lambda: UncertaintyComponent("x", -1.0, "normal", "datasheet"),
    lambda: UncertaintyBudget("period_s", "s", 1e-3, ()),
])
def test_impossible_inputs_are_refused(make):
    # common practice, no source: a budget built on nonsense must not come out as a number.
    with pytest.raises(UserInputError):
        make()
