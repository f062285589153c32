"""Decision rules checked against ILAC-G8:09/2019, ANSI/NCSL Z540.3, scipy.stats and seeded simulation."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
from scipy import stats

from fixture.errors import UserInputError
from fixture.model.decision import (
    DecisionRule,
    acceptance_limits,
    false_accept_probability,
    false_reject_probability,
    tur,
)

# An invented tolerance and uncertainty of plausible size (a frequency in Hz).
LOW, HIGH = 480.0, 520.0
U95 = 3.0  # expanded uncertainty, k = 2


def test_guarded_acceptance_at_acceptance_limit_risks_about_2_3_percent_by_simulation():
    u = U95 / 2
    _, acc_high = acceptance_limits(LOW, HIGH, U95, DecisionRule("guarded", 1.0))
    # ILAC-G8:09/2019 specific risk: given a reading x with standard uncertainty u, the true value is N(x, u).
    rng = np.random.default_rng(8_2019)
    true_values = acc_high + u * rng.standard_normal(200_000)
    simulated = float(np.mean((true_values > HIGH) | (true_values < LOW)))
    # ILAC-G8: w = U (k = 2, normal) leaves P(Z > 2) ~ 2.3 % at the acceptance limit; scipy gives P(Z > 2).
    # Binomial standard error of 200 000 draws at p = 0.023 is 0.00033; allow 4 of them.
    assert simulated == pytest.approx(stats.norm.sf(2), abs=4 * 0.00033)
    assert false_accept_probability(acc_high, u, LOW, HIGH) == pytest.approx(simulated, abs=4 * 0.00033)


def test_false_accept_probability_matches_scipy_normal_tails():
    reading, u = 516.5, 1.7
    # Specific risk (ILAC-G8:09/2019): probability mass of N(reading, u) outside [LOW, HIGH], scipy as reference.
    expected = stats.norm.cdf(LOW, reading, u) + stats.norm.sf(HIGH, reading, u)
    assert false_accept_probability(reading, u, LOW, HIGH) == pytest.approx(expected, rel=1e-9)
    assert false_accept_probability(reading, u, None, HIGH) == pytest.approx(stats.norm.sf(HIGH, reading, u),
                                                                             rel=1e-9)
    near_low = 482.0
    assert false_accept_probability(near_low, u, LOW, None) == pytest.approx(stats.norm.cdf(LOW, near_low, u),
                                                                             rel=1e-9)
    # A tolerance narrow enough for both tails to count.
    both = stats.norm.cdf(499.0, 500.5, u) + stats.norm.sf(502.0, 500.5, u)
    assert false_accept_probability(500.5, u, 499.0, 502.0) == pytest.approx(both, rel=1e-9)
    assert false_reject_probability(reading, u, LOW, HIGH) == pytest.approx(1 - expected, rel=1e-12)
    # With no uncertainty the reading is the true value: certain (common practice, no source).
    assert false_accept_probability(reading, 0.0, LOW, HIGH) == 0.0
    assert false_accept_probability(HIGH + 0.1, 0.0, LOW, HIGH) == 1.0


def test_guarded_rejection_at_rejection_limit_rejects_good_units_about_2_3_percent():
    u = U95 / 2
    rej_low, rej_high = acceptance_limits(LOW, HIGH, U95, DecisionRule("guarded-rejection"))
    # ILAC-G8:09/2019 guarded rejection: a reading at TU + U has P(true value inside) = P(Z > 2) (normal).
    assert false_reject_probability(rej_high, u, LOW, HIGH) == pytest.approx(
        stats.norm.sf(2) - stats.norm.sf((rej_high - LOW) / u), rel=1e-9)
    assert (rej_low, rej_high) == pytest.approx((LOW - U95, HIGH + U95))


@pytest.mark.parametrize(("kind", "r", "expected"), [
    # ILAC-G8:09/2019: acceptance limit = tolerance limit - w at the top, + w at the bottom, w = r U;
    # simple acceptance w = 0; guarded rejection has the band outside the tolerance (from memory).
    ("simple", 1.0, (LOW, HIGH)),
    ("guarded", 1.0, (LOW + U95, HIGH - U95)),
    ("guarded", 0.5, (LOW + 0.5 * U95, HIGH - 0.5 * U95)),
    ("guarded-rejection", 1.0, (LOW - U95, HIGH + U95)),
])
def test_acceptance_limits_are_tolerance_limits_moved_by_guard_band(kind, r, expected):
    assert acceptance_limits(LOW, HIGH, U95, DecisionRule(kind, r)) == pytest.approx(expected, rel=1e-15)


def test_one_sided_tolerance_moves_only_its_limit():
    # ILAC-G8:09/2019 treats a single limit the same way (from memory).
    assert acceptance_limits(None, 20.0, 0.4) == (None, pytest.approx(19.6))
    assert acceptance_limits(80.0, None, 0.4) == (pytest.approx(80.4), None)


@pytest.mark.parametrize("u95", [20.0, 25.0])
def test_guard_bands_that_meet_or_cross_are_refused(u95):
    # Common practice, no source: an empty acceptance zone would fail every unit, so the setup is wrong.
    with pytest.raises(UserInputError, match="no acceptance zone"):
        acceptance_limits(LOW, HIGH, u95, DecisionRule("guarded"))
    low, high = acceptance_limits(LOW, HIGH, 19.9, DecisionRule("guarded"))
    assert low < high


def _percentages(text: str) -> list[float]:
    return [float(x) for x in re.findall(r"about ([0-9.]+) %", text)]


@pytest.mark.parametrize("r", [0.5, 1.0, 1.5])
def test_guarded_statement_quotes_the_risk_the_guard_band_gives(r):
    text = DecisionRule("guarded", r).statement()
    assert "ILAC-G8:09/2019" in text and f"w = {r:g} x U" in text and "k = 2" in text
    # The risk at the acceptance limit is P(Z > r k) for a normal distribution (scipy as reference).
    (quoted,) = _percentages(text)
    assert quoted == pytest.approx(100 * stats.norm.sf(2 * r), rel=0.05)


def test_simple_statement_quotes_fifty_percent():
    # ILAC-G8:09/2019 simple acceptance: a reading at the tolerance limit has a specific risk of up to 50 %.
    (quoted,) = _percentages(DecisionRule("simple").statement())
    assert quoted == pytest.approx(100 * stats.norm.sf(0), rel=1e-9)


def test_guarded_rejection_statement_quotes_both_risks():
    text = DecisionRule("guarded-rejection", 1.0).statement(coverage_factor=2.0)
    assert "guarded rejection" in text and "widened" in text
    false_reject, escape = _percentages(text)
    assert false_reject == pytest.approx(100 * stats.norm.sf(2), rel=0.05)  # P(Z > 2), scipy
    assert escape == pytest.approx(100 * stats.norm.cdf(2), rel=0.05)


def test_tur_is_tolerance_span_over_twice_expanded_uncertainty():
    # ANSI/NCSL Z540.3 handbook (from memory): TUR = (upper - lower) / (2 U), U at k = 2.
    assert tur(LOW, HIGH, U95) == pytest.approx((HIGH - LOW) / (2 * U95), rel=1e-15)
    assert tur(LOW, HIGH, 0.0) == math.inf


def test_one_sided_tur_uses_distance_from_expected_value():
    # knobline's own convention (no standard defines one-sided TUR): half-span replaced by limit - value.
    assert tur(None, 20.0, 0.5, value=18.0) == pytest.approx(4.0)
    assert tur(80.0, None, 0.5, value=83.0) == pytest.approx(6.0)
    assert tur(None, 20.0, 0.5, value=21.0) == 0.0
    with pytest.raises(UserInputError, match="one-sided"):
        tur(None, 20.0, 0.5)


@pytest.mark.parametrize("make", [
    lambda: DecisionRule("lenient"),
    lambda: DecisionRule("guarded", -1.0),
    lambda: DecisionRule("guarded", 0.0),
    lambda: acceptance_limits(None, None, 1.0),
    lambda: acceptance_limits(10.0, 5.0, 1.0),
    lambda: acceptance_limits(LOW, HIGH, -1.0),
    lambda: false_accept_probability(500.0, -1.0, LOW, HIGH),
])
def test_impossible_rules_and_limits_are_refused(make):
    # Common practice, no source.
    with pytest.raises(UserInputError):
        make()
