"""Lot flags: worse yield (Fisher, Holm) and shifted means (Welch, one-way ANOVA), equal to scipy.stats."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import fisher_exact

from fixture.analytics import holm, lot_yield_tests, yields_by
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
