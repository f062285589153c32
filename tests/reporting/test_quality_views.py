"""The quality pages' data: yields over a period, lot findings and alerts, a unit's history in words."""

from __future__ import annotations

import datetime as dt
from collections import defaultdict

import pytest
from scipy.stats import binomtest

from fixture.analytics.period import parse_period
from fixture.reporting.recorded_design import recorded_design
from fixture.reporting.quality_view import lot_findings_view, yield_view
from fixture.reporting.unit_history_view import history_view
from fixture.store import Store, open_store
from tests.quality_demo import ENGINEERING_SERIAL, FAULTED_SERIAL, demo_database

NOW = dt.datetime.now(dt.UTC)


@pytest.fixture(scope="module")
def demo_url(tmp_path_factory: pytest.TempPathFactory) -> str:
    return demo_database(tmp_path_factory.mktemp("demo"))


@pytest.fixture
def store(demo_url: str):
    with open_store(demo_url) as opened:
        yield opened


def hand_counted_first_pass(store: Store) -> tuple[int, int]:
    """Judged units and those whose first judged run passed, counted run by run from the stored summaries
    (the counting rule of README "yield": only pass and fail runs judge a unit)."""
    runs = defaultdict(list)
    for s in sorted(store.runs(limit=10_000), key=lambda s: s.run_id):
        if s.verdict in ("pass", "fail"):
            runs[s.serial].append(s.verdict)
    return sum(v[0] == "pass" for v in runs.values()), len(runs)


def exact_interval_words(k: int, n: int) -> str:
    # Reference: scipy.stats.binomtest(...).proportion_ci(method="exact"), Clopper-Pearson 95 %.
    ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
    return f"{100 * ci.low:.1f} % to {100 * ci.high:.1f} %"


@pytest.mark.parametrize("by", ["lot", "station", "day", "product"])
def test_overall_yield_is_the_hand_count_of_first_judged_runs(store: Store, by: str) -> None:
    passed, units = hand_counted_first_pass(store)
    view = yield_view(store, by, parse_period("all", NOW))
    assert view.overall_first_pass.count == f"{passed} of {units} units"
    assert view.overall_first_pass.interval == exact_interval_words(passed, units)
    assert f"{units} units judged" in view.units
    assert view.rows  # every grouping has at least one group


def test_a_period_without_runs_shows_no_groups(store: Store) -> None:
    view = yield_view(store, "lot", parse_period("2001-01-01", NOW))
    assert view.rows == () and view.overall_first_pass.value == "-"
    assert view.period == "2001-01-01 (UTC)"


def test_yield_by_lot_names_parts_in_words(store: Store) -> None:
    view = yield_view(store, "lot", parse_period("today", NOW))
    assert all("_" not in row.group and ", lot " in row.group for row in view.rows)
    assert any(row.group.startswith("C1 integrator capacitor") for row in view.rows)
    assert "Fisher" in view.lot_test


def test_lot_findings_name_the_planted_lot_and_list_alerts(store: Store) -> None:
    # The demo plants lot C1-2611A of C1 -8 % off nominal (README "Quick start"); the finding must name it.
    findings = lot_findings_view(store, recorded_design(store))
    assert any("C1-2611A" in words and "C1 integrator capacitor" in words for words in findings.findings)
    assert all(text.startswith("lot alert:") for _, text in findings.alerts)
    assert findings.alerts_total == len(findings.alerts)


def test_lot_findings_without_the_design_say_why(store: Store) -> None:
    findings = lot_findings_view(store, None)
    assert findings.findings == () and "design" in findings.note


def test_history_shows_every_stored_reading_in_words(store: Store) -> None:
    serial = store.runs(limit=10_000)[-1].serial  # the batch's first unit
    stored = store.unit(serial)
    view = history_view(store, stored)
    assert [r.run_id for r in view.runs] == [r.summary.run_id for r in reversed(stored.runs)]
    run, detail = view.runs[-1], stored.runs[0]
    assert [st.number for st in run.steps] == [st.index + 1 for st in sorted(detail.steps, key=lambda s: s.index)]
    readings = [r for st in run.steps for r in st.readings]
    assert len(readings) == sum(len(st.measurements) for st in detail.steps) > 0
    for reading in readings:
        assert "_" not in reading.what and reading.verdict_words in ("PASS", "FAIL", "RECORDED")
    limited = [r for r in readings if r.acceptance != "-"]
    assert limited and all(" to " in r.acceptance or r.acceptance[0] in "≤≥" for r in limited)
    assert all(label[:2] in ("C1", "R1", "R2", "R3", "R4", "R5", "R6", "R7", "RV") for label, _ in view.lots)


def test_runs_that_get_no_certificate_say_why(store: Store) -> None:
    faulted = history_view(store, store.unit(FAULTED_SERIAL)).runs[0]
    assert not faulted.certifiable and "station fault" in faulted.certificate_refusal
    engineering = history_view(store, store.unit(ENGINEERING_SERIAL)).runs[0]
    assert engineering.not_for_shipment and "not for shipment" in engineering.certificate_refusal
    good = history_view(store, store.unit(store.runs(limit=10_000)[-1].serial)).runs[0]
    assert good.certifiable == (good.verdict in ("pass", "fail"))
