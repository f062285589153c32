"""The verdict and step-term enums: the words the store has always held, and the exit codes README documents."""

from __future__ import annotations

import pytest

from fixture.files.sequence_steps import STEP_KEYS
from fixture.model.step_terms import CheckKind, PointRole, StepKind
from fixture.model.verdicts import FINAL_VERDICTS, RUN_VERDICTS, STEP_VERDICTS, PointVerdict, Verdict
from fixture.runner.plan_points import PlanStep, StepCheck
from fixture.store import models


def test_the_enums_hold_exactly_the_words_the_schema_allows_so_no_migration_is_needed() -> None:
    # fixture/store/migrations/versions/0001_initial.py CHECK constraints are the reference
    assert set(RUN_VERDICTS) == set(models.RUN_VERDICTS)
    assert set(FINAL_VERDICTS) == set(models.FINAL_VERDICTS)
    assert set(STEP_VERDICTS) == set(models.STEP_VERDICTS)
    assert {v.value for v in PointVerdict} == set(models.MEASUREMENT_VERDICTS)


def test_every_step_kind_has_the_keys_a_sequence_file_may_give_it() -> None:
    # common practice, no source: a kind without its key list would refuse every key of its steps
    assert set(STEP_KEYS) == set(StepKind)
    assert all("kind" in keys and "name" in keys for keys in STEP_KEYS.values())


@pytest.mark.parametrize(("verdict", "code"), [("pass", 0), ("fail", 1), ("station-fault", 3), ("aborted", 4),
                                                ("running", 3), ("incomplete", 3), ("skipped", 3)])
def test_exit_codes_are_the_documented_ones_and_an_undecided_run_never_exits_0(verdict, code) -> None:
    # README "Exit codes"; an undecided run maps to the station-fault code (fail safe)
    assert Verdict(verdict).exit_code == code


def test_only_pass_and_fail_are_claims_about_the_unit() -> None:
    assert {v for v in Verdict if v.judges_unit} == {Verdict.PASS, Verdict.FAIL}


def test_a_misspelt_kind_role_or_check_is_refused_when_the_plan_is_built() -> None:
    with pytest.raises(ValueError):
        PlanStep(index=0, name="x", kind="knob-matrices", station_fault_retries=0, points=())
    with pytest.raises(ValueError):
        StepCheck("duty_shift_percent", "pp", 1.0, (0,), "")
    with pytest.raises(ValueError):
        PointRole("reference")


def test_each_check_kind_knows_its_knob_and_whether_it_is_relative() -> None:
    assert [(c.knob, c.relative) for c in CheckKind] == [("a", False), ("b", True), ("a", False), ("b", False)]


@pytest.mark.parametrize(("verdict", "frame", "action"), [
    ("pass", "=", "passed every step"), ("fail", "=", "set it aside for repair"),
    ("station-fault", "!", "the unit was NOT judged: the station is at fault"),
    ("aborted", "!", "the unit was NOT judged: the run was stopped"),
])
def test_the_operator_banner_tells_a_station_fault_from_a_unit_fail_and_says_what_to_do(verdict, frame, action):
    from fixture.reporting.operator_view import final_banner

    banner = final_banner(verdict, "PW22-000001", 7)
    lines = banner.splitlines()
    assert set(lines[0]) == {frame} and set(lines[-1]) == {frame}
    assert Verdict(verdict).words in lines[1] and action in lines[2]
