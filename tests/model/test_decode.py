"""Decoding knob positions from period, frequency and duty, as the panel's controller does.

The references are derived here from the circuit algebra (each derivation is
written out next to the check that uses it); no demo-design number is used as
a reference value.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pytest

from fixture.errors import UserInputError
from fixture.files.design_file import load_design
from fixture.model.circuits.base import DesignProblem, ParameterSpec, Signal, ccw_key, cw_key
from fixture.model.decode import SCHEMES, UnitEndpoints, decode_duty, decode_frequency, decode_linear, decode_period
from fixture.model.decode_linearity import compare_knobs, compare_schemes, linearity, unit_endpoints
from fixture.model.design import Condition, Knob, Part, ProductDesign, pot_key
from fixture.model.pot import LOG_TAPER_BASE, PotGeometry

DEMO = Path(__file__).resolve().parents[2] / "sequences" / "demo-panel.toml"


# ---------------------------------------------------------------------------
# Reference formulas, derived here.
#
# A rheostat of track resistance Rp in series with a fixed R0 sets the period of
# an RC oscillator: T(x) = k (R0 + x Rp), x the track fraction in circuit, so
# f(x) = 1 / (k (R0 + x Rp)). Write a = Rp/R0 and u = 1 + a x, then
#     f(x) - f(0) = (1/(k R0)) (1/u - 1) = -(1/(k R0)) a x / u
#     f(1) - f(0) = -(1/(k R0)) a / (1 + a)
# and the linear-in-frequency decode with endpoints at x = 0 and x = 1 reads
#     x_hat = (f(x) - f(0)) / (f(1) - f(0)) = x (1 + a) / (1 + a x),
# an error
#     e(x) = x_hat - x = a x (1 - x) / (1 + a x).
# de/dx = 0 gives a x^2 + 2 x - 1 = 0, so with s = sqrt(1 + a):
#     x* = (s - 1)/a = 1/(s + 1),   1 - x* = s/(s + 1),   1 + a x* = s,
#     e_max = a / (s + 1)^2 = (s - 1)/(s + 1).
# With rho = 1 + a = T_max/T_min, the worst error is (sqrt(rho) - 1)/(sqrt(rho) + 1)
# of the travel at x* = 1/(1 + sqrt(rho)); e.g. rho = 2 gives 17.2 %. Running the
# knob the other way (x -> 1 - x) mirrors the curve and flips its sign.
# ---------------------------------------------------------------------------

def hyperbola_error(x: np.ndarray, a: float | np.ndarray) -> np.ndarray:
    """e(x) above, as a fraction of travel (derived here)."""
    return a * x * (1.0 - x) / (1.0 + a * x)


def hyperbola_worst(rho: float | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(e_max, x*) above for a period ratio ``rho`` (derived here)."""
    s = np.sqrt(rho)
    return (s - 1.0) / (s + 1.0), 1.0 / (1.0 + s)


def dead_zone_error(rotation: np.ndarray, electrical_travel: float) -> np.ndarray:
    """Error of a decode that is exact in the track fraction, over mechanical rotation.

    Derived here from the pot geometry (fixture/model/pot.py docstring): the track
    only moves over the centred electrical travel t, leaving dead zones d = (1 - t)/2
    at each end; the endpoints are read in the dead zones, so the decode returns the
    track fraction p = clip((r - d)/t, 0, 1) and errs by p - r. Its worst value is d,
    reached where each dead zone ends.
    """
    dead = (1.0 - electrical_travel) / 2.0
    return np.clip((rotation - dead) / electrical_travel, 0.0, 1.0) - rotation


# ---------------------------------------------------------------------------
# A synthetic design whose wave is known in closed form.
# ---------------------------------------------------------------------------

class IdealRheostatModel:
    """Period = C (R0 + knob A wiper..CCW); duty = knob B's track fraction from its CCW end."""

    name = "ideal-rheostat-for-tests"
    description = "ideal RC timer, knob A a rheostat in series with r_series, knob B sets duty directly"
    parameters = (
        ParameterSpec("r_series", "ohm", "fixed resistor in series with knob A"),
        ParameterSpec("c_timing", "F", "timing capacitor"),
    )

    def evaluate(self, values: Mapping[str, np.ndarray]) -> Signal:
        period = values["c_timing"] * (values["r_series"] + values[ccw_key("a")])
        duty = values[ccw_key("b")] / (values[ccw_key("b")] + values[cw_key("b")])
        return Signal(period_s=np.asarray(period, dtype=float), high_s=np.asarray(period * duty, dtype=float))

    def check(self, values: Mapping[str, np.ndarray]) -> list[DesignProblem]:
        return []


def ideal_design(*, r_series_ohm: float = 10e3, pot_a_ohm: float = 10e3, taper: str = "linear",
                 electrical_travel: float = 1.0, end_resistance_ohm: float = 0.0, hold_a_pct: float = 50.0
                 ) -> ProductDesign:
    model = IdealRheostatModel()
    geometry = PotGeometry(taper=taper, electrical_travel=electrical_travel, end_resistance_ohm=end_resistance_ohm)
    parts = (Part("r_series", "R1", "ohm", r_series_ohm), Part("c_timing", "C1", "F", 100e-9),
             Part(pot_key("a"), "RV1", "ohm", pot_a_ohm), Part(pot_key("b"), "RV2", "ohm", 10e3))
    knobs = {"a": Knob("a", "RV1", "rate", geometry, (0.0, 100.0), hold_a_pct),
             "b": Knob("b", "RV2", "level", PotGeometry(), (0.0, 100.0), 50.0)}
    conditions = {"production": Condition("production", (20.0, 30.0), include_ageing=False),
                  "field": Condition("field", (0.0, 50.0), include_ageing=True)}
    return ProductDesign(name="synthetic ideal rheostat", revision="-", maker="-", model=model,
                         model_ref=model.name, parts=parts, knobs=knobs, reference_temp_c=25.0,
                         conditions=conditions)


# ---------------------------------------------------------------------------
# The decode functions on their own.
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("rho", [1.5, 2.0, 5.0, 20.0])
def test_period_decode_is_exact_and_frequency_decode_bows_like_the_hyperbola(rho: float) -> None:
    # Period of a rheostat in series with a fixed resistor is linear in x (derived above).
    x = np.linspace(0.0, 1.0, 2001)
    k, r0 = 1e-7, 1e3
    rp = (rho - 1.0) * r0
    period = k * (r0 + x * rp)
    endpoints = UnitEndpoints(period_at_a0_s=period[0], period_at_a100_s=period[-1], duty_at_b0=0.1,
                              duty_at_b100=0.9, high_at_b0_s=0.0, high_at_b100_s=1.0)
    assert np.allclose(decode_period(period, endpoints), 100.0 * x, rtol=0.0, atol=1e-9)
    error = decode_frequency(1.0 / period, endpoints) - 100.0 * x
    # e(x) derived above (hyperbola through its endpoints vs its chord).
    assert np.allclose(error, 100.0 * hyperbola_error(x, rho - 1.0), rtol=0.0, atol=1e-9)
    e_max, x_star = hyperbola_worst(rho)
    assert error.max() == pytest.approx(100.0 * e_max, abs=1e-4)
    assert x[np.argmax(error)] == pytest.approx(x_star, abs=1.0 / 2000)


def test_decode_clips_readings_just_beyond_either_endpoint() -> None:
    # Clipping rule stated in decode_linear's docstring: the knob cannot pass its end stop.
    rising = decode_linear(np.array([0.999, 1.0, 1.5, 2.0, 2.001]), 1.0, 2.0)
    assert rising.tolist() == [0.0, 0.0, 50.0, 100.0, 100.0]
    # Frequency falls as period rises: the decode works either way round and still clips.
    falling = decode_linear(np.array([500.1, 500.0, 375.0, 250.0, 249.9]), 500.0, 250.0)
    assert falling.tolist() == [0.0, 0.0, 50.0, 100.0, 100.0]


def test_duty_decode_interpolates_between_the_units_duty_endpoints() -> None:
    # Straight-line interpolation (common practice, no source): a quarter of the way is 25 %.
    endpoints = UnitEndpoints(period_at_a0_s=2e-3, period_at_a100_s=1e-3, duty_at_b0=0.1, duty_at_b100=0.9,
                              high_at_b0_s=1e-4, high_at_b100_s=9e-4)
    assert decode_duty(np.array([0.1, 0.3, 0.9, 0.95]), endpoints).tolist() == pytest.approx([0, 25, 100, 100])


def test_equal_endpoints_are_refused_because_no_position_can_be_decoded() -> None:
    with pytest.raises(UserInputError, match="endpoints that differ"):
        decode_linear(1.0, 2.0, 2.0)


# ---------------------------------------------------------------------------
# Linearity over the travel of a design.
# ---------------------------------------------------------------------------

def test_linearity_of_an_ideal_rheostat_matches_the_closed_forms() -> None:
    r0, rp = 2e3, 10e3
    design = ideal_design(r_series_ohm=r0, pot_a_ohm=rp)
    period = linearity(design, "a", "linear-in-period", points=2001)
    assert period.max_abs_error_pct < 1e-9
    freq = linearity(design, "a", "linear-in-frequency", points=2001)
    x = freq.rotation_pct / 100.0
    # knob A's CCW side is in circuit, so x is the rotation itself (derived above).
    assert np.allclose(freq.error_pct, 100.0 * hyperbola_error(x, rp / r0), rtol=0.0, atol=1e-9)
    e_max, x_star = hyperbola_worst(1.0 + rp / r0)
    assert freq.max_abs_error_pct == pytest.approx(100.0 * e_max, abs=1e-4)
    assert freq.at_rotation_pct == pytest.approx(100.0 * x_star, abs=100.0 / 2000)
    assert freq.at_unit == ()


def test_linearity_endpoints_agree_with_the_units_stored_endpoints() -> None:
    # The firmware-style decode_period with unit_endpoints must read what linearity reads.
    design = ideal_design(electrical_travel=0.9)
    result = linearity(design, "a", "linear-in-period", points=11)
    signal = design.signal(design.nominal_values(), result.rotation_pct, 50.0)
    assert np.allclose(decode_period(signal.period_s, unit_endpoints(design)), result.decoded_pct)


@pytest.mark.parametrize("scheme", ["linear-in-period", "linear-in-frequency"])
def test_dead_zones_show_as_decode_error_up_to_half_the_lost_travel(scheme: str) -> None:
    travel = 0.9
    design = ideal_design(electrical_travel=travel, end_resistance_ohm=100.0)
    result = linearity(design, "a", scheme, points=201)
    r = result.rotation_pct / 100.0
    dead = (1.0 - travel) / 2.0
    in_dead_zone = (r < dead - 1e-12) | (r > 1.0 - dead + 1e-12)
    # In a dead zone the reading equals the endpoint, so the decode reads 0 or 100 % exactly.
    assert np.allclose(result.error_pct[in_dead_zone], 100.0 * dead_zone_error(r, travel)[in_dead_zone],
                       rtol=0.0, atol=1e-9)
    if scheme == "linear-in-period":
        # End resistance keeps the period affine in the track fraction, so only the dead zones err.
        assert np.allclose(result.error_pct, 100.0 * dead_zone_error(r, travel), rtol=0.0, atol=1e-9)
        assert result.max_abs_error_pct == pytest.approx(100.0 * dead)
        assert result.at_rotation_pct in (pytest.approx(100.0 * dead), pytest.approx(100.0 * (1.0 - dead)))


def test_log_taper_cannot_be_decoded_linearly_in_period_or_frequency() -> None:
    # Derived here: with a log track g(p) = (B^p - 1)/(B - 1) (fixture/model/pot.py) and full
    # electrical travel, the period decode returns g(p) (period is linear in g), erring by g(p) - p.
    # d/dp = 0 at B^p* = (B - 1)/ln B, so max |g - p| = p* - 1/ln B + 1/(B - 1). The frequency
    # decode returns g_hat = g (1 + a)/(1 + a g) (derived above), erring by g_hat - p.
    r0, rp = 10e3, 10e3
    design = ideal_design(r_series_ohm=r0, pot_a_ohm=rp, taper="log")
    period = linearity(design, "a", "linear-in-period", points=1001)
    freq = linearity(design, "a", "linear-in-frequency", points=1001)
    p = period.rotation_pct / 100.0
    b = LOG_TAPER_BASE
    g = (b**p - 1.0) / (b - 1.0)
    assert np.allclose(period.error_pct, 100.0 * (g - p), rtol=0.0, atol=1e-9)
    p_star = math.log((b - 1.0) / math.log(b)) / math.log(b)
    assert period.max_abs_error_pct == pytest.approx(100.0 * (p_star - 1.0 / math.log(b) + 1.0 / (b - 1.0)),
                                                     abs=1e-3)
    a = rp / r0
    assert np.allclose(freq.error_pct, 100.0 * (g * (1.0 + a) / (1.0 + a * g) - p), rtol=0.0, atol=1e-9)
    # Both are far beyond anything a firmware could accept (a log knob needs an inverse-taper
    # table, not a straight line): the derived worst cases are tens of percent of travel.
    assert min(period.max_abs_error_pct, freq.max_abs_error_pct) > 20.0


def test_each_monte_carlo_unit_is_decoded_with_its_own_endpoints() -> None:
    rng = np.random.default_rng(20240611)
    n = 40
    r0 = 10e3 * rng.uniform(0.95, 1.05, n)
    rp = 10e3 * rng.uniform(0.8, 1.2, n)
    design = ideal_design()
    values = {"r_series": r0, pot_key("a"): rp, "c_timing": 100e-9 * rng.uniform(0.9, 1.1, n)}
    period = linearity(design, "a", "linear-in-period", values=values, points=401)
    assert period.error_pct.shape == (n, 401)
    assert period.max_abs_error_pct < 1e-9
    freq = linearity(design, "a", "linear-in-frequency", values=values, points=4001)
    e_max, _ = hyperbola_worst(1.0 + rp / r0)  # per unit, derived above
    assert freq.max_abs_error_pct == pytest.approx(100.0 * e_max.max(), abs=1e-4)
    # e_max grows with the period ratio, so the worst unit is the one with the largest Rp/R0.
    assert freq.at_unit == (int(np.argmax(rp / r0)),)
    assert freq.envelope_pct.shape == (4001,)


def test_high_time_decode_follows_knob_a_so_duty_is_recommended() -> None:
    # Derived here for the ideal model: high = duty_b x T(A), endpoints taken with A at hold h.
    # With A at 0 the period is T0 = C R0 < T(h), so the high-time decode reads
    # duty_b x T0/T(h) and errs by duty_b (T0/T(h) - 1), worst at duty_b = 1: 1 - T0/T(h).
    r0, rp = 1e3, 10e3
    design = ideal_design(r_series_ohm=r0, pot_a_ohm=rp)
    comparison = compare_schemes(design, "b", other_pcts=(0.0, 50.0, 100.0),
                                 schemes=("linear-in-duty", "linear-in-high-time"), points=101)
    high = comparison.scheme("linear-in-high-time")
    assert high.max_abs_error_pct == pytest.approx(100.0 * (1.0 - r0 / (r0 + 0.5 * rp)))
    assert (high.at_rotation_pct, high.at_other_pct) == (100.0, 0.0)
    assert comparison.scheme("linear-in-duty").max_abs_error_pct < 1e-9
    assert comparison.recommend == "linear-in-duty"


def test_period_is_recommended_for_an_ideal_rheostat_and_duty_is_the_only_candidate_for_knob_b() -> None:
    comparison = compare_knobs(ideal_design())
    assert comparison["a"].recommend == "linear-in-period"
    assert [s.name for s in comparison["a"].schemes] == ["linear-in-period", "linear-in-frequency"]
    assert [s.name for s in comparison["b"].schemes] == ["linear-in-duty"]


def test_a_scheme_for_the_other_knob_is_refused() -> None:
    with pytest.raises(UserInputError, match="decode scheme for knob a"):
        linearity(ideal_design(), "a", "linear-in-duty")
    with pytest.raises(UserInputError, match="unknown part"):
        linearity(ideal_design(), "a", "linear-in-period", values={"r_sereis": 1e3})


# ---------------------------------------------------------------------------
# The shipped demo design.
# ---------------------------------------------------------------------------

@pytest.fixture(scope="module")
def demo() -> ProductDesign:
    return load_design(DEMO)


def test_demo_decodes_knob_a_best_linear_in_period(demo: ProductDesign) -> None:
    # In the integrator-Schmitt model every term of the period is either proportional to RC or
    # independent of R (integrator_schmitt.py docstring), and knob A is a linear rheostat with
    # end resistance, so the period is affine in the track fraction: the period decode errs only
    # in the dead zones (dead_zone_error, derived above) and beats the frequency decode.
    comparison = compare_knobs(demo)["a"]
    assert comparison.recommend == "linear-in-period"
    period = comparison.scheme("linear-in-period")
    travel = demo.knobs["a"].geometry.electrical_travel
    r = period.rotation_pct / 100.0
    assert np.allclose(period.error_pct, 100.0 * dead_zone_error(r, travel), rtol=0.0, atol=1e-7)
    # Linear in period means the frequency decode differs from it by the hyperbola error in the
    # track coordinate y = 1 - (period decode), measured from the short-period (100 %) end, with
    # rho the demo's own period ratio as the model predicts it (derived above; sign flipped
    # because the period falls as knob A turns).
    ends = unit_endpoints(demo)
    rho = float(ends.period_at_a0_s / ends.period_at_a100_s)
    y = 1.0 - period.curves[0].decoded_pct / 100.0
    frequency = comparison.scheme("linear-in-frequency")
    assert np.allclose(frequency.error_pct - period.error_pct, -100.0 * hyperbola_error(y, rho - 1.0),
                       rtol=0.0, atol=1e-7)


def test_demo_dead_zones_show_in_every_scheme(demo: ProductDesign) -> None:
    # In a dead zone the reading equals its endpoint, whatever the circuit, so the decode reads
    # exactly 0 % (or 100 %) and errs by the rotation into the dead zone (derived above).
    for name, scheme in SCHEMES.items():
        result = linearity(demo, scheme.knob, name, points=201)
        travel = demo.knobs[scheme.knob].geometry.electrical_travel
        dead = (1.0 - travel) / 2.0
        r = result.rotation_pct / 100.0
        in_dead_zone = (r < dead - 1e-9) | (r > 1.0 - dead + 1e-9)
        assert np.allclose(result.error_pct[in_dead_zone], 100.0 * dead_zone_error(r, travel)[in_dead_zone],
                           rtol=0.0, atol=1e-9), name
        assert result.max_abs_error_pct >= 100.0 * dead - 100.0 / 200, name


def test_demo_decodes_knob_b_linear_in_duty_not_in_high_time(demo: ProductDesign) -> None:
    # The high time is duty x period and the demo's period moves with knob A (by its period ratio),
    # so once knob A leaves its hold position the high-time decode must do worse than the duty one.
    hold_a = demo.knobs["a"].hold_pct
    comparison = compare_schemes(demo, "b", other_pcts=(0.0, hold_a, 100.0),
                                 schemes=("linear-in-duty", "linear-in-high-time"))
    assert comparison.recommend == "linear-in-duty"
    duty = comparison.scheme("linear-in-duty")
    high = comparison.scheme("linear-in-high-time")
    assert high.max_abs_error_pct > duty.max_abs_error_pct
    assert high.at_other_pct != hold_a
    assert compare_knobs(demo)["b"].recommend == "linear-in-duty"
