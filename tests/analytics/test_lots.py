"""Lot flags: worse yield (Fisher, Holm) and shifted means (Welch, one-way ANOVA), equal to scipy.stats."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import f_oneway, fisher_exact, ttest_ind

from fixture.analytics import holm, load_measurements, load_unit_lots, lot_mean_tests, lot_yield_tests, yields_by
from fixture.store import Store

from .conftest import Run, frequency, record_unit


def test_holm_adjusts_a_hand_example() -> None:
    # Holm (1979) step-down, from memory, worked by hand: sorted p 0.005, 0.01, 0.03, 0.04 times 4, 3, 2, 1
    # = 0.02, 0.03, 0.06, 0.04, made non-decreasing: 0.02, 0.03, 0.06, 0.06. At alpha 0.05 only the
    # first two are rejected, though 0.04 < 0.05 on its own.
    adjusted = holm([0.01, 0.04, 0.03, 0.005])
    assert adjusted == pytest.approx([0.03, 0.06, 0.06, 0.02])
    assert list(adjusted <= 0.05) == [True, False, False, True]


def test_holm_caps_at_one() -> None:
    # Common practice, no source: an adjusted p-value is a probability.
    assert holm([0.5, 0.6]) == pytest.approx([1.0, 1.0])


@pytest.fixture
def lot_yields(store: Store) -> Store:
    """Part r_integrator: lot R-BAD fails 6 of 10 first runs, lots R-1 and R-2 fail 1 of 10 each."""
    fails = {"R-BAD": 6, "R-1": 1, "R-2": 1}
    for lot, n_fail in fails.items():
        for u in range(10):
            verdict = "fail" if u < n_fail else "pass"
            record_unit(store, f"{lot}-{u}", {"r_integrator": lot, "c_integrator": f"C-{u % 2}"}, [Run(verdict)])
    return store


def test_lot_with_worse_yield_is_flagged_with_scipy_fisher_p_values(lot_yields: Store) -> None:
    result = lot_yield_tests(yields_by(lot_yields, "lot"))
    tests = {(t.part, t.lot): t for t in result.tests}
    bad = tests[("r_integrator", "R-BAD")]
    # Reference: scipy.stats.fisher_exact, rows (lot, rest), columns (passed, failed), one-sided "less".
    odds, p = fisher_exact([[4, 6], [18, 2]], alternative="less")
    assert bad.p_value == pytest.approx(p, rel=1e-12)
    assert bad.odds_ratio == pytest.approx(odds)
    raw = [t.p_value for t in result.tests]
    assert [t.p_adjusted for t in result.tests] == pytest.approx(list(holm(raw)))
    assert [t.lot for t in result.flagged] == ["R-BAD"]
    assert "Holm-Bonferroni" in result.method and "5 lots" in result.method  # 3 resistor + 2 capacitor lots


def test_no_yield_flag_when_lots_fail_alike(store: Store) -> None:
    for lot in ("R-1", "R-2", "R-3"):
        for u in range(8):
            record_unit(store, f"{lot}-{u}", {"r_integrator": lot}, [Run("fail" if u < 2 else "pass")])
    assert lot_yield_tests(yields_by(store, "lot")).flagged == ()


def fill_readings(store: Store, shift_pct: float, seed: int = 3) -> dict[str, np.ndarray]:
    """Three capacitor lots of 12 units, frequency readings at two knob stops; lot C-3 moved by ``shift_pct``."""
    rng = np.random.default_rng(seed)
    values: dict[str, np.ndarray] = {}
    for lot in ("C-1", "C-2", "C-3"):
        factor = 1.0 + (shift_pct / 100.0 if lot == "C-3" else 0.0)
        # Every reading well inside 900..1100 Hz: every unit passes, the shift is the early warning.
        at_50 = 1000.0 * factor * (1.0 + 0.004 * rng.standard_normal(12))
        values[lot] = at_50
        for u in range(12):
            record_unit(store, f"{lot}-{u}", {"c_integrator": lot, "r_integrator": f"R-{u % 2}"},
                        [Run("pass", readings=[frequency(float(at_50[u]), 50.0),
                                               frequency(float(500.0 + rng.standard_normal()), 0.0)])])
    return values


def test_shifted_lot_mean_is_flagged_with_welch_and_anova_equal_to_scipy(store: Store) -> None:
    values = fill_readings(store, shift_pct=3.0)
    result = lot_mean_tests(load_measurements(store), load_unit_lots(store))
    flagged = result.flagged
    assert [(s.part, s.lot, s.series.knob_a_pct) for s in flagged] == [("c_integrator", "C-3", 50.0)]
    shift = flagged[0]
    rest = np.concatenate([values["C-1"], values["C-2"]])
    # Reference: scipy.stats.ttest_ind(equal_var=False) (Welch) on the same readings.
    t, p = ttest_ind(values["C-3"], rest, equal_var=False)
    assert (shift.t_statistic, shift.p_value) == pytest.approx((t, p), rel=1e-9)
    assert shift.difference == pytest.approx(values["C-3"].mean() - rest.mean())
    assert shift.difference_pct == pytest.approx(100.0 * (values["C-3"].mean() / rest.mean() - 1.0))
    assert 2.0 < shift.difference_pct < 4.0  # the planted +3 %, give or take the noise
    anova = next(a for a in result.anovas if a.part == "c_integrator" and a.series.knob_a_pct == 50.0)
    # Reference: scipy.stats.f_oneway across the three lots.
    f, p_f = f_oneway(values["C-1"], values["C-2"], values["C-3"])
    assert (anova.f_statistic, anova.p_value) == pytest.approx((f, p_f), rel=1e-9)
    assert anova.flagged and anova.lots == ("C-1", "C-2", "C-3")
    assert [a.p_adjusted for a in result.anovas] == pytest.approx(list(holm([a.p_value for a in result.anovas])))


def test_a_gross_defect_does_not_hide_the_shift_or_flag_its_lot(store: Store) -> None:
    values = fill_readings(store, shift_pct=3.0)
    # A unit with a wrong part reads far outside the limits: judged fail, left out of the mean tests.
    record_unit(store, "C-1-defect", {"c_integrator": "C-1", "r_integrator": "R-0"},
                [Run("fail", readings=[frequency(9000.0, 50.0, verdict="fail"), frequency(500.0, 0.0)])])
    result = lot_mean_tests(load_measurements(store), load_unit_lots(store))
    assert [(s.lot, s.n_lot) for s in result.flagged] == [("C-3", len(values["C-3"]))]
    with_defect = lot_mean_tests(load_measurements(store), load_unit_lots(store), passed_only=False)
    assert ("C-3", 50.0) not in [(s.lot, s.series.knob_a_pct) for s in with_defect.flagged]


def test_no_mean_flag_when_lots_are_alike(store: Store) -> None:
    fill_readings(store, shift_pct=0.0)
    result = lot_mean_tests(load_measurements(store), load_unit_lots(store))
    assert result.shifts and result.flagged == ()
    assert not any(a.flagged for a in result.anovas)
