"""Lot findings: every part's lots estimated together, confounded lots named as one finding.

References: the simulated units' own planted lot shifts (fixture.sim draws the parts, the test
knows the truth), and for the algebra a dense generalised least squares solve by whitening
(Aitken 1935: GLS equals ordinary least squares on data multiplied by the inverse Cholesky factor
of the covariance; any regression text) done with scipy.linalg.lstsq.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import scipy.linalg
from scipy.stats import norm

from fixture.analytics.lot_attribution import LotUnit, _normal_equations, _Units, attribute_lots
from fixture.analytics.lot_selection import bonferroni_z
from fixture.errors import UserInputError
from fixture.files.design_file import load_design
from fixture.sim.batch import plan_batch
from fixture.sim.dut import Defect, build_unit
from tests.analytics.conftest import counter_readings

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def design():
    return load_design(ROOT / "sequences" / "demo-panel.toml")


def batch_of(design, lots: list[dict[str, str]], shifts: dict[str, float], seed: int,
             defects: dict[int, Defect] | None = None) -> list[LotUnit]:
    rng = np.random.default_rng(seed)
    out = []
    for i, unit_lots in enumerate(lots):
        unit = build_unit(design, f"U{i:03d}", seed=seed, lots=unit_lots, lot_shifts=shifts,
                          defects=[defects[i]] if defects and i in defects else [])
        out.append(LotUnit(unit.serial, counter_readings(unit, design, rng), unit_lots))
    return out


def test_normal_equations_give_the_dense_generalised_least_squares_estimate() -> None:
    rng = np.random.default_rng(4)
    m, parts, n, k = 6, 2, 40, 5  # readings, lotted parts, units, lots (3 of part 0, 2 of part 1)
    response = rng.normal(size=(m, parts))
    a = rng.normal(size=(m, m))
    cov = a @ a.T + np.eye(m)
    weight = np.linalg.inv(cov)
    idx = np.stack([rng.integers(0, 3, n), 3 + rng.integers(0, 2, n)], axis=1)
    beta_true = rng.normal(size=k)
    y = np.stack([response @ beta_true[idx[u]] for u in range(n)]) + rng.multivariate_normal(np.zeros(m), cov, n)
    units = _Units(serials=[str(u) for u in range(n)], parts=["p0", "p1"], idx=idx, pattern=np.zeros(n, dtype=int),
                   score=(y @ weight) @ response, yy=np.einsum("ij,jk,ik->i", y, weight, y),
                   readings=np.full(n, m), gram=[response.T @ weight @ response], moments=[])
    eq = _normal_equations(units, np.ones(n, dtype=bool), k)
    # dense: stack every unit's rows, whiten with the inverse Cholesky factor, ordinary least squares
    design_rows = np.zeros((n * m, k))
    for u in range(n):
        for p in range(parts):
            design_rows[u * m:(u + 1) * m, idx[u, p]] += response[:, p]
    chol_inv = np.linalg.inv(np.linalg.cholesky(cov))
    white = scipy.linalg.block_diag(*([chol_inv] * n))
    dense, *_ = scipy.linalg.lstsq(white @ design_rows, white @ y.reshape(-1))
    assert np.linalg.solve(eq.matrix, eq.rhs) == pytest.approx(dense, rel=1e-9, abs=1e-12)
    assert eq.yy == pytest.approx(float(y.reshape(-1) @ white.T @ white @ y.reshape(-1)))
    assert eq.readings == n * m


def test_the_finding_threshold_is_bonferroni_over_every_lot_tested() -> None:
    # two-sided Bonferroni: each of k tests at alpha / k (Dunn 1961); the normal quantile from scipy
    assert bonferroni_z(0.05, 28) == pytest.approx(norm.isf(0.05 / 56))


def test_a_planted_capacitor_lot_is_the_one_finding_and_its_interval_holds_the_shift(design) -> None:
    plan = plan_batch(design, units=36, seed=11, shifted_part="c_integrator", shift=-0.08, defect_fraction=0.0)
    part, lot, shift = plan.shifted
    rng = np.random.default_rng(11)
    units = [LotUnit(p.serial, counter_readings(plan.build(design, p), design, rng), dict(p.lots)) for p in plan.units]
    result = attribute_lots(design, units)
    assert [f.lots for f in result.findings] == [(lot,)]
    finding = result.findings[0]
    assert finding.part == part and finding.hold  # -8 % is outside the capacitor's 5 %
    assert finding.interval_pct[0] <= 100.0 * shift <= finding.interval_pct[1]
    assert finding.units == len(plan.units_of_lot(part, lot))
    # the part in words (designator and role), never its key
    assert "C1 integrator capacitor" in finding.words and part not in finding.words


def test_a_lot_in_exactly_the_shifted_lots_units_is_named_with_it_as_one_finding(design) -> None:
    # C1 and R5 move the readings alike (one RC product); built into the same units, no batch can tell
    lots = [{"c_integrator": "CX" if i < 12 else "CY", "r_integrator": "RX" if i < 12 else "RY"} for i in range(30)]
    result = attribute_lots(design, batch_of(design, lots, {"CX": -0.08}, seed=3))
    assert len(result.findings) == 1
    finding = result.findings[0]
    assert set(finding.lots) == {"CX", "RX"}
    assert "cannot separate them" in finding.words and finding.units_to_decide >= 3


def test_a_lot_that_only_shares_some_units_with_the_shifted_lot_is_not_named(design) -> None:
    # the units the two lots do not share decide: the R5 lot's own units read normal
    lots = [{"c_integrator": "CX" if i < 20 else "CY", "r_integrator": "RX" if 10 <= i < 30 else "RY"}
            for i in range(40)]
    result = attribute_lots(design, batch_of(design, lots, {"CX": -0.08}, seed=5))
    assert [f.lots for f in result.findings] == [("CX",)]


def test_defective_units_are_left_out_of_the_lots_and_returned_for_rework(design) -> None:
    lots = [{"c_integrator": "CX" if i < 15 else "CY", "r_integrator": "RX"} for i in range(30)]
    defects = {3: Defect("wrong-part", part="r_integrator", factor=10.0), 7: Defect("stuck-output", level="low")}
    result = attribute_lots(design, batch_of(design, lots, {}, seed=8, defects=defects))
    assert result.findings == ()  # one unit with a 10x resistor does not make its lot shifted
    assert result.unexplained == ("U003",)
    assert result.units_used == 28
    assert sum(result.excluded.values()) == 2
    assert any("no toggling duty" in reason for reason in result.excluded)


def test_units_without_lots_give_no_findings_and_say_so(design) -> None:
    result = attribute_lots(design, batch_of(design, [{} for _ in range(5)], {}, seed=1))
    assert result.findings == () and result.lots_tested == 0


def test_a_family_alpha_outside_zero_to_one_is_a_user_error(design) -> None:
    with pytest.raises(UserInputError, match="family-wise alpha"):
        attribute_lots(design, [], family_alpha=1.5)
