"""Joining tolerance limits with the station's uncertainty and decision rule."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pytest

from fixture.errors import UserInputError
from fixture.files.design_file import load_design
from fixture.files.station_file import load_station
from fixture.model.decision import DecisionRule
from fixture.model.limits import compute_limits
from fixture.model.measurement_plan import measure_row, measure_table, signal_facts
from fixture.model.tolerance.monte_carlo import McOptions
from fixture.model.uncertainty import CounterGate, counter_budget


@pytest.fixture(scope="module")
def demo():
    design = load_design("sequences/demo-panel.toml")
    table = compute_limits(design, method="rss", mc_options=McOptions(samples=1000))
    return design, table, load_station("sequences/demo-station.toml").measurement


def test_guarded_acceptance_narrows_each_tolerance_limit_by_u(demo) -> None:
    # ILAC-G8:09/2019: acceptance limit = tolerance limit - w, w = r U (r = 1 here).
    design, table, setup = demo
    for row in table.rows:
        m = measure_row(design, row, setup)
        assert m.acceptance_low == pytest.approx(row.tolerance_low + m.expanded_u)
        assert m.acceptance_high == pytest.approx(row.tolerance_high - m.expanded_u)


def test_simple_acceptance_uses_the_tolerance_limits_themselves(demo) -> None:
    design, table, setup = demo
    m = measure_row(design, table.rows[0], replace(setup, rule=DecisionRule("simple")))
    assert (m.acceptance_low, m.acceptance_high) == (table.rows[0].tolerance_low, table.rows[0].tolerance_high)


def test_tur_is_the_tolerance_span_over_twice_the_expanded_uncertainty(demo) -> None:
    # TUR = (upper - lower tolerance limit) / (2 U), U at k = 2 (ANSI/NCSL Z540.3 handbook; from memory).
    design, table, setup = demo
    row = table.rows[0]
    m = measure_row(design, row, setup)
    assert m.tur == pytest.approx((row.tolerance_high - row.tolerance_low) / (2 * m.expanded_u))


def test_a_fixed_gate_time_is_used_for_the_budget(demo) -> None:
    design, table, setup = demo
    row = table.rows[0]
    fixed = replace(setup, gate_time_s=0.5)
    m = measure_row(design, row, fixed)
    expected = counter_budget(row.quantity, signal_facts(design, row.setting, fixed), setup.counter,
                              CounterGate(0.5))
    assert m.expanded_u == pytest.approx(expected.expanded_uncertainty)
    assert m.setting == "gate 500 ms"


def test_the_shortest_gate_is_reported_even_when_a_gate_is_fixed(demo) -> None:
    design, table, setup = demo
    m = measure_row(design, table.rows[0], replace(setup, gate_time_s=1.0))
    assert m.shortest.meets_target
    assert m.shortest.test_time_s < m.test_time_s


def test_scope_station_measures_every_row(demo, tmp_path) -> None:
    design, table, setup = demo
    text = Path("sequences/demo-station.toml").read_text(encoding="utf-8").replace(
        'instrument = "counter"', 'instrument = "scope"')
    path = tmp_path / "scope.toml"
    path.write_text(text, encoding="utf-8")
    measured = measure_table(table, load_station(path).measurement)
    assert len(measured) == len(table.rows)
    assert all(m.expanded_u > 0 and m.setting.startswith("record ") for m in measured.values())


def test_a_model_that_does_not_give_the_output_edge_needs_it_in_the_station_file(demo, tmp_path) -> None:
    design, table, setup = demo
    internals_free = replace(design, model=_NoEdgeModel(design.model))
    with pytest.raises(UserInputError, match="measurement.edge_slew: expected the output edge's slew rate"):
        signal_facts(internals_free, table.rows[0].setting, setup)
    facts = signal_facts(internals_free, table.rows[0].setting,
                         replace(setup, edge_slew_v_per_s=1e6, swing_v=5.0))
    assert facts.slew_rise_v_per_s == 1e6 and facts.swing_v == 5.0


class _NoEdgeModel:
    """Wraps a model and hides what it says of the output edge."""

    def __init__(self, inner) -> None:
        self.inner = inner
        self.name, self.description, self.parameters = inner.name, inner.description, inner.parameters

    def evaluate(self, values):
        signal = self.inner.evaluate(values)
        signal.internals = {}
        return signal

    def check(self, values):
        return self.inner.check(values)
