"""Predicted first-pass yield: Monte Carlo units judged against acceptance limits with measurement error."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from scipy.stats import multivariate_normal, norm

from fixture.files.design_file import load_design
from fixture.model.decision import DecisionRule, acceptance_limits
from fixture.model.first_pass import AcceptanceWindow, limit_row_windows, predict_first_pass
from fixture.model.limits import compute_limits
from fixture.model.tolerance.monte_carlo import McDistribution, McOptions, McResult
from fixture.model.tolerance.space import KnobSetting

DEMO = "sequences/demo-panel.toml"
SETTING = KnobSetting("a", 50.0, 50.0, 50.0)


def one_normal_quantity(mean: float, sd: float, n: int, seed: int = 7) -> McResult:
    """A Monte Carlo result holding one normally distributed quantity (our own synthetic population)."""
    values = np.random.default_rng(seed).normal(mean, sd, n)
    dist = McDistribution(mean=mean, std=sd, minimum=float(values.min()), maximum=float(values.max()),
                          low=float(values.min()), high=float(values.max()), values=values)
    return McResult(options=McOptions(samples=n, seed=seed), distributions={(SETTING, "frequency_hz"): dist},
                    spec_yield={}, joint_spec_yield=None)


def window(low: float, high: float, g: float, u: float) -> AcceptanceWindow:
    return AcceptanceWindow(50.0, 50.0, "frequency_hz", acceptance_low=low + g, acceptance_high=high - g,
                            standard_uncertainty=u, tolerance_low=low, tolerance_high=high)


def rectangle(mvn, x: tuple[float, float], y: tuple[float, float]) -> float:
    """P(x0 < X < x1, y0 < Y < y1) of a bivariate normal by inclusion-exclusion of its cdf."""
    return float(mvn.cdf([x[1], y[1]]) - mvn.cdf([x[0], y[1]]) - mvn.cdf([x[1], y[0]]) + mvn.cdf([x[0], y[0]]))


@pytest.mark.parametrize(("mean", "sd", "u", "g"), [(1000.0, 30.0, 15.0, 30.0), (1040.0, 25.0, 10.0, 20.0),
                                                    (1000.0, 40.0, 0.0, 0.0)])
def test_single_normal_quantity_matches_the_closed_form(mean: float, sd: float, u: float, g: float) -> None:
    low, high, n = 920.0, 1080.0, 400_000
    mc = one_normal_quantity(mean, sd, n)
    prediction = predict_first_pass(mc, {"step": [window(low, high, g, u)]})
    got = prediction.groups["step"]
    # Reference: X ~ N(mean, sd) and E ~ N(0, u) independent, so the reading X + E ~ N(mean, sqrt(sd^2 + u^2))
    # (sum of independent normals, any statistics handbook); its probability between the acceptance limits
    # from scipy.stats.norm.
    s = math.hypot(sd, u)
    expected = norm.cdf(high - g, mean, s) - norm.cdf(low + g, mean, s)
    standard_error = math.sqrt(expected * (1 - expected) / n)
    assert got.accepted.fraction == pytest.approx(expected, abs=4 * standard_error)
    lo, hi = got.accepted.interval()
    assert lo - 2 * standard_error <= expected <= hi + 2 * standard_error
    # JCGM 106:2012 9.5 (from memory): conforming and accepted is the rectangle probability of the
    # bivariate normal (X, X + E), covariance [[sd^2, sd^2], [sd^2, sd^2 + u^2]]; the false rejects are the
    # conforming units less those; scipy.stats.multivariate_normal gives the rectangle.
    conforming = norm.cdf(high, mean, sd) - norm.cdf(low, mean, sd)
    assert got.conforming.fraction == pytest.approx(conforming, abs=4 * math.sqrt(conforming * (1 - conforming) / n))
    if u > 0:
        mvn = multivariate_normal(mean=[mean, mean], cov=[[sd ** 2, sd ** 2], [sd ** 2, sd ** 2 + u ** 2]])
        both = rectangle(mvn, (low, high), (low + g, high - g))
        assert got.false_reject / n == pytest.approx(conforming - both, abs=4 * math.sqrt((conforming - both) / n))
    # by counting (accepted = conforming - false reject + false accept), exact
    assert got.accepted.passed == got.conforming.passed - got.false_reject + got.false_accept


def test_without_error_or_guard_band_first_pass_equals_the_tolerance_yield() -> None:
    mc = one_normal_quantity(1000.0, 40.0, 50_000)
    got = predict_first_pass(mc, {"step": [window(920.0, 1080.0, 0.0, 0.0)]}).groups["step"]
    # A perfect instrument and no guard band judge the true value itself (ILAC-G8 simple acceptance).
    assert got.accepted.passed == got.conforming.passed
    assert got.false_reject == got.false_accept == 0


def test_a_wider_guard_band_never_predicts_more_first_passes() -> None:
    mc = one_normal_quantity(1000.0, 30.0, 100_000)
    u = 10.0
    passed = []
    for r in (0.0, 0.5, 1.0, 2.0):  # w = r U, U = 2 u (ILAC-G8:09/2019)
        low, high = acceptance_limits(920.0, 1080.0, 2 * u, DecisionRule("guarded", r) if r else DecisionRule("simple"))
        w = AcceptanceWindow(50.0, 50.0, "frequency_hz", low, high, u, 920.0, 1080.0)
        passed.append(predict_first_pass(mc, {"step": [w]}).groups["step"].accepted.passed)
    # The same seeded errors and narrower windows: each accepted set holds the next (common practice, no source).
    assert passed == sorted(passed, reverse=True) and passed[0] > passed[-1]


def test_a_unit_passes_the_joint_only_when_every_group_passes() -> None:
    mc = one_normal_quantity(1000.0, 30.0, 20_000)
    groups = {"low side": [window(940.0, 2000.0, 5.0, 5.0)], "high side": [window(0.0, 1060.0, 5.0, 5.0)]}
    got = predict_first_pass(mc, groups)
    assert got.joint is not None
    assert got.joint.accepted.passed < min(g.accepted.passed for g in got.groups.values())
    assert got.joint.readings == 2


def test_a_reading_the_monte_carlo_did_not_simulate_leaves_its_group_out() -> None:
    mc = one_normal_quantity(1000.0, 30.0, 1000)
    elsewhere = AcceptanceWindow(25.0, 50.0, "frequency_hz", 900.0, 1100.0, 1.0)
    got = predict_first_pass(mc, {"here": [window(900.0, 1100.0, 1.0, 1.0)], "there": [elsewhere]})
    assert got.missing == ("there",) and set(got.groups) == {"here"}


def test_a_negative_or_infinite_uncertainty_is_refused() -> None:
    for u in (-1.0, math.inf, math.nan):
        with pytest.raises(ValueError, match="standard uncertainty"):
            AcceptanceWindow(50.0, 50.0, "frequency_hz", 1.0, 2.0, u)


def test_demo_first_pass_lies_below_the_spec_prediction_with_guard_bands() -> None:
    design = load_design(DEMO)
    table = compute_limits(design, method="worst-case", mc_options=McOptions(samples=20_000))
    assert table.monte_carlo is not None
    # An instrument far worse than the demo bench's (u a fortieth of the tolerance span, guard band w = 2 u,
    # ILAC-G8 guarded acceptance with r = 1, k = 2), so the guard bands cost something visible.
    groups = {}
    for r in table.rows:
        u = (r.tolerance_high - r.tolerance_low) / 40.0
        groups[(r.setting, r.quantity)] = [AcceptanceWindow(
            r.setting.a_pct, r.setting.b_pct, r.quantity, r.tolerance_low + 2 * u, r.tolerance_high - 2 * u, u,
            r.tolerance_low, r.tolerance_high)]
    got = predict_first_pass(table.monte_carlo, groups)
    with_spec = [r for r in table.rows if r.predicted_yield is not None]
    assert with_spec
    for r in with_spec:
        first_pass = got.groups[(r.setting, r.quantity)].accepted
        assert first_pass.fraction <= r.predicted_yield.fraction, r.setting.label
    assert any(got.groups[(r.setting, r.quantity)].accepted.fraction < r.predicted_yield.fraction for r in with_spec)
    assert got.joint is not None and table.joint_spec_yield is not None
    assert got.joint.accepted.fraction < table.joint_spec_yield.fraction


def test_limit_rows_become_one_window_each_with_the_budgets_standard_uncertainty() -> None:
    from fixture.files.station_file import load_station
    from fixture.model.measurement_plan import measure_table

    design = load_design(DEMO)
    table = compute_limits(design, method="worst-case", mc_options=McOptions(samples=2000))
    setup = load_station("sequences/demo-station.toml").measurement
    measured = measure_table(table, replace(setup, gate_time_s=1e-3))
    windows = limit_row_windows(table.rows, measured)
    assert set(windows) == {(r.setting, r.quantity) for r in table.rows}
    for key, (w,) in windows.items():
        m = measured[key]
        # u = U / k (JCGM 100:2008 6.2.1, U = k u_c)
        assert w.standard_uncertainty == pytest.approx(m.expanded_u / m.budget.coverage_factor)
        assert (w.acceptance_low, w.acceptance_high) == (m.acceptance_low, m.acceptance_high)
