"""The fault campaign in CI: injected instrument faults never give a wrong verdict (issue 8, item 7).

Every fault kind x role (counter, supply, actuator) x persistent/once runs on a good unit, and
each of those again on a defective unit (the four defects of fixture/sim/dut.py in turn): 180
runs of the demo sequence on the simulated station. bench/fault_campaign.py runs the full grid
(every kind x role x mode on every unit) through the same module, tests/runner/fault_campaign.py.

The goals are the issue's: 0 runs stored pass with missing steps, 0 good units failed by an
instrument fault, 0 defective units passed (a verdict is a claim about the unit; a station that
cannot judge must say so, common practice, no source).
"""

from __future__ import annotations

import pytest

from fixture.sim.faults import FaultKind

from .fault_campaign import MODES, ROLES, UNITS, CampaignResult, ci_sample, run_campaign


@pytest.fixture(scope="module")
def campaign() -> CampaignResult:
    return run_campaign(ci_sample())


def test_the_campaign_covers_every_kind_role_and_mode_on_good_and_defective_units(campaign) -> None:
    cases = {(r.case.role, r.case.kind, r.case.mode) for r in campaign.results}
    assert cases == {(role, kind, mode) for role in ROLES for kind in FaultKind for mode in MODES}
    assert {r.case.unit for r in campaign.results} == set(UNITS)
    assert len(FaultKind) >= 15 and len(campaign.results) == 2 * len(ROLES) * len(FaultKind) * len(MODES)


def test_no_run_is_stored_pass_with_a_step_missing(campaign) -> None:
    assert campaign.pass_incomplete() == [], campaign.summary()


def test_no_defective_unit_is_passed(campaign) -> None:
    assert campaign.defective_passed() == [], campaign.summary()


def test_no_exception_escapes_a_run(campaign) -> None:
    assert campaign.escaped() == [], campaign.summary()


#: A supply reading 0 A is a possible reading (an open unit draws nothing): only the runner can
#: tell it from the unit, by a cross-check (a unit putting out a wave draws current).
SUPPLY_ZERO = ("supply", FaultKind.ZERO)


def test_no_good_unit_is_failed_by_an_impossible_or_missing_reading(campaign) -> None:
    failed = [r for r in campaign.good_failed() if (r.case.role, r.case.kind) != SUPPLY_ZERO]
    assert failed == [], campaign.summary()


def test_no_good_unit_is_failed_by_a_supply_reading_zero(campaign) -> None:
    failed = [r for r in campaign.good_failed() if (r.case.role, r.case.kind) == SUPPLY_ZERO]
    assert failed == [], campaign.summary()


def test_a_fault_given_once_lets_a_good_unit_pass(campaign) -> None:
    # The runner retries station faults up to the step's bound (sequence [retest]); a fault that
    # clears after one reply must not cost the unit its verdict. Zero from the supply is a possible
    # reading (an open unit draws nothing) and is judged; that case is the runner's to cross-check.
    once = [r for r in campaign.results if r.case.unit == "good" and r.case.mode == "once"
            and (r.case.role, r.case.kind) != SUPPLY_ZERO]
    assert [r.case.label for r in once if r.verdict != "pass"] == []
