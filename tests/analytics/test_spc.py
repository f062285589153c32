"""Capability, individuals charts, Western Electric rules and Pareto against published formulas and examples."""

from __future__ import annotations

import numpy as np
import pytest

from fixture.analytics import (
    RuleViolation,
    capability,
    failing_step_counts,
    individuals_chart,
    load_measurements,
    pareto,
    spc_by_series,
    western_electric,
)
from fixture.analytics import measurement_table
from fixture.store import MeasurementRecord, Store

from .conftest import Run, frequency, record_unit


def alternating(mean: float, half_step: float, n: int) -> np.ndarray:
    """mean - h, mean + h, ... (n even): every moving range is 2h, the sample sd is h sqrt(n / (n - 1))."""
    return mean + half_step * np.where(np.arange(n) % 2 == 0, -1.0, 1.0)


def test_cpk_on_the_nist_handbook_example() -> None:
    # NIST/SEMATECH e-Handbook of Statistical Methods, section 6.1.6 (process capability), example, from
    # memory: USL = 20, LSL = 8, mean 16, sigma 2 gives Cp = 1.0, Cpu = 0.6667, Cpl = 1.3333, Cpk = 0.6667.
    # Data with that summary: mean 16 and every moving range 2.256, so sigma_within = 2.256 / 1.128 = 2.
    values = alternating(16.0, 1.128, 40)
    cap = capability(values, lsl=8.0, usl=20.0)
    assert cap.sigma_within == pytest.approx(2.0)
    assert cap.cp == pytest.approx(1.0)
    assert cap.cpk == pytest.approx(0.6667, abs=1e-4)
    # Ppk uses the overall sample sd (AIAG SPC manual formula): here 1.128 sqrt(40 / 39).
    s = 1.128 * np.sqrt(40 / 39)
    assert cap.sigma_overall == pytest.approx(s)
    assert cap.ppk == pytest.approx(min(20.0 - 16.0, 16.0 - 8.0) / (3 * s))
    assert cap.pp == pytest.approx(12.0 / (6 * s))


def test_one_sided_limit_gives_the_one_sided_index_and_no_cp() -> None:
    # AIAG SPC manual / NIST 6.1.6: with only an upper limit, Cpk = Cpu = (USL - mean) / 3 sigma.
    cap = capability(alternating(16.0, 1.128, 40), lsl=None, usl=20.0)
    assert cap.cpk == pytest.approx(4.0 / 6.0)
    assert cap.cp is None and cap.pp is None


def test_individuals_chart_limits_are_mean_plus_minus_2_66_mr_bar() -> None:
    # NIST/SEMATECH e-Handbook 6.3.2.2 (individuals control charts), from memory: limits mean +/- 3 MR-bar / 1.128,
    # the textbook's 2.66 MR-bar rounded.
    x = np.array([10.0, 12.0, 11.0, 13.0, 12.0, 10.0, 11.0, 12.0])
    mr_bar = np.mean(np.abs(np.diff(x)))  # (2 + 1 + 2 + 1 + 2 + 1 + 1) / 7
    chart = individuals_chart(x)
    assert chart.mr_bar == pytest.approx(10.0 / 7.0)
    assert chart.centre == pytest.approx(x.mean())
    assert chart.ucl == pytest.approx(x.mean() + 2.66 * mr_bar, rel=1e-3)
    assert chart.lcl == pytest.approx(x.mean() - 2.66 * mr_bar, rel=1e-3)
    assert chart.violations == ()


# Hand-made sequences on a chart with centre 0 and sigma 1; each triggers exactly one Western Electric rule
# (Western Electric Statistical Quality Control Handbook, 1956, rules 1-4, from memory).
CLEAN = [0.5, -0.5, 0.3, -0.2, 1.5, -1.2, 0.1, -0.4, 0.6, -0.7, 0.2, -0.1]


@pytest.mark.parametrize(("values", "expected"), [
    (CLEAN, ()),
    ([0.5, -0.5, 3.4, -0.2, 0.1, -0.3], (RuleViolation(1, 2, "above"),)),
    ([0.5, -2.4, 0.3, -2.2, 0.1, -0.3], (RuleViolation(2, 3, "below"),)),
    ([0.5, -2.4, -2.2, 0.1, -0.3, 0.2], (RuleViolation(2, 2, "below"),)),  # not again at the 0.1 after it
    ([0.5, 1.3, 1.6, 0.2, 1.2, 1.4, -0.3], (RuleViolation(3, 5, "above"),)),
    ([-0.5, 0.3, 0.2, 0.6, 0.1, 0.4, 0.8, 0.5, 0.3, -0.6], (RuleViolation(4, 8, "above"),)),
])
def test_each_western_electric_rule_fires_alone_where_its_pattern_completes(values: list[float],
                                                                            expected: tuple[RuleViolation, ...]
                                                                            ) -> None:
    assert western_electric(np.array(values), centre=0.0, sigma=1.0) == expected


def test_a_long_run_fires_rule_4_at_each_point_that_extends_it() -> None:
    assert [v.index for v in western_electric(np.full(10, -0.5), 0.0, 1.0)] == [7, 8, 9]


def test_pareto_sorts_failures_with_cumulative_percent() -> None:
    # Common practice, no source: counts descending, percent of all failures, running total.
    entries = pareto({"duty at knob B stops": 3, "power up": 6, "knobs independent": 1, "decoder endpoints": 0})
    assert [(e.step, e.failures) for e in entries] == [("power up", 6), ("duty at knob B stops", 3),
                                                     ("knobs independent", 1)]
    assert [e.percent for e in entries] == pytest.approx([60.0, 30.0, 10.0])
    assert [e.cumulative_pct for e in entries] == pytest.approx([60.0, 90.0, 100.0])


def test_spc_per_series_reads_first_judged_runs_in_order_against_tolerance_limits(store: Store) -> None:
    readings = [1001.0, 998.0, 1003.0, 1000.0, 999.0]
    for i, value in enumerate(readings):
        record_unit(store, f"U{i}", {}, [Run("pass", readings=[frequency(value)])])
    # A retest's reading is not the unit's first: it stays out of SPC (each unit once).
    record_unit(store, "U0", {}, [Run("pass", readings=[frequency(1090.0)])])
    (series,) = spc_by_series(load_measurements(store))
    assert list(series.values) == readings
    assert (series.capability.lsl, series.capability.usl) == (900.0, 1100.0)
    assert series.capability.cpk == pytest.approx(
        min(1100.0 - np.mean(readings), np.mean(readings) - 900.0) / (3 * np.mean(np.abs(np.diff(readings))) / 1.128))
    (guarded,) = spc_by_series(load_measurements(store), limits="acceptance")
    assert (guarded.capability.lsl, guarded.capability.usl) == (905.0, 1095.0)
    assert len(load_measurements(store, runs="all")) == 6
    assert series.series.label == "frequency_hz at A 50 %, B 50 % (frequency at knob A stops)"


def test_failing_step_counts_come_from_the_store(store: Store) -> None:
    record_unit(store, "U1", {}, [Run("fail"), Run("pass")])
    record_unit(store, "U2", {}, [Run("fail")])
    assert failing_step_counts(store) == {"frequency at knob A stops": 2}


def duty(value_pct: float, knob_b_pct: float) -> MeasurementRecord:
    """A duty reading (unit "%", the character SQL drivers of the pyformat style escape) at knob B ``knob_b_pct``."""
    return MeasurementRecord(f"counter {knob_b_pct:g}", "duty_pct", value_pct, "%", "pass", knob_a_pct=50.0,
                             knob_b_pct=knob_b_pct, tolerance_low=40.0, tolerance_high=60.0)


def test_readings_in_percent_are_numbered_by_the_database_on_every_database(store: Store, monkeypatch) -> None:
    # The database numbers each reading's series (a CASE); readings it leaves unnumbered are looked up a
    # second time, correct but slow. A "%" written into the SQL reached psycopg's server as "%%", so
    # every duty reading took the slow path on PostgreSQL (common practice, no source: psycopg 3 docs,
    # "%%" is a literal "%" only in a statement given parameters).
    left_over: list[int] = []
    original = measurement_table._number_other_series

    def counting(con, columns, codes, *query) -> None:
        left_over.append(int((columns[0] == -1).sum()))
        original(con, columns, codes, *query)

    monkeypatch.setattr(measurement_table, "_number_other_series", counting)
    for i in range(3):
        record_unit(store, f"U{i}", {}, [Run("pass", readings=[frequency(1000.0 + i), duty(50.0 + i, 10.0)])])
    table = load_measurements(store)
    assert left_over == [0]
    assert [k.unit for k in table.keys] == ["%", "Hz"]
    assert sorted(table.value[table.series == 0]) == [50.0, 51.0, 52.0]


def test_series_missing_from_the_latest_steps_are_still_numbered(store: Store) -> None:
    # An older sequence read duty at knob B 10 %; the latest read it at 90 %: both series keep their readings.
    record_unit(store, "U0", {}, [Run("pass", readings=[duty(48.0, 10.0)])])
    record_unit(store, "U1", {}, [Run("pass", readings=[duty(49.0, 10.0)])])
    record_unit(store, "U2", {}, [Run("pass", readings=[duty(91.0, 90.0)])])
    table = load_measurements(store)
    assert [k.knob_b_pct for k in table.keys] == [10.0, 90.0]
    assert list(table.series) == [0, 0, 1]
    assert list(table.value) == [48.0, 49.0, 91.0]
