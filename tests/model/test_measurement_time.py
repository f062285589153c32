"""The shortest setting that reaches a target TUR, checked by brute force over the same candidates.

Instrument and signal figures are invented test inputs of plausible size.
"""

from __future__ import annotations

import math
from fractions import Fraction

import pytest

from fixture.errors import UserInputError
from fixture.model.decision import tur
from fixture.model.measurement_time import (
    DEFAULT_GATE_TIMES_S,
    counter_test_time_s,
    scope_timebases,
    scope_test_time_s,
    series_1_2_5,
    shortest_counter_gate,
    shortest_scope_record,
)
from fixture.model.uncertainty import (
    CounterAccuracy,
    CounterGate,
    ScopeAccuracy,
    ScopeTimebase,
    SignalFacts,
    counter_budget,
    quantity_value,
    scope_budget,
)

PERIOD_S = 1.0 / 737.0
FACTS = SignalFacts(period_s=PERIOD_S, high_s=0.42 * PERIOD_S, swing_v=10.0, slew_rise_v_per_s=5e5,
                    noise_v_rms=8e-3)
COUNTER = CounterAccuracy(timebase_error=1e-6, resolution_s=1e-9, trigger_level_error_v=5e-3,
                          input_noise_v_rms=500e-6)
SCOPE = ScopeAccuracy(timebase_error=25e-6, noise_v_rms=5e-3, vertical_resolution_v=0.08)


def _brute_force_tur(budget, low, high, quantity):
    # ANSI/NCSL Z540.3 handbook TUR with U at k = 2 (from memory), one-sided about the expected value.
    return tur(low, high, 2 * budget.combined_standard_uncertainty, value=quantity_value(quantity, FACTS))


# Tolerances chosen so that the answer lies inside the gate list, not at its first entry.
@pytest.mark.parametrize(("quantity", "low", "high"), [
    ("frequency_hz", 736.95, 737.05),
    ("frequency_hz", 736.99, 737.01),
    ("period_s", PERIOD_S * (1 - 1e-5), PERIOD_S * (1 + 1e-5)),
    ("duty_pct", 41.99, 42.01),
    ("duty_pct", None, 42.012),
    ("high_time_s", 0.42 * PERIOD_S - 100e-9, 0.42 * PERIOD_S + 100e-9),
])
def test_chosen_gate_is_shortest_that_meets_target(quantity, low, high):
    choice = shortest_counter_gate(quantity, FACTS, COUNTER, low, high, target_tur=4.0)
    # Brute force, common practice: evaluate every gate in the list, keep those reaching the target.
    ratios = {g: _brute_force_tur(counter_budget(quantity, FACTS, COUNTER, CounterGate(g)), low, high, quantity)
              for g in DEFAULT_GATE_TIMES_S}
    good = [g for g, ratio in ratios.items() if ratio >= 4.0]
    assert good, "test case must be reachable"
    assert choice.meets_target
    assert min(good) > DEFAULT_GATE_TIMES_S[0]
    assert choice.setting.gate_time_s == min(good)
    assert choice.tur == pytest.approx(ratios[min(good)], rel=1e-12)
    assert "reaches TUR" in choice.message


def test_unreachable_target_is_reported_with_best_setting():
    # With a 1e-6 time base, a ±1 ppm tolerance can never reach TUR 4 (U >= 2 * 1e-6 / sqrt(3) relative).
    low, high = 737.0 * (1 - 1e-6), 737.0 * (1 + 1e-6)
    choice = shortest_counter_gate("frequency_hz", FACTS, COUNTER, low, high, target_tur=4.0)
    ratios = [_brute_force_tur(counter_budget("frequency_hz", FACTS, COUNTER, CounterGate(g)), low, high,
                               "frequency_hz") for g in DEFAULT_GATE_TIMES_S]
    assert max(ratios) < 4.0
    assert not choice.meets_target
    assert choice.tur == pytest.approx(max(ratios), rel=1e-12)
    assert "no candidate reaches TUR 4" in choice.message and "time base" in choice.message
    # The best is found wherever it sits in the candidate list.
    reverse = shortest_counter_gate("frequency_hz", FACTS, COUNTER, low, high, target_tur=4.0,
                                    gate_times_s=DEFAULT_GATE_TIMES_S[::-1])
    assert reverse.setting == choice.setting and not reverse.meets_target


@pytest.mark.parametrize(("quantity", "low", "high"), [
    ("frequency_hz", 736.9, 737.1),
    ("duty_pct", 41.98, 42.02),
    ("high_time_s", 0.42 * PERIOD_S - 0.2e-6, 0.42 * PERIOD_S + 0.2e-6),
])
def test_chosen_scope_record_is_shortest_that_meets_target(quantity, low, high):
    candidates = scope_timebases(1e6, 1000, 10_000_000)
    choice = shortest_scope_record(quantity, FACTS, SCOPE, low, high, candidates=candidates, target_tur=4.0)
    good = []
    for settings in candidates:  # brute force, common practice
        if settings.whole_periods(PERIOD_S) < 1:
            continue
        if _brute_force_tur(scope_budget(quantity, FACTS, SCOPE, settings), low, high, quantity) >= 4.0:
            good.append(settings.record_length)
    assert good and choice.meets_target
    assert min(good) > candidates[0].record_length
    assert choice.setting.record_length == min(good)


def test_records_too_short_for_a_period_are_never_chosen():
    too_short = ScopeTimebase(1e6, 1000)  # 1 ms < one 1.36 ms period
    long_enough = ScopeTimebase(1e6, 5000)
    choice = shortest_scope_record("frequency_hz", FACTS, SCOPE, 736.0, 738.0, candidates=[too_short, long_enough])
    assert choice.setting == long_enough
    alone = shortest_scope_record("frequency_hz", FACTS, SCOPE, 736.0, 738.0, candidates=[too_short])
    assert not alone.meets_target and alone.tur == 0.0 and alone.budget is None


def test_counter_test_time_counts_whole_periods_plus_one_and_overhead():
    # knobline's model (common practice, no source): the gate rounded up to whole periods, up to one more
    # period waiting for the first edge, then the overhead; duty needs a width and a period measurement.
    gate_s, overhead_s = 0.01, 0.003
    n = math.ceil(Fraction(gate_s) / Fraction(PERIOD_S))
    one = (n + 1) * PERIOD_S + overhead_s
    assert counter_test_time_s("frequency_hz", CounterGate(gate_s), PERIOD_S, overhead_s) == pytest.approx(one)
    assert counter_test_time_s("duty_pct", CounterGate(gate_s), PERIOD_S, overhead_s) == pytest.approx(2 * one)
    settings = ScopeTimebase(2e6, 20_000)
    assert scope_test_time_s(settings, PERIOD_S, overhead_s) == pytest.approx(0.01 + PERIOD_S + overhead_s)


def test_series_follows_1_2_5_steps():
    # The 1-2-5 sequence of counter gate times and scope settings (common practice, no source).
    assert series_1_2_5(1e-3, 1.0) == (0.001, 0.002, 0.005, 0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1.0)
    assert series_1_2_5(1e-3, 10.0, mantissas=(1,)) == (0.001, 0.01, 0.1, 1.0, 10.0)
    assert series_1_2_5(2000, 20_000) == (2000.0, 5000.0, 10_000.0, 20_000.0)
    assert series_1_2_5(1e-11, 1e-10) == (1e-11, 2e-11, 5e-11, 1e-10)  # as their decimal names read
    with pytest.raises(UserInputError):
        series_1_2_5(1.0, 0.1)


def test_search_refuses_empty_candidates_and_bad_target():
    # Common practice, no source.
    with pytest.raises(UserInputError):
        shortest_counter_gate("frequency_hz", FACTS, COUNTER, 736.0, 738.0, gate_times_s=())
    with pytest.raises(UserInputError):
        shortest_counter_gate("frequency_hz", FACTS, COUNTER, 736.0, 738.0, target_tur=0.0)
