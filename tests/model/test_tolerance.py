"""Worst case, RSS and Monte Carlo tolerance analyses."""

from __future__ import annotations

import itertools
import math
from dataclasses import replace

import numpy as np
import pytest

from fixture.files.design_file import load_design
from fixture.model.limits import compute_limits
from fixture.model.tolerance.monte_carlo import McOptions, McYield, draw, monte_carlo
from fixture.model.tolerance.rss import rss
from fixture.model.tolerance.space import KnobSetting, ParameterSpace, knob_settings
from fixture.model.tolerance.worst_case import worst_case

DEMO = "sequences/demo-panel.toml"


@pytest.fixture(scope="module")
def demo():
    return load_design(DEMO)


def uniform_only(design, scale: float = 1.0):
    """The design with every part uniform and tolerances scaled (our own what-if, not a reference)."""
    parts = tuple(replace(p, distribution="uniform", tolerance=p.tolerance * scale, ageing=p.ageing * scale)
                  for p in design.parts)
    return replace(design, parts=parts)


def test_worst_case_bounds_contain_every_monte_carlo_unit_built_from_in_tolerance_uniform_parts(demo) -> None:
    # A worst-case bound is by definition never exceeded by an in-tolerance unit (common practice).
    design = uniform_only(demo)
    space = ParameterSpace(design, design.conditions["field"])
    settings = knob_settings(design)
    mc = monte_carlo(space, settings, {"a": ("frequency_hz",), "b": ("duty_pct",)},
                     options=McOptions(samples=20_000, temperature="extremes", seed=7))
    for setting in settings:
        quantity = "frequency_hz" if setting.knob == "a" else "duty_pct"
        wc = worst_case(lambda x, s=setting, q=quantity: space.quantity(x, s, q), space.lower, space.upper,
                        space.centre_point())
        values = mc.distributions[(setting, quantity)].values
        assert wc.low.value <= values.min() and values.max() <= wc.high.value, (setting, quantity)


def test_worst_case_equals_brute_force_vertex_search_for_a_monotonic_function() -> None:
    # For a function monotonic in each input the extremes sit on box corners (common practice).
    lower, upper = np.array([1.0, 2.0, 0.5, 3.0]), np.array([2.0, 3.0, 1.5, 4.0])

    def f(x):
        return x[:, 0] * x[:, 1] / (x[:, 2] + x[:, 3])

    corners = np.array(list(itertools.product(*zip(lower, upper, strict=True))))
    result = worst_case(f, lower, upper, 0.5 * (lower + upper))
    assert result.high.value == pytest.approx(f(corners).max())
    assert result.low.value == pytest.approx(f(corners).min())
    assert result.low.interior == () and result.high.interior == ()


def test_worst_case_finds_an_interior_extremum_a_corner_search_would_miss() -> None:
    # f = (x - 0.3)^2 + y on [0,1]^2: the minimum is at x = 0.3, inside the band (calculus).
    def f(x):
        return (x[:, 0] - 0.3) ** 2 + x[:, 1]

    result = worst_case(f, np.zeros(2), np.ones(2), np.full(2, 0.5), grid_points=11)
    assert result.low.value == pytest.approx(0.0, abs=1e-12)
    assert result.low.interior == (0,)
    assert result.high.value == pytest.approx(0.49 + 1.0)


def test_worst_case_without_enumeration_still_finds_the_corners_of_a_monotonic_function() -> None:
    rng = np.random.default_rng(3)
    weights = rng.normal(size=20)
    lower, upper = -np.ones(20), np.ones(20)
    result = worst_case(lambda x: x @ weights, lower, upper, np.zeros(20), max_vertices=64)
    # max of a linear function over a box: sum |w_i| (linear programming, common practice)
    assert result.high.value == pytest.approx(np.abs(weights).sum())
    assert "neighbours" in result.detail


def test_rss_agrees_with_the_uncertainties_package_linear_propagation_for_the_demo_design(demo) -> None:
    # Reference: the `uncertainties` package (PyPI), first-order propagation with its own
    # numerical derivatives through uncertainties.wrap.
    uncertainties = pytest.importorskip("uncertainties")
    space = ParameterSpace(demo, demo.conditions["production"])
    setting = KnobSetting("a", 25.0, 25.0, 50.0)
    centre, sigmas = space.centre_point(), space.sigmas()

    def scalar(*x):
        return float(space.quantity(np.array([x]), setting, "frequency_hz")[0])

    wrapped = uncertainties.wrap(scalar)
    reference = wrapped(*(uncertainties.ufloat(c, s) for c, s in zip(centre, sigmas, strict=True)))
    ours = rss(lambda x: space.quantity(x, setting, "frequency_hz"), centre, sigmas, space.half_widths())
    assert ours.centre_value == pytest.approx(reference.nominal_value, rel=1e-12)
    assert ours.std == pytest.approx(reference.std_dev, rel=1e-4)


def test_rss_and_monte_carlo_agree_for_small_tolerances(demo) -> None:
    # For small tolerances the model is locally linear, so the MC standard deviation tends to
    # the first-order (RSS) one (GUM JCGM 100:2008 5.1.2 vs JCGM 101:2008 Monte Carlo).
    design = uniform_only(demo, scale=0.05)
    space = ParameterSpace(design, design.conditions["production"])
    setting = KnobSetting("b", 50.0, 50.0, 50.0)
    mc = monte_carlo(space, [setting], {"b": ("duty_pct",)}, options=McOptions(samples=40_000, seed=11))
    ours = rss(lambda x: space.quantity(x, setting, "duty_pct"), space.centre_point(), space.sigmas(),
               space.half_widths())
    dist = mc.distributions[(setting, "duty_pct")]
    assert dist.std == pytest.approx(ours.std, rel=0.03)
    assert dist.mean == pytest.approx(ours.centre_value, abs=0.05 * ours.std)


def test_monte_carlo_is_reproducible_from_its_seed(demo) -> None:
    space = ParameterSpace(demo, demo.conditions["production"])
    a = draw(space, np.random.default_rng(5), 100, "random")
    b = draw(space, np.random.default_rng(5), 100, "random")
    c = draw(space, np.random.default_rng(6), 100, "random")
    assert np.array_equal(a, b) and not np.array_equal(a, c)


def test_uniform_parts_stay_inside_their_band_and_fill_it(demo) -> None:
    space = ParameterSpace(uniform_only(demo), demo.conditions["field"])
    x = draw(space, np.random.default_rng(1), 50_000, "random")
    assert np.all(x >= space.lower) and np.all(x <= space.upper)
    # GUM JCGM 100:2008 4.3.7: a uniform band of half-width a has standard deviation a/sqrt(3).
    i = space.names.index("r_integrator")
    half = space.tolerance[i]
    ageing = space.ageing[i]
    expected = math.sqrt(half**2 / 3 + ageing**2 / 3)
    assert x[:, i].std() == pytest.approx(expected, rel=0.02)


def test_lot_shift_moves_the_whole_band(demo) -> None:
    shifted = replace(demo, parts=tuple(replace(p, lot_shift=-0.08 * p.nominal) if p.key == "c_integrator" else p
                                        for p in demo.parts))
    base = ParameterSpace(demo, demo.conditions["production"])
    moved = ParameterSpace(shifted, shifted.conditions["production"])
    i = base.names.index("c_integrator")
    assert moved.centre[i] == pytest.approx(0.92 * base.centre[i])
    assert moved.lower[i] - base.lower[i] == pytest.approx(-0.08 * base.nominal[i])


def test_wilson_interval_matches_scipy() -> None:
    # Reference: scipy.stats.binomtest(k, n).proportion_ci(method="wilson").
    stats = pytest.importorskip("scipy.stats")
    for passed, total in [(99_967, 100_000), (5, 20), (100, 100)]:
        ref = stats.binomtest(passed, total).proportion_ci(confidence_level=0.95, method="wilson")
        lo, hi = McYield(passed, total).interval(0.95)
        assert lo == pytest.approx(ref.low, abs=1e-9) and hi == pytest.approx(ref.high, abs=1e-9)


def test_limits_table_rows_carry_nominal_low_high_and_narrow_to_the_spec(demo) -> None:
    table = compute_limits(demo, method="rss", mc_options=McOptions(samples=2_000))
    for row in table.rows:
        assert row.low < row.nominal < row.high
        assert row.tolerance_low >= row.low and row.tolerance_high <= row.high
        if row.spec_low is not None:
            assert row.tolerance_low == max(row.low, row.spec_low)
            assert row.predicted_yield is not None
    shares = [c.share for c in table.rows[0].contributors]
    assert shares == sorted(shares, reverse=True) and 0 < sum(shares) <= 1.0 + 1e-12


def test_wilson_interval_reaches_exactly_1_at_100_percent_and_0_at_none() -> None:
    # Wilson (1927): at p = 1 the upper bound is 1 and at p = 0 the lower bound is 0, exactly
    # (centre + half = 1 algebraically); a report must not print 99.99999999999998 %.
    # n = 2,000 and n = 10 are sizes where the plain float formula misses (0.9999999999999998, 2.8e-17)
    for n in (10, 20, 2_000, 20_000, 100_000):
        assert McYield(n, n).interval(0.95)[1] == 1.0
        assert McYield(0, n).interval(0.95)[0] == 0.0
