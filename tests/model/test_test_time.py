"""Instrument time of readings and knob travel, and the stop order of least travel."""

from __future__ import annotations

import itertools
import math
import random

import pytest

from fixture.errors import UserInputError
from fixture.model.measurement_time import counter_test_time_s
from fixture.model.test_time import EXACT_ORDER_MAX, KnobMotion, least_travel_order, path_travel_s
from fixture.model.uncertainty import CounterGate


def test_travel_time_is_the_angle_turned_over_the_stated_speed() -> None:
    # time = distance / speed (uniform motion). 100 % of a 270 deg knob at 180 deg/s: 270 / 180 = 1.5 s.
    motion = KnobMotion(speed_deg_per_s=180.0, travel_a_deg=270.0, travel_b_deg=300.0)
    assert motion.travel_s((0.0, 50.0), (100.0, 50.0)) == pytest.approx(270.0 / 180.0)
    assert motion.travel_s((100.0, 50.0), (0.0, 50.0)) == pytest.approx(270.0 / 180.0)
    # The KA-2 driver moves knob A, waits until idle, then knob B: the two angles add (no overlap).
    # 25 % of 270 deg plus 40 % of 300 deg = 67.5 + 120 = 187.5 deg.
    assert motion.travel_s((25.0, 10.0), (50.0, 50.0)) == pytest.approx(187.5 / 180.0)
    assert motion.travel_s((30.0, 30.0), (30.0, 30.0)) == 0.0


def test_a_motion_without_a_positive_speed_is_refused() -> None:
    for bad in (0.0, -1.0, math.inf, math.nan):
        with pytest.raises(UserInputError, match="speed_deg_per_s"):
            KnobMotion(speed_deg_per_s=bad)


def test_a_counter_reading_takes_the_gate_rounded_up_to_whole_periods_plus_one_period() -> None:
    # A reciprocal counter's gate opens and closes on signal edges: the set gate is rounded up to whole
    # periods N = ceil(gate / T), and the first edge may be up to one period away (HP Application Note
    # 200, "Fundamentals of the Electronic Counters", reciprocal counting; from memory). Worked here by
    # hand: T = 3.746 ms, gate 100 ms -> 100 / 3.746 = 26.7 -> N = 27, time 28 T = 104.9 ms.
    period = 3.746e-3
    assert counter_test_time_s("frequency_hz", CounterGate(0.1), period) == pytest.approx(28 * period)
    # A gate shorter than a period still averages one period: 1 ms at T = 3.746 ms -> 2 T.
    assert counter_test_time_s("period_s", CounterGate(1e-3), period) == pytest.approx(2 * period)
    # Duty is two measurements (pulse width, then period).
    assert counter_test_time_s("duty_pct", CounterGate(0.1), period) == pytest.approx(2 * 28 * period)


def _brute_force_s(motion: KnobMotion, start, positions) -> float:
    distinct = list(dict.fromkeys(positions))
    return min(path_travel_s(motion, start, list(p)) for p in itertools.permutations(distinct))


@pytest.mark.parametrize("seed", range(12))
def test_the_chosen_order_travels_no_more_than_any_permutation(seed: int) -> None:
    # Compared with trying every order of the distinct stops (common practice, no source: exhaustive
    # search is the definition of the shortest path for a handful of stops).
    rng = random.Random(seed)
    motion = KnobMotion(speed_deg_per_s=rng.choice([90.0, 180.0]), travel_a_deg=270.0,
                        travel_b_deg=rng.choice([270.0, 330.0]))
    n = rng.randint(2, 7)
    positions = tuple((float(rng.choice(range(0, 101, 5))), float(rng.choice(range(0, 101, 5)))) for _ in range(n))
    start = None if seed % 3 == 0 else (float(rng.randint(0, 100)), float(rng.randint(0, 100)))
    order = least_travel_order(motion, start, positions)
    assert sorted(order) == list(range(len(positions)))
    taken = path_travel_s(motion, start, [positions[i] for i in order])
    assert taken == pytest.approx(_brute_force_s(motion, start, positions), abs=1e-12)


def test_a_path_already_shortest_keeps_the_sequences_order() -> None:
    motion = KnobMotion(speed_deg_per_s=180.0)
    stops = tuple((float(a), 50.0) for a in (0, 25, 50, 75, 100))
    assert least_travel_order(motion, (0.0, 50.0), stops) == (0, 1, 2, 3, 4)
    # From the far end the same stops are best taken backwards.
    assert least_travel_order(motion, (100.0, 50.0), stops) == (4, 3, 2, 1, 0)


def test_readings_at_one_position_are_taken_together_in_their_own_order() -> None:
    motion = KnobMotion(speed_deg_per_s=180.0)
    positions = ((0.0, 50.0), (100.0, 50.0), (0.0, 50.0), (50.0, 50.0), (100.0, 50.0))
    order = least_travel_order(motion, None, positions)
    taken = [positions[i] for i in order]
    assert len(list(itertools.groupby(taken))) == 3  # each position visited once
    assert order.index(0) < order.index(2) and order.index(1) < order.index(4)


def test_many_stops_are_ordered_by_the_heuristic_never_worse_than_given() -> None:
    rng = random.Random(7)
    motion = KnobMotion(speed_deg_per_s=180.0)
    positions = tuple((float(rng.randint(0, 100)), float(rng.randint(0, 100))) for _ in range(EXACT_ORDER_MAX + 5))
    order = least_travel_order(motion, None, positions)
    assert sorted(order) == list(range(len(positions)))
    assert path_travel_s(motion, None, [positions[i] for i in order]) <= path_travel_s(motion, None, positions)
