"""Observed first-pass yield per step, the limits readings were judged by, and observed against predicted."""

from __future__ import annotations

import datetime as dt
import math

import pytest

from fixture.analytics.step_yields import compare_to_prediction, judged_limits, step_first_pass
from fixture.analytics.yields import Proportion
from fixture.store import MeasurementRecord, Store
from tests.analytics.conftest import SEQUENCE_SHA, T0, DESIGN_SHA

STEPS = ("power up", "frequency at knob A stops", "duty at knob B stops")


def reading(value: float, verdict: str, u: float = 0.2) -> MeasurementRecord:
    """An invented frequency reading at knob A 25 % with its limits and uncertainty."""
    return MeasurementRecord("counter 25", "frequency_hz", value, "Hz", verdict, knob_a_pct=25.0, knob_b_pct=50.0,
                             tolerance_low=900.0, tolerance_high=1100.0, acceptance_low=900.4,
                             acceptance_high=1099.6, expanded_uncertainty=u, coverage_factor=2.0,
                             decision_rule="guarded")


def run(store: Store, serial: str, verdicts: tuple[str, ...], run_verdict: str, start: dt.datetime = T0) -> int:
    """One run recording ``verdicts`` for the first steps of :data:`STEPS` (fewer: the run stopped)."""
    run_id = store.begin_run(serial, {}, "line-1", "operator", "0.0-test", SEQUENCE_SHA, DESIGN_SHA,
                             started_at=start)
    for index, verdict in enumerate(verdicts):
        readings = [reading(1000.0, verdict)] if STEPS[index] == "frequency at knob A stops" else []
        store.record_step(run_id, index, STEPS[index], verdict, start, start + dt.timedelta(seconds=1), "", readings)
    store.finish_run(run_id, run_verdict, ended_at=start + dt.timedelta(seconds=3))
    return run_id


@pytest.fixture
def batch(store: Store) -> Store:
    later = T0 + dt.timedelta(hours=1)
    run(store, "U1", ("pass", "pass", "pass"), "pass")
    run(store, "U2", ("pass", "fail", "pass"), "fail")
    run(store, "U2", ("pass", "pass", "pass"), "pass", later)  # a retest: not its first pass
    run(store, "U3", ("fail",), "fail")  # a failed power-up ends the run
    run(store, "U4", ("pass", "pass"), "station-fault")  # not judged: counts nowhere
    run(store, "U4", ("pass", "pass", "fail"), "fail", later)  # its first judged run
    return store


def test_each_step_counts_the_units_whose_first_judged_run_reached_it(batch: Store) -> None:
    got = step_first_pass(batch)
    assert got.steps == STEPS
    # Counted by hand from the fixture (common practice, no source): power up 3 of 4 (U3 failed);
    # frequency 2 of 3 (U3 never reached it, U2 failed first time); duty 2 of 3 (U4 failed).
    assert (got.of("power up").passed, got.of("power up").units) == (3, 4)
    assert (got.of("frequency at knob A stops").passed, got.of("frequency at knob A stops").units) == (2, 3)
    assert (got.of("duty at knob B stops").passed, got.of("duty at knob B stops").units) == (2, 3)
    both = got.all_of(["frequency at knob A stops", "duty at knob B stops"])
    assert (both.passed, both.units) == (1, 3)  # only U1 passed both
    assert got.of("no such step").units == 0


def test_the_limits_each_series_was_judged_by_come_back_with_their_uncertainty(batch: Store) -> None:
    (only,) = judged_limits(batch)
    assert only.series.step == "frequency at knob A stops" and only.series.quantity == "frequency_hz"
    assert (only.acceptance_low, only.acceptance_high) == (900.4, 1099.6)
    assert (only.expanded_uncertainty, only.coverage_factor) == (0.2, 2.0)
    assert only.readings == 3 and only.variants == 1  # first judged runs of U1, U2, U4


def test_limits_that_changed_during_the_batch_are_counted_and_the_most_used_set_returned(batch: Store) -> None:
    run_id = batch.begin_run("U5", {}, "line-1", "operator", "0.0-test", SEQUENCE_SHA, DESIGN_SHA,
                                         started_at=T0)
    batch.record_step(run_id, 0, "frequency at knob A stops", "pass", T0, T0, "", [reading(1000.0, "pass", u=0.4)])
    batch.finish_run(run_id, "pass", ended_at=T0)
    (only,) = judged_limits(batch)
    assert only.variants == 2
    assert only.expanded_uncertainty == 0.2 and only.readings == 3  # three readings against one


def two_sided_exact_p(k: int, n: int, p: float) -> float:
    """The exact two-sided binomial p-value by its definition: the total probability of every outcome no
    more likely than the one observed (Clopper and Pearson's exact test; method of small p-values)."""
    pmf = [math.comb(n, i) * p ** i * (1 - p) ** (n - i) for i in range(n + 1)]
    return sum(q for q in pmf if q <= pmf[k] * (1 + 1e-7))


def test_observed_below_the_prediction_is_called_lower_with_the_exact_binomial_p() -> None:
    observed = Proportion.of(47, 59)
    got = compare_to_prediction(observed, 0.995, (0.99, 0.998))
    assert got.direction == "lower"
    # Tested against the interval end nearest the observed yield.
    assert got.p_value == pytest.approx(two_sided_exact_p(47, 59, 0.99), rel=1e-6)


def test_observed_within_chance_of_the_prediction_is_consistent() -> None:
    got = compare_to_prediction(Proportion.of(57, 59), 0.9943, (0.9932, 0.9953))
    assert got.direction == "consistent"
    assert got.p_value == pytest.approx(two_sided_exact_p(57, 59, 0.9932), rel=1e-6)
    assert got.p_value >= 0.05


def test_observed_above_the_prediction_is_called_higher() -> None:
    got = compare_to_prediction(Proportion.of(100, 100), 0.80, (0.79, 0.81))
    assert got.direction == "higher"
    assert got.p_value == pytest.approx(two_sided_exact_p(100, 100, 0.81), rel=1e-6)


def test_no_units_is_unknown_not_consistent() -> None:
    got = compare_to_prediction(Proportion.of(0, 0), 0.9, (0.89, 0.91))
    assert got.direction == "unknown" and got.p_value is None
