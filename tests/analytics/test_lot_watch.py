"""Early warning of a shifted lot: the CUSUM's run lengths, the standardization, alerts, the stored charts."""

from __future__ import annotations

import math
from collections.abc import Iterator

import numpy as np
import pytest

from fixture._data import data_dir
from fixture.analytics.cusum_arl import siegmund_arl, simulated_run_lengths
from fixture.analytics.diagnosis import PartEstimate, UnitDiagnosis, diagnose_unit
from fixture.analytics.lot_watch import (
    ChartState,
    Side,
    WatchSettings,
    feed,
    recentred_design,
    watch_unit,
)
from fixture.analytics.lot_watch_run import state_of, step_run, watch_run
from fixture.analytics.part_fit import Reading
from fixture.files.design_file import load_design
from fixture.model.design import ProductDesign
from fixture.sim.batch import BatchPlan, plan_batch
from fixture.store import MeasurementRecord, Store
from fixture.store.lot_watch import ChartMoved, chart_states, record_lot_watch, run_lot_watch
from tests.analytics.conftest import Run, counter_readings, record_unit


@pytest.fixture(scope="module")
def design() -> ProductDesign:
    return load_design(data_dir("sequences") / "demo-panel.toml")


def production(design: ProductDesign, plan: BatchPlan, seed: int) -> Iterator[tuple]:
    """Each planned unit with its readings, in production order."""
    rng = np.random.default_rng(seed)
    for planned in plan.units:
        yield planned, counter_readings(plan.build(design, planned), design, rng)


def run_line(design: ProductDesign, plan: BatchPlan, seed: int):
    """Every unit through the charts as knobline test does; (unit index, alert) and the chart steps."""
    states, alerts, steps_seen = {}, [], []
    for planned, rs in production(design, plan, seed):
        fit, centres = recentred_design(design, {k: s for k, s in states.items() if planned.lots.get(k[0]) == k[1]})
        steps, raised = watch_unit(design, diagnose_unit(fit, rs), planned.lots, states, fit_centres=centres)
        for key, step in steps.items():
            states[key] = step.state
            steps_seen.append((planned, key, step))
        alerts += [(planned.index, a) for a in raised]
    return alerts, steps_seen


# -- the CUSUM ----------------------------------------------------------------------------------

@pytest.mark.parametrize(("h", "table_arl0"), [(4.0, 168.0), (5.0, 465.0)])
def test_in_control_run_length_matches_the_published_table(h: float, table_arl0: float) -> None:
    # Montgomery, Introduction to Statistical Quality Control, the table of ARLs of the two-sided
    # tabular CUSUM with k = 1/2: ARL0 = 168 at h = 4 and 465 at h = 5 (from memory).
    lengths = simulated_run_lengths(WatchSettings(k=0.5, h=h), 0.0, runs=10_000, seed=7)
    se = lengths.std(ddof=1) / math.sqrt(lengths.size)
    assert abs(lengths.mean() - table_arl0) < 4 * se


def test_siegmund_approximation_reproduces_the_table() -> None:
    # Same table (from memory): in control 168 and 465; a 1-sigma shift 8.38 (h = 4) and 10.4 (h = 5).
    assert siegmund_arl(0.5, 4.0) == pytest.approx(168, rel=0.02)
    assert siegmund_arl(0.5, 5.0) == pytest.approx(465, rel=0.02)
    assert siegmund_arl(0.5, 4.0, 1.0) == pytest.approx(8.38, rel=0.03)
    assert siegmund_arl(0.5, 5.0, 1.0) == pytest.approx(10.4, rel=0.03)


def test_the_chosen_chart_runs_about_9500_units_in_control() -> None:
    # Siegmund's approximation (Siegmund 1985) against our own seeded simulation of the chosen chart
    # with its cap: the cap at 4 sigma removes a 6e-5 tail and must not move ARL0 measurably.
    settings = WatchSettings()
    lengths = simulated_run_lengths(settings, 0.0, runs=1500, seed=11)
    se = lengths.std(ddof=1) / math.sqrt(lengths.size)
    assert abs(lengths.mean() - siegmund_arl(settings.k, settings.h)) < 4 * se
    assert siegmund_arl(settings.k, settings.h) > 9000  # 10 charts per unit: about 1 false alert per 1000 units


def _diagnosis(design: ProductDesign, deviation_pct: float, share: float, **kwargs) -> UnitDiagnosis:
    part = design.part("knob_a_pot")
    estimate = PartEstimate(key=part.key, name="RV1", nominal=part.nominal, estimate=math.nan, standard_error=0.0,
                            deviation_pct=deviation_pct, deviation_se_pct=0.0, tolerance_pct=20.0, z=0.0,
                            data_share=share, alone_pct=deviation_pct)
    return UnitDiagnosis(serial="x", finding="", parts=(estimate,), **kwargs)


def test_a_chart_steps_by_the_tabular_cusum_on_the_standardized_value(design: ProductDesign) -> None:
    # Montgomery eq. 9.2/9.3: C+ = max(0, C+ + z - k), C- = max(0, C- - z - k). RV1: 20 % uniform, so
    # sigma = 20/sqrt(3) % (GUM 4.3.7); at data share 0.25 the in-control sd of d/s is sigma/0.5.
    sigma = 20 / math.sqrt(3)
    state = ChartState("knob_a_pot", "RV1-A")
    zs = [1.5, -0.2, 3.0, -2.0]
    high = low = 0.0
    for z in zs:
        d = z * sigma * math.sqrt(0.25)  # the fitted deviation that standardizes to z
        step = feed(state, _diagnosis(design, d, 0.25), design)
        high, low = max(0.0, high + z - 0.5), max(0.0, low - z - 0.5)
        assert step.standardized == pytest.approx(z)
        assert step.deviation_pct == pytest.approx(d / 0.25)
        assert (step.state.cusum_high, step.state.cusum_low) == pytest.approx((high, low))
        state = step.state
    assert state.units == 4
    assert state.shift_pct == pytest.approx(np.mean([z * sigma * 0.5 / 0.25 for z in zs]))


def test_one_wild_unit_cannot_alert_and_an_alert_latches_until_the_sum_returns_to_zero(design) -> None:
    sigma = 20 / math.sqrt(3)
    state = ChartState("knob_a_pot", "RV1-A")
    step = feed(state, _diagnosis(design, 50 * sigma, 1.0), design)  # z = 50, capped at 4
    assert step.alert is None and step.state.cusum_high == pytest.approx(3.5)
    alerts = []
    for _ in range(5):
        step = feed(step.state, _diagnosis(design, 3 * sigma, 1.0), design)
        alerts.append(step.alert)
    assert [a is not None for a in alerts] == [False, True, False, False, False]  # 3.5 + 2.5 + 2.5 > 8
    assert alerts[1].side is Side.HIGH and step.state.latched is Side.HIGH
    while step.state.cusum_high > 0:  # the lot reads nominal again: the sum drains, the latch opens
        step = feed(step.state, _diagnosis(design, -1 * sigma, 1.0), design)
    assert step.state.latched is None


def test_units_with_their_own_defect_are_left_out_and_said_so(design: ProductDesign) -> None:
    state = ChartState("knob_a_pot", "RV1-A")
    declined = UnitDiagnosis(serial="x", finding="", declined="no readings")
    misfit = _diagnosis(design, 90.0, 1.0, explained=False)
    for diagnosis, words in ((declined, "no diagnosis"), (misfit, "does not explain")):
        step = feed(state, diagnosis, design)
        assert step.standardized is None and words in step.note
        assert step.state.units == 0 and step.state.left_out == 1


# -- in-control units through the real diagnosis ------------------------------------------------

def test_in_control_units_standardize_to_mean_0_and_sd_1(design: ProductDesign) -> None:
    # Var(posterior mean) = prior var - posterior var = sigma^2 s for a linear-Gaussian model
    # (e.g. Gelman et al., Bayesian Data Analysis, the normal model's posterior; from memory).
    plan = plan_batch(design, units=120, seed=21, shift=0.0, defect_fraction=0.0)
    _, steps = run_line(design, plan, seed=21)
    for part in ("c_integrator", "r_integrator", "knob_a_pot", "r_threshold_bottom"):
        z = np.array([s.standardized for _, key, s in steps if key[0] == part and s.standardized is not None])
        assert z.size > 100
        assert abs(z.mean()) < 4 / math.sqrt(z.size)  # within 4 standard errors of 0
        assert 0.8 < z.std(ddof=1) < 1.2  # the sd of an sd estimate from ~110 values is about 0.07


@pytest.mark.parametrize("seed", [3, 4])
def test_a_planted_capacitor_lot_at_minus_8_percent_alerts_within_six_of_its_units(design, seed: int) -> None:
    # The bench (bench/lot_watch_rates.py) measures a median of 3 and a 90th percentile of 5 units.
    plan = plan_batch(design, units=40, seed=seed, shift=-0.08, defect_fraction=0.0)
    part, lot, _ = plan.shifted
    alerts, _ = run_line(design, plan, seed=seed)
    lot_units = [u.index for u in plan.units_of_lot(part, lot)]
    first = next(i for i, a in alerts if a.names(part, lot))
    assert lot_units.index(first) + 1 <= 6
    alert = next(a for i, a in alerts if i == first and a.names(part, lot))
    assert alert.side is Side.LOW and "C1 integrator capacitor" in alert.text and lot in alert.text


def test_once_a_lot_alerted_the_lots_it_shares_units_with_do_not_alert(design: ProductDesign) -> None:
    # A -8 % capacitor lot left in the prior's centre pushes its readings into every part that moves
    # them alike: 1 % threshold-divider lots then read -3 % un-shrunk and alert. Re-centring the
    # alerted lot's part on its estimate stops that (the demo's batch, seed 2026, with its defects).
    plan = plan_batch(design, units=60, seed=2026)
    part, lot, _ = plan.shifted
    alerts, _ = run_line(design, plan, seed=2026)
    assert alerts and all(a.names(part, lot) for _, a in alerts)


def test_defective_units_raise_no_lot_alert(design: ProductDesign) -> None:
    # every unit carries a defect (wrong part, open or noisy pot, stuck output, excess current), no lot is off
    plan = plan_batch(design, units=30, seed=5, shift=0.0, defect_fraction=1.0)
    alerts, steps = run_line(design, plan, seed=5)
    assert alerts == []
    assert any("single wrong part" in s.note for _, _, s in steps)


# -- the store ------------------------------------------------------------------------------------

def _record(store: Store, design: ProductDesign, plan: BatchPlan, seed: int) -> list[tuple[int, dict]]:
    """Every unit of the plan recorded as a passed run with its readings; (run id, lots) in order."""
    runs = []
    for planned, rs in production(design, plan, seed):
        records = [MeasurementRecord(name="r", quantity=r.quantity, value=r.value, unit="Hz", verdict="pass",
                                     knob_a_pct=r.knob_a_pct, knob_b_pct=r.knob_b_pct) for r in rs]
        run_id = record_unit(store, planned.serial, planned.lots, [Run("pass", readings=records)])[0]
        runs.append((run_id, dict(planned.lots)))
    return runs


def test_charts_continue_from_the_store_as_in_one_process(store: Store, design: ProductDesign) -> None:
    plan = plan_batch(design, units=12, seed=3, shift=-0.08, defect_fraction=0.0)
    stored_alerts = []
    for run_id, lots in _record(store, design, plan, seed=3):
        outcome = watch_run(store, design, run_id, lots)  # what one knobline test process does per unit
        assert outcome.warning is None
        stored_alerts += [(run_id, a) for a in outcome.alerts]
    memory_alerts, steps = run_line(design, plan, seed=3)
    final = {key: step.state for _, key, step in steps}
    assert {k: state_of(e) for k, e in chart_states(store, final).items()} == final
    assert [a.text for _, a in stored_alerts] == [a.text for _, a in memory_alerts]
    assert stored_alerts  # the planted lot alerted, and the alert is stored with the run that raised it
    run_id, alert = stored_alerts[0]
    assert alert.text in [e.alert for e in run_lot_watch(store, run_id)]


def test_a_retest_and_a_station_fault_do_not_feed_the_charts(store: Store, design: ProductDesign) -> None:
    plan = plan_batch(design, units=1, seed=3, shift=0.0, defect_fraction=0.0)
    (run_id, lots), = _record(store, design, plan, seed=3)
    assert watch_run(store, design, run_id, lots).note == ""
    retest = record_unit(store, plan.units[0].serial, lots, [Run("pass")])[0]
    assert "retest" in watch_run(store, design, retest, lots).note
    faulted = record_unit(store, "PW22-009999", lots, [Run("station-fault")])[0]
    assert "did not judge" in watch_run(store, design, faulted, lots).note
    assert run_lot_watch(store, retest) == [] and run_lot_watch(store, faulted) == []


def test_a_chart_stepped_by_another_station_meanwhile_is_not_overwritten(store: Store, design) -> None:
    plan = plan_batch(design, units=2, seed=3, shift=0.0, defect_fraction=0.0)
    (first, lots), (second, _) = _record(store, design, plan, seed=3)
    watch_run(store, design, first, lots)
    stale = {k: None for k in lots.items()}  # computed as if the charts were new
    entries = run_lot_watch(store, first)
    with pytest.raises(ChartMoved):
        record_lot_watch(store, second, entries, stale)
    assert run_lot_watch(store, second) == []


def test_a_step_computed_from_a_stale_chart_is_computed_again_from_the_stored_one(store: Store, design) -> None:
    plan = plan_batch(design, units=2, seed=3, shift=0.0, defect_fraction=0.0)
    (first, lots), (second, _) = _record(store, design, plan, seed=3)
    watch_run(store, design, first, lots)
    rs = [Reading(m.knob_a_pct, m.knob_b_pct, m.quantity, m.value)
          for step in store.run(second).steps for m in step.measurements]
    step_run(store, design, second, lots, diagnose_unit(design, rs), stored={})  # as if read before the first
    assert {e.units + e.left_out for e in run_lot_watch(store, second)} == {2}  # continued, not restarted


def test_two_stations_stepping_one_chart_at_once_never_fork_it(store: Store, design, db_url: str) -> None:
    # Under PostgreSQL's READ COMMITTED two writers would both read the same latest step and both insert
    # a continuation of it: the chart forks and a unit's step is lost (PostgreSQL docs, "Transaction
    # Isolation", from memory). Played deterministically: the first writer pauses after its read, inside
    # its transaction; the second must wait and then find the chart moved.
    import threading

    import fixture.store.lot_watch as lot_watch_store
    from fixture.store import open_store

    if store.engine.dialect.name == "sqlite":
        pytest.skip("SQLite's BEGIN IMMEDIATE serialises the two writers before either reads")
    plan = plan_batch(design, units=3, seed=3, shift=0.0, defect_fraction=0.0)
    (first, lots), (second, _), (third, _) = _record(store, design, plan, seed=3)
    watch_run(store, design, first, lots)
    entries = run_lot_watch(store, first)
    previous = {(e.part_key, e.lot_code): e.row_id for e in entries}
    real_latest, read, go = lot_watch_store._latest, threading.Event(), threading.Event()

    def latest_then_pause(s, keys):
        found = real_latest(s, keys)
        if threading.current_thread().name == "first":
            read.set()
            go.wait(10)
        return found

    lot_watch_store._latest = latest_then_pause
    outcome: dict[str, object] = {}

    def step(name: str, run_id: int) -> None:
        with open_store(db_url) as other:
            try:
                record_lot_watch(other, run_id, entries, previous)
                outcome[name] = "written"
            except ChartMoved:
                outcome[name] = "moved"

    try:
        a = threading.Thread(target=step, args=("first", second), name="first")
        a.start()
        assert read.wait(10)
        b = threading.Thread(target=step, args=("second", third), name="second")
        b.start()
        b.join(1.0)
        assert b.is_alive(), "the second writer went ahead while the first held the chart"
        go.set()
        a.join(10)
        b.join(10)
    finally:
        go.set()
        lot_watch_store._latest = real_latest
    assert outcome == {"first": "written", "second": "moved"}
    assert run_lot_watch(store, third) == []
