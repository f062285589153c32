"""Limits never wider than worst case, never reaching a stuck output; both said where they apply."""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import pytest
from click.testing import CliRunner

from fixture.cli import main
from fixture.files.design_file import load_design
from fixture.files.station_file import load_station
from fixture.model.decision import DecisionRule
from fixture.model.limits import compute_limits
from fixture.model.measurement_plan import measure_row
from fixture.model.stuck_output import reaches_stuck, stuck_margin_pct
from fixture.model.tolerance.monte_carlo import McOptions
from fixture.model.tolerance.rss import rss
from fixture.model.tolerance.space import ParameterSpace
from fixture.model.tolerance.worst_case import worst_case
from tests.files.edits import edited_copy
from tests.model.test_travel import with_values

DEMO = Path("sequences/demo-panel.toml")
STATION = load_station("sequences/demo-station.toml").measurement


def invoke(*args: str):
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


def sticking_design_file(tmp_path: Path) -> Path:
    """The demo with R7 at 11.5k: nominal switches everywhere, but its worst corner sticks high at knob B 100 %."""
    return edited_copy(DEMO, tmp_path, 'value = "12k"', 'value = "11.5k"')


def test_stuck_margin_is_half_the_output_edge_or_one_count_over_the_period() -> None:
    # A slew-limited edge of swing V at slew S takes V/S; a pulse shorter than half of it never
    # reaches mid-swing (trapezoid geometry; common practice, no source). 10 V at 0.5 V/us: 10 us.
    assert stuck_margin_pct(1e-3, swing_v=10.0, slew_v_per_s=0.5e6) == pytest.approx(1.0)
    # One count of the instrument dominates when it is longer (a 100 us count on a 1 ms period: 10 %).
    assert stuck_margin_pct(1e-3, swing_v=10.0, slew_v_per_s=0.5e6, resolution_s=100e-6) == pytest.approx(10.0)
    assert stuck_margin_pct(float("inf")) == 100.0  # no wave: every duty is as good as stuck


@pytest.mark.parametrize(("quantity", "low", "high", "stuck"), [
    ("duty_pct", 1.0, 99.0, False),
    ("duty_pct", 0.3, 50.0, True),  # within the 0.5 % margin of 0 %
    ("duty_pct", 50.0, 99.6, True),
    ("duty_pct", 50.0, None, True),  # an open side runs to 100 %
    ("frequency_hz", 0.0, 500.0, True),
    ("frequency_hz", 1.0, 500.0, False),
    ("period_s", float("nan"), 1.0, True),
])
def test_a_window_reaching_a_stuck_output_is_named(quantity, low, high, stuck) -> None:
    assert bool(reaches_stuck(quantity, low, high, margin_pct=0.5)) is stuck


def test_rss_band_wider_than_worst_case_is_capped_at_worst_case_and_said() -> None:
    # Worst case (extreme-value analysis) bounds every unit built from in-tolerance parts, so no good unit
    # lies beyond it (any tolerance-analysis text; from memory). The RSS band of the demo's knob A 0 %
    # frequency reaches below it; compare with both analyses run directly.
    design = load_design(DEMO)
    table = compute_limits(design, method="rss", predict_yield=False)
    row = next(r for r in table.rows if r.setting.label == "A 0 %" and r.quantity == "frequency_hz")
    space = ParameterSpace(design, design.conditions["production"])

    def f(x):
        return space.quantity(x, row.setting, "frequency_hz")

    plain = rss(f, space.centre_point(), space.sigmas(), space.half_widths(), k=3.0)
    wc = worst_case(f, space.lower, space.upper, space.centre_point())
    assert plain.low < wc.low.value  # the case this test is about
    assert row.low == pytest.approx(wc.low.value, rel=1e-12) and row.uncapped_low == pytest.approx(plain.low)
    assert row.high == pytest.approx(min(plain.high, wc.high.value), rel=1e-12)
    assert any("capped at worst case" in n and "bounds every unit" in n for n in row.capping)
    assert set(row.capping) <= set(row.notes)
    for r in table.rows:  # no row anywhere is wider than worst case
        assert r.uncapped_low is None or r.uncapped_low < r.low
        assert r.uncapped_high is None or r.uncapped_high > r.high


def test_monte_carlo_tails_beyond_worst_case_are_capped() -> None:
    # C1 drawn normal with its tolerance at one sigma: a third of the units lie outside the band the
    # worst case searches (normal distribution, P(|z| > 1) = 31.7 %), so the 99.73 % tails pass it.
    design = load_design(DEMO)
    parts = tuple(replace(p, sigma_k=1.0) if p.key == "c_integrator" else p for p in design.parts)
    table = compute_limits(replace(design, parts=parts), method="monte-carlo", predict_yield=False,
                           mc_options=McOptions(samples=4000))
    freq = [r for r in table.rows if r.quantity == "frequency_hz"]
    assert all(r.uncapped_low is not None and r.uncapped_high is not None for r in freq)
    assert all(any("monte-carlo low limit" in n and "capped" in n for n in r.notes) for r in freq)


@pytest.mark.parametrize("method", ["worst-case", "rss", "monte-carlo"])
def test_duty_limits_never_leave_0_to_100_percent(method: str) -> None:
    # R7 = 11k: RSS alone would give about 103 % at knob B 100 % (the issue measured 100.898 % on a similar design).
    design = with_values(load_design(DEMO), r_threshold_bottom=11e3)
    table = compute_limits(design, method=method, predict_yield=False, mc_options=McOptions(samples=4000))
    duty = [r for r in table.rows if r.quantity == "duty_pct"]
    assert all(0.0 <= r.low <= r.high <= 100.0 for r in duty)
    if method == "rss":
        assert max(r.uncapped_high or 0.0 for r in duty) > 100.0


def test_limits_reaching_100_percent_duty_are_a_problem_naming_the_stop_and_parts(tmp_path: Path) -> None:
    # A duty of 100 % is a comparator whose threshold sits below its input's whole range: it never
    # switches (from memory, any op-amp text); the worst corner of this design does that at knob B 100 %.
    table = compute_limits(load_design(sticking_design_file(tmp_path)), method="worst-case", predict_yield=False)
    [row] = table.problems
    assert (row.setting.knob, row.setting.stop_pct, row.quantity) == ("b", 100.0, "duty_pct")
    assert row.high == pytest.approx(100.0)
    assert "stop B 100 % (knob A 50 %, knob B 100 %) duty" in row.problem
    assert "stuck high" in row.problem and "RV2 level knob (knob B)" in row.problem


def test_check_and_limits_refuse_a_design_whose_worst_case_sticks(tmp_path: Path) -> None:
    path = str(sticking_design_file(tmp_path))
    for args in (("check", path), ("limits", path, "--samples", "200")):
        result = invoke(*args)
        assert result.exit_code == 2, args
        errors = [ln for ln in result.stderr.splitlines() if "error:" in ln]
        assert len(errors) == 1 and "knobs.b.stops (100 %)" in errors[0] and "RV2" in errors[0], errors
        assert "Traceback" not in result.output


def test_limits_text_and_json_say_where_a_limit_was_capped() -> None:
    text = invoke("limits", "--method", "rss", "--samples", "200")
    assert text.exit_code == 0, text.stderr
    assert "221.4 Hz*" in text.stdout  # the knob A 0 % low limit, capped at the worst case
    assert "* rss limit beyond the worst case, capped at worst case" in text.stdout
    data = json.loads(invoke("limits", "--method", "rss", "--samples", "200", "--json").stdout)
    row = next(r for r in data["rows"] if r["knob"] == "a" and r["stop_pct"] == 0 and r["quantity"] == "frequency_hz")
    assert row["capped_at_worst_case"]["low"] is True and row["capped_at_worst_case"]["method_low"] < row["low"]
    assert any("capped at worst case" in n for n in row["notes"]) and row["problem"] is None


def test_an_acceptance_window_widened_into_the_stuck_margin_is_refused() -> None:
    # Guarded rejection widens the window by r U (ILAC-G8:09/2019); r = 400 pushes the knob B 100 % window
    # past 100 % minus the stuck margin; r = 1 keeps it clear.
    design = load_design(DEMO)
    row = next(r for r in compute_limits(design, predict_yield=False).rows if r.setting.label == "B 100 %")
    setup = replace(STATION, gate_time_s=0.1)
    wide = measure_row(design, row, replace(setup, rule=DecisionRule("guarded-rejection", 400.0)))
    assert wide.acceptance_high > 99.7 and "would accept a stuck output" in wide.refusal
    assert "stuck high" in wide.refusal
    narrow = measure_row(design, row, replace(setup, rule=DecisionRule("guarded-rejection", 1.0)))
    assert narrow.refusal == ""


def test_a_spec_that_no_unit_of_the_design_can_meet_is_a_problem_naming_the_file_and_stop(tmp_path: Path) -> None:
    # The tolerance limits are the design's band narrowed to the spec (README, [[spec]]): a duty spec of
    # at most 0.2 % at knob B 0 %, where the worst-case band starts near 1.9 %, leaves no window at all,
    # so every unit would fail. check and limits must say so on one line naming the file and stop,
    # never "ok", and never a bare "tolerance limits" line with no file (common practice, no source).
    path = edited_copy(DEMO, tmp_path, "at = 0\nhigh = 20", "at = 0\nhigh = 0.2")
    sequence = tmp_path / "demo-sequence.toml"  # names demo-panel.toml beside it: the edited design
    sequence.write_text(Path("sequences/demo-sequence.toml").read_text(encoding="utf-8"), encoding="utf-8")
    for args in (("check", str(path)), ("limits", str(path), "--samples", "200"),
                 ("check", str(path), "--sequence", str(sequence), "--station", "demo-station")):
        result = invoke(*args)
        assert result.exit_code == 2, (args, result.output)
        errors = [ln for ln in result.stderr.splitlines() if "error:" in ln]
        assert errors and all(str(path) in ln or "demo-sequence" in ln for ln in errors), errors
        assert any("knobs.b.stops (0 %)" in ln and "specification" in ln for ln in errors), errors
