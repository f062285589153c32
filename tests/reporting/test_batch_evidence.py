"""The batch report's evidence: a page that does not grow with the units, charts only where they say something,
a Pareto that reads with one bar or twenty, and nothing left out without the page saying so."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from fixture._data import data_dir
from fixture.analytics import MeasurementTable, SeriesKey, pareto, spc_by_series
from fixture.reporting import charts
from fixture.reporting.batch_evidence import MAX_CHARTED, evidence, pareto_view
from fixture.reporting.batch_report import build_batch_report
from fixture.reporting.render import template_folders
from fixture.reporting.templating import make_environment, render_template
from fixture.store import open_store
from tests.reporting import hostile
from tests.reporting.bulk_store import build_replica, make_template
from tests.reporting.test_wording import identifiers_in, visible_text

TEMPLATES = template_folders(data_dir("reports"), None)
SERIAL = re.compile(r"PW22-\d{6}")


@pytest.fixture(scope="module")
def template(tmp_path_factory: pytest.TempPathFactory) -> str:
    """A real demo batch of 40 units (the simulated bench), the source of the replicas below."""
    return make_template(tmp_path_factory.mktemp("template"), 40, seed=5)


def report_of(template: str, folder: Path, units: int) -> str:
    url = f"sqlite:///{folder / f'replica-{units}.sqlite'}"
    # The same three days for both sizes: the yield-by-day table has a row per day, not per unit.
    build_replica(template, url, units, seed=3, days=3.0)
    with open_store(url) as store:
        return build_batch_report(store, design=None, templates=TEMPLATES, title="Batch and lot report").html


def test_the_report_does_not_grow_with_the_units_and_lists_no_unit(template: str, tmp_path: Path,
                                                                     monkeypatch: pytest.MonkeyPatch) -> None:
    # Control charts group consecutive units above MAX_POINTS readings; lowered here so that a small store
    # already draws groups at both sizes, as a year of a line does at 10^5 units.
    monkeypatch.setattr(charts, "MAX_POINTS", 20)
    small, large = report_of(template, tmp_path, 60), report_of(template, tmp_path, 240)
    # Common practice, no source: four times the units may add digits and a few lot rows (the lot tests
    # gain power), never kilobytes per unit (the report before this grew 3.4 KB per unit: +620 KB here).
    assert len(large) <= 1.1 * len(small), (len(small), len(large))
    # No table or list with a row per unit: no serial on the page at all (per-unit detail is `knobline unit`).
    assert SERIAL.findall(small) == [] and SERIAL.findall(large) == []
    # Up to 240 readings in 20 groups (fewer readings where a unit failed power-up), and the page says so.
    assert re.search(r"drawn as 20 groups of 1[12] consecutive units", large)


def series_table(values_by_series: list[np.ndarray], low: float, high: float) -> MeasurementTable:
    """Readings of several series, one per unit each, with the same acceptance and tolerance limits."""
    keys = tuple(SeriesKey("frequency at knob A stops", "frequency_hz", float(10 * i), 50.0, "Hz")
                 for i in range(len(values_by_series)))
    n = len(values_by_series[0])
    series = np.repeat(np.arange(len(keys)), n)
    unit_id = np.tile(np.arange(1, n + 1), len(keys))
    full = np.full(len(series), 1.0)
    return MeasurementTable(keys=keys, series=series, run_id=unit_id, unit_id=unit_id,
                            value=np.concatenate(values_by_series), tolerance_low=full * low,
                            tolerance_high=full * high, acceptance_low=full * low, acceptance_high=full * high,
                            passed=np.ones(len(series), dtype=bool))


def quiet(centre: float = 1000.0, n: int = 60) -> np.ndarray:
    """``centre`` -1, +1, -1, ... Hz: the points alternate sides (no run of 8, Western Electric rule 4) and sit
    at 0.56 sigma (sigma = MR-bar / d2 = 2 / 1.128 = 1.77 Hz, AIAG), so no run rule fires; within 900..1100 Hz
    Cpk = (1100 - 1000) / (3 x 1.77) = 18.8 at 1000 Hz."""
    return centre + np.where(np.arange(n) % 2 == 0, -1.0, 1.0)


def test_a_quantity_breaking_a_rule_is_charted_and_a_quiet_one_is_only_in_the_table() -> None:
    breaking = quiet()
    breaking[30] = 1040.0  # 13 sigma off: Western Electric rule 1 (one point beyond 3 sigma), WE handbook 1956
    table = series_table([quiet(), breaking, quiet()], 900.0, 1100.0)
    shown = evidence(spc_by_series(table), table, ())
    assert [c["title"] for c in shown["charts"]] == ["Frequency at knob A 10 %, B 50 %"]
    assert "rule 1 (one reading beyond 3 sigma): 1 time" in shown["charts"][0]["rules"]
    rows = {r["what"]: r for r in shown["table"]}
    assert len(rows) == 3 and rows["Frequency at knob A 10 %, B 50 %"]["charted"]
    assert not rows["Frequency at knob A 0 %, B 50 %"]["charted"]
    assert shown["table"][0]["what"] == "Frequency at knob A 10 %, B 50 %"  # most at risk first
    # The page says why the others are not charted, with the lowest index among them.
    (why,) = shown["not_charted"]
    assert why.startswith("2 quantities in the table break no run rule and sit at Cpk and Ppk of ")


def test_a_quantity_near_its_limit_is_charted_though_it_breaks_no_rule() -> None:
    near = quiet(1095.0)  # 5 Hz from the limit: Cpk = 5 / (3 x 1.77) = 0.94, below 1.33 (AIAG)
    table = series_table([quiet() for _ in range(8)] + [near], 900.0, 1100.0)
    shown = evidence(spc_by_series(table), table, ())
    assert [c["title"] for c in shown["charts"]] == ["Frequency at knob A 80 %, B 50 %"]
    assert shown["charted_words"] == "1 quantity of 9 charted"
    assert shown["not_charted"][0].startswith("8 quantities in the table break no run rule")


def test_more_rule_breaking_quantities_than_charts_are_counted_not_dropped() -> None:
    series = []
    for _ in range(MAX_CHARTED + 2):
        x = quiet()
        x[20] = 1050.0  # rule 1
        series.append(x)
    table = series_table(series, 900.0, 1100.0)
    shown = evidence(spc_by_series(table), table, ())
    assert len(shown["charts"]) == MAX_CHARTED
    assert sum(r["charted"] for r in shown["table"]) == MAX_CHARTED and len(shown["table"]) == MAX_CHARTED + 2
    assert shown["not_charted"][0].startswith(f"2 more quantities break a run rule or sit below Cpk 1.33 but are "
                                              f"not charted: only the {MAX_CHARTED} most at risk are")


def render_evidence(shown: dict) -> str:
    """The evidence include rendered alone, as batch.html.j2 includes it."""
    return render_template(make_environment(TEMPLATES), "_batch_evidence.html.j2", {"evidence": shown})


def test_a_pareto_of_one_failing_step_is_a_sentence_without_identifiers() -> None:
    view = pareto_view(pareto({"power up": 7}))
    assert view["svg"] is None
    page = visible_text(render_evidence({"table": [], "charts": [], "charted_words": "0 quantities of 0 charted",
                                         "not_charted": [], "max_charted": MAX_CHARTED, "pareto": view}))
    assert "All 7 failures were in one step: power up." in page
    assert identifiers_in(page) == []


def test_a_pareto_of_twenty_failing_steps_draws_every_step_in_words() -> None:
    names = [f"knob sweep {i + 1}" for i in range(20)]
    view = pareto_view(pareto({name: 40 - i for i, name in enumerate(names)}))
    svg = view["svg"]
    texts = re.findall(r"<text[^>]*>([^<]*)</text>", svg)
    assert all(name in texts for name in names)
    assert identifiers_in(" ".join(texts)) == []
    # A fixed width: twenty steps make the chart taller, not wider (common practice, no source).
    one_of_two = pareto_view(pareto({"power up": 3, "knob sweep": 1}))["svg"]
    width = re.compile(r'<svg[^>]* width="([0-9.]+)pt" height="([0-9.]+)pt"')
    (w20, h20), (w2, h2) = width.search(svg).groups(), width.search(one_of_two).groups()
    assert w20 == w2 and float(h20) > 3 * float(h2)


def test_a_hostile_step_name_is_drawn_visibly_in_the_pareto_chart() -> None:
    svg = pareto_view(pareto({hostile.STEP_NAME: 2, "knob sweep": 1}))["svg"]
    assert "power&lt;U+202A&gt; up" in svg and hostile.raw_characters_in(svg) == []


def test_a_control_chart_of_many_units_draws_groups_and_says_so() -> None:
    rng = np.random.default_rng(14)
    x = 1000.0 + 2.0 * rng.standard_normal(10_000)
    x[5000] = 5000.0  # a wrong part, far beyond everything else
    chart = charts.control_chart(x, 1000.0, 994.0, 1006.0, [5000], "Frequency", "Hz")
    assert chart.svg.count("<use ") <= 2 * charts.MAX_POINTS + 10  # markers: a bounded number, not one per unit
    assert f"drawn as {charts.MAX_POINTS} groups of 50 consecutive units" in chart.note
    assert "1 reading lies outside the drawn range of both charts: 1 above (highest 5 kHz)" in chart.note
