"""First-pass and final yield from the real store, with exact intervals equal to scipy.stats."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest
from scipy.stats import binomtest

from fixture.analytics import clopper_pearson, load_runs, load_unit_lots, unit_totals, yield_report, yields_by
from fixture.analytics.period import parse_period
from fixture.errors import UserInputError
from fixture.store import Store

from .conftest import OTHER_DESIGN_SHA, T0, Run, record_unit

DAY = dt.timedelta(days=1)


def exact_ci(k: int, n: int) -> tuple[float, float]:
    # Reference: scipy.stats.binomtest(...).proportion_ci(method="exact") (Clopper-Pearson).
    ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
    return ci.low, ci.high


@pytest.fixture
def histories(store: Store) -> Store:
    """Seven units whose yields are worked out by hand in the tests below."""
    a, b = {"c_integrator": "C-A"}, {"c_integrator": "C-B"}
    record_unit(store, "U1", a, [Run("pass")])
    record_unit(store, "U2", a, [Run("fail"), Run("pass", "line-2", T0 + DAY)])  # retest elsewhere, next day
    record_unit(store, "U3", b, [Run("station-fault"), Run("pass", "line-2")])  # a fault judges nothing
    record_unit(store, "U4", b, [Run("fail")])
    record_unit(store, "U5", b, [Run("aborted")])  # never judged
    record_unit(store, "U6", a, [Run("pass"), Run("fail", started_at=T0 + DAY)])
    record_unit(store, "U7", a, [Run("running")])  # never judged
    return store


def test_yield_by_lot_counts_first_and_latest_judged_run(histories: Store) -> None:
    groups = {g.key: g for g in yields_by(histories, "lot")}
    # Worked by hand from the fixture: lot C-A judged units U1, U2, U6: first runs pass, fail, pass;
    # latest judged runs pass, pass, fail. Lot C-B: U3 (first judged run passed), U4 failed; U5 unjudged.
    a, b = groups[("c_integrator", "C-A")], groups[("c_integrator", "C-B")]
    assert (a.first_pass.passed, a.first_pass.units, a.final.passed, a.final.units) == (2, 3, 2, 3)
    assert (b.first_pass.passed, b.first_pass.units, b.final.passed, b.final.units) == (1, 2, 1, 2)
    assert (a.first_pass.low, a.first_pass.high) == pytest.approx(exact_ci(2, 3), rel=1e-9)
    assert (b.final.low, b.final.high) == pytest.approx(exact_ci(1, 2), rel=1e-9)


def test_unjudged_units_are_counted_apart(histories: Store) -> None:
    totals = unit_totals(histories)
    assert (totals.units, totals.judged, totals.unjudged) == (7, 5, 2)  # U5 aborted, U7 running
    report = yield_report(histories, "station")
    assert (report.overall_first_pass.passed, report.overall_first_pass.units) == (3, 5)
    assert (report.overall_final.passed, report.overall_final.units) == (3, 5)


def test_station_and_day_yields_follow_the_run_that_decided(histories: Store) -> None:
    by_station = {g.key[0]: g for g in yields_by(histories, "station")}
    # First judged runs: U1, U2, U4, U6 on line-1, U3 on line-2; latest: U1, U4, U6 on line-1, U2, U3 on line-2.
    one, two = by_station["line-1"], by_station["line-2"]
    assert (one.first_pass.passed, one.first_pass.units, one.final.passed, one.final.units) == (2, 4, 1, 3)
    assert (two.first_pass.passed, two.first_pass.units, two.final.passed, two.final.units) == (1, 1, 2, 2)
    by_day = {g.key[0]: g for g in yields_by(histories, "day")}
    assert set(by_day) == {"2026-03-02", "2026-03-03"}
    first_day, next_day = by_day["2026-03-02"], by_day["2026-03-03"]
    assert (first_day.first_pass.units, first_day.final.passed, first_day.final.units) == (5, 2, 3)
    assert (next_day.first_pass.units, next_day.final.passed, next_day.final.units) == (0, 1, 2)
    assert next_day.first_pass.value is None and (next_day.first_pass.low, next_day.first_pass.high) == (0.0, 1.0)


def test_the_day_is_the_utc_date(store: Store) -> None:
    # 23:30 at UTC-05:00 is 04:30 UTC the next day.
    late = dt.datetime(2026, 3, 2, 23, 30, tzinfo=dt.timezone(dt.timedelta(hours=-5)))
    record_unit(store, "U1", {}, [Run("pass", started_at=late)])
    assert [g.key for g in yields_by(store, "day")] == [("2026-03-03",)]


def test_yield_by_product(store: Store) -> None:
    record_unit(store, "U1", {}, [Run("pass")])
    record_unit(store, "U2", {}, [Run("fail")])
    record_unit(store, "V1", {}, [Run("fail"), Run("pass")], design_sha=OTHER_DESIGN_SHA)
    groups = {g.key[0]: g for g in yields_by(store, "product")}
    assert (groups["PW-22"].first_pass.passed, groups["PW-22"].first_pass.units) == (1, 2)
    assert (groups["PW-30"].first_pass.passed, groups["PW-30"].final.passed) == (0, 1)


@pytest.mark.parametrize(("k", "n"), [(0, 12), (12, 12), (7, 19), (1, 1), (95, 100)])
def test_clopper_pearson_equals_scipy_exact_interval(k: int, n: int) -> None:
    assert clopper_pearson(k, n) == pytest.approx(exact_ci(k, n), rel=1e-9, abs=1e-12)


def test_unknown_grouping_is_a_user_error(store: Store) -> None:
    with pytest.raises(UserInputError, match="expected one of lot, station, day, product"):
        yields_by(store, "operator")


def test_lot_yields_agree_with_the_per_run_tables(store: Store) -> None:
    # Cross-check of the SQL aggregation against the per-run arrays, computed independently in numpy.
    rng = np.random.default_rng(5)
    for u in range(40):
        verdicts = [["pass"], ["fail", "pass"], ["station-fault", "fail"], ["aborted"]][int(rng.integers(4))]
        record_unit(store, f"U{u}", {"r_integrator": f"R{u % 3}", "c_integrator": f"C{u % 2}"},
                    [Run(v, started_at=T0 + dt.timedelta(minutes=i)) for i, v in enumerate(verdicts)])
    runs, lots = load_runs(store), load_unit_lots(store)
    for g in yields_by(store, "lot"):
        part, lot = g.key
        first, last = runs.first_judged, runs.last_judged
        in_lot_first = lots.of_units(part, runs.unit_id[first]) == lot
        in_lot_last = lots.of_units(part, runs.unit_id[last]) == lot
        assert g.first_pass.units == in_lot_first.sum()
        assert g.first_pass.passed == (runs.verdict[first][in_lot_first] == "pass").sum()
        assert g.final.passed == (runs.verdict[last][in_lot_last] == "pass").sum()
    assert runs.first_run.sum() == 40 and runs.first_judged.sum() == unit_totals(store).judged


def test_a_period_counts_verdicts_given_inside_it(histories: Store) -> None:
    # Worked by hand from the fixture: on the second day (T0 + 1 day) no unit had its first judged run;
    # the latest judged runs of U2 (pass, line-2) and U6 (fail) started then. Lot C-A holds both.
    second_day = parse_period("2026-03-03", T0)
    lots = {g.key: g for g in yields_by(histories, "lot", period=second_day)}
    a = lots[("c_integrator", "C-A")]
    assert (a.first_pass.units, a.final.passed, a.final.units) == (0, 1, 2)
    assert ("c_integrator", "C-B") not in lots  # nothing of lot C-B was judged that day
    report = yield_report(histories, "product", period=second_day)
    assert (report.overall_first_pass.units, report.overall_final.passed, report.overall_final.units) == (0, 1, 2)
    assert (report.totals.units, report.totals.judged) == (2, 2)  # U2 and U6 ran that day
    # The first day: every first judged run (U1..U4, U6: 3 passed of 5), latest of U1, U3, U4 (2 of 3).
    first_day = yield_report(histories, "lot", period=parse_period("2026-03-02", T0))
    assert (first_day.overall_first_pass.passed, first_day.overall_first_pass.units) == (3, 5)
    assert (first_day.overall_final.passed, first_day.overall_final.units) == (2, 3)


@pytest.mark.parametrize("by", ["lot", "station", "day", "product"])
def test_a_period_of_every_day_is_all_runs(histories: Store, by: str) -> None:
    both_days = parse_period("2026-03-02..2026-03-03", T0)
    assert yields_by(histories, by, period=both_days) == yields_by(histories, by)
    assert yields_by(histories, by, period=parse_period("2026-03-04", T0)) == ()
