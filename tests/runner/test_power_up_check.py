"""A power-up current far below its limit is tested against the unit's output before it fails the unit.

The rule is ours (issue 8: an instrument fault must never fail a good unit): a panel whose
output oscillates is powered, so a supply readback near zero at the same time is the
supply's fault; an open panel draws next to nothing and its output is flat, which stays a
unit fail. Common practice, no source.
"""

from __future__ import annotations

from fixture.model.step_terms import StepKind
from fixture.model.verdicts import Verdict
from fixture.sim.dut import Defect
from fixture.sim.faults import install_fault
from tests.runner.test_no_signal import only_up_to


def power_up_only(bench):
    return only_up_to(bench.plan, StepKind.POWER_UP)


def test_a_supply_reading_zero_while_the_output_oscillates_is_a_station_fault(bench):
    install_fault(bench.station.driver("supply"), "zero")
    outcome = bench.test("PW22-000501", plan=power_up_only(bench))
    assert outcome.verdict is Verdict.STATION_FAULT
    assert "oscillates" in outcome.steps[0][2] and "supply" in outcome.steps[0][2]


def test_a_supply_reading_zero_once_is_retried_and_the_good_unit_passes(bench):
    install_fault(bench.station.driver("supply"), "zero", times=1)
    assert bench.test("PW22-000502", plan=power_up_only(bench)).verdict is Verdict.PASS


def test_a_dead_unit_reading_zero_current_with_a_flat_output_still_fails(bench):
    install_fault(bench.station.driver("supply"), "zero")
    outcome = bench.test("PW22-000503", Defect("stuck-output", level="low"), plan=power_up_only(bench))
    assert outcome.verdict is Verdict.FAIL


def test_a_low_but_possible_current_from_an_oscillating_unit_fails_the_unit(bench):
    # The simulated unit draws about 6.5 mA; 6 mA less leaves about a quarter of the demo's 2 mA low
    # limit: a part missing, the oscillator still running.
    outcome = bench.test("PW22-000504", Defect("supply-current", current_a=-0.006), plan=power_up_only(bench))
    assert outcome.verdict is Verdict.FAIL
