"""Every way a step can end early leaves the run undecided (station-fault or aborted), never pass.

The rule is the project's own fail-safe rule (a verdict is a claim about a unit; no
claim without every planned step completed and passed); common practice, no source.
Exit codes are `knobline test`'s documented ones: 3 station fault, 4 aborted.
"""

from __future__ import annotations

import logging
import math
from dataclasses import replace

import pytest

from fixture.errors import InstrumentTimeout, OverflowReading
from fixture.model.step_terms import StepKind
from fixture.model.verdicts import Verdict
from fixture.runner.execute import SilentReporter
from tests.runner.conftest import with_custom_step


class StepWatcher(SilentReporter):
    """Knows which step is running, so a fault can be injected into one kind of step only."""

    def __init__(self) -> None:
        self.step = None

    def step_started(self, step, total_steps: int) -> None:
        self.step = step


def _raise(exc: BaseException):
    def effect():
        raise exc
    return effect


EFFECTS = {
    "ValueError": (_raise(ValueError("could not convert string to float: '1.2.3'")), Verdict.STATION_FAULT,
                   "ValueError"),
    "ConnectionResetError": (_raise(ConnectionResetError(104, "Connection reset by peer")), Verdict.STATION_FAULT,
                             "ConnectionResetError"),
    "NaN reading": (lambda: math.nan, Verdict.STATION_FAULT, "not a possible value"),
    "1E999 reading": (lambda: float("1E999"), Verdict.STATION_FAULT, "not a possible value"),
    "timeout on every retry": (_raise(InstrumentTimeout("counter: no reply within 2 s (simulated)")),
                               Verdict.STATION_FAULT, "no reply"),
    "Ctrl-C": (_raise(KeyboardInterrupt()), Verdict.ABORTED, "operator stopped the run"),
}
MEASURED_KINDS = [StepKind.POWER_UP, StepKind.KNOB_MATRIX, StepKind.CROSS_TALK, StepKind.DECODER_CALIBRATION]


def inject(monkeypatch, bench, watcher: StepWatcher, kind: StepKind, effect) -> None:
    """``effect()`` replaces the step's measuring reading (supply current in power-up, counter elsewhere)."""
    role, method = ("supply", "measure_current") if kind is StepKind.POWER_UP else ("counter", "read")
    driver = bench.station.driver(role)
    real = getattr(driver, method)

    def faulty(*args, **kwargs):
        if watcher.step is not None and watcher.step.kind is kind:
            return effect()
        return real(*args, **kwargs)

    monkeypatch.setattr(driver, method, faulty)


def assert_ended_early(bench, outcome, verdict: Verdict, at_step: int, words: str) -> None:
    detail = bench.store.run(outcome.run_id)
    assert outcome.verdict is verdict
    assert detail.summary.verdict == verdict.value
    assert len(detail.steps) == at_step + 1, "the run went on after the step that ended early"
    assert detail.steps[-1].verdict == verdict.value
    assert words in detail.steps[-1].message
    assert verdict.exit_code == {Verdict.STATION_FAULT: 3, Verdict.ABORTED: 4}[verdict]


@pytest.mark.parametrize("kind", MEASURED_KINDS, ids=str)
@pytest.mark.parametrize("effect", sorted(EFFECTS))
def test_a_step_ending_early_in_any_built_in_step_kind_never_leaves_a_pass(bench, monkeypatch, kind, effect):
    watcher = StepWatcher()
    fault, verdict, words = EFFECTS[effect]
    inject(monkeypatch, bench, watcher, kind, fault)
    at_step = next(s.index for s in bench.plan.steps if s.kind is kind)
    outcome = bench.test("PW22-000400", reporter=watcher)
    assert_ended_early(bench, outcome, verdict, at_step, words)


def test_the_software_fault_names_the_step_the_exception_and_logs_the_traceback(bench, monkeypatch, caplog):
    watcher = StepWatcher()
    inject(monkeypatch, bench, watcher, StepKind.CROSS_TALK, EFFECTS["ValueError"][0])
    with caplog.at_level(logging.ERROR, logger="knobline.runner"):
        outcome = bench.test("PW22-000401", reporter=watcher)
    message = bench.store.run(outcome.run_id).steps[-1].message
    assert message == ("software fault in step 4 'knobs independent': ValueError: could not convert string to "
                       "float: '1.2.3'")
    logged = [r for r in caplog.records if r.name == "knobline.runner" and r.exc_info]
    assert logged and logged[0].exc_info[0] is ValueError


@pytest.mark.parametrize(("call", "parameters", "words"), [
    ("tests.runner.custom_steps:raises", {}, "custom step tests.runner.custom_steps:raises raised ValueError"),
    ("tests.runner.custom_steps:returns", {"value": "maybe"}, "returned 'maybe'"),
    ("tests.runner.custom_steps:returns", {}, "returned None"),
    ("tests.runner.custom_steps:returns", {"value": ["pass", 3]}, "returned ('pass', 3)"),
    ("tests.runner.custom_steps:returns", {"value": ["station-fault", ""]}, "returned ('station-fault', '')"),
    ("tests.runner.no_such_module:step", {}, "custom step tests.runner.no_such_module:step raised "
                                             "ModuleNotFoundError"),
], ids=["raises", "maybe", "None", "bad-pair", "not-a-unit-verdict", "missing-module"])
def test_a_custom_step_that_raises_or_returns_nonsense_is_a_station_fault_naming_it(bench, call, parameters, words):
    plan = with_custom_step(bench.plan, call, **parameters)
    outcome = bench.test("PW22-000402", plan=plan)
    assert_ended_early(bench, outcome, Verdict.STATION_FAULT, len(plan.steps) - 1, words)


def test_a_custom_step_interrupted_by_the_operator_ends_aborted(bench):
    plan = with_custom_step(bench.plan, "tests.runner.custom_steps:interrupted")
    outcome = bench.test("PW22-000403", plan=plan)
    assert_ended_early(bench, outcome, Verdict.ABORTED, len(plan.steps) - 1, "operator stopped the run")


def test_a_custom_step_returning_a_verdict_and_message_is_honoured(bench):
    # the control for the cases above: the same path with a well-formed return value
    plan = with_custom_step(bench.plan, "tests.runner.custom_steps:returns", value=["pass", "ok"])
    assert bench.test("PW22-000404", plan=plan).verdict is Verdict.PASS


@pytest.mark.parametrize("step_kind", [StepKind.CROSS_TALK, StepKind.DECODER_CALIBRATION], ids=str)
def test_no_signal_from_the_counter_in_a_checked_step_with_the_scope_seeing_the_wave_is_a_station_fault(
        bench, monkeypatch, step_kind):
    watcher = StepWatcher()
    inject(monkeypatch, bench, watcher, step_kind, _raise(OverflowReading("counter: 9.91E37 (simulated)")))
    at_step = next(s.index for s in bench.plan.steps if s.kind is step_kind)
    outcome = bench.test("PW22-000405", reporter=watcher)
    assert_ended_early(bench, outcome, Verdict.STATION_FAULT, at_step, "but the scope sees")


def test_a_store_that_fails_to_record_a_step_ends_the_run_station_fault(bench, monkeypatch):
    real = bench.store.record_step
    calls = {"n": 0}

    def failing(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] >= 3:
            raise OSError(28, "No space left on device")
        return real(*args, **kwargs)

    monkeypatch.setattr(bench.store, "record_step", failing)
    outcome = bench.test("PW22-000406")
    assert outcome.verdict is Verdict.STATION_FAULT and outcome.verdict.exit_code == 3
    assert bench.store.run(outcome.run_id).summary.verdict == "station-fault"
    assert "OSError" in outcome.steps[-1][2]


def test_a_run_whose_verdict_cannot_be_stored_is_left_for_the_incomplete_sweep_never_pass(bench, monkeypatch):
    def failing(*args, **kwargs):
        raise OSError(5, "Input/output error")

    monkeypatch.setattr(bench.store, "finish_run", failing)
    outcome = bench.test("PW22-000407")
    assert outcome.verdict is Verdict.STATION_FAULT
    assert bench.store.run(outcome.run_id).summary.verdict == "running"
    monkeypatch.undo()
    # This process still owns the run, so the sweep leaves it alone; once the owner is gone it is swept.
    assert outcome.run_id not in bench.store.mark_incomplete_runs(bench.station.config.name)
    monkeypatch.setattr("fixture.store.lease.owner_gone", lambda *args, **kwargs: True)
    assert outcome.run_id in bench.store.mark_incomplete_runs(bench.station.config.name)


@pytest.mark.parametrize("fault", [ConnectionResetError(104, "Connection reset by peer"),
                                   InstrumentTimeout("supply: no reply within 2 s (simulated)")], ids=type)
def test_a_supply_that_does_not_switch_off_ends_a_good_units_run_station_fault(bench, monkeypatch, fault):
    supply = bench.station.driver("supply")
    real = supply.output

    def output(on: bool):
        if not on:
            raise fault
        return real(on)

    monkeypatch.setattr(supply, "output", output)
    outcome = bench.test("PW22-000408")
    assert outcome.verdict is Verdict.STATION_FAULT
    assert bench.store.run(outcome.run_id).summary.verdict == "station-fault"
    assert outcome.steps[-1][0] == "supply off" and "switch it off by hand" in outcome.steps[-1][2]


@pytest.mark.parametrize("exc", [SystemExit(1), GeneratorExit()], ids=lambda e: type(e).__name__)
def test_a_process_leaving_in_the_middle_of_a_step_leaves_station_fault_not_pass(bench, monkeypatch, exc):
    watcher = StepWatcher()
    inject(monkeypatch, bench, watcher, StepKind.KNOB_MATRIX, _raise(exc))
    with pytest.raises(type(exc)):
        bench.test("PW22-000409", reporter=watcher)
    (run,) = bench.store.runs(serial="PW22-000409")
    assert run.verdict == "station-fault"


def test_a_reporter_that_breaks_after_a_step_ends_the_run_station_fault(bench):
    class Broken(SilentReporter):
        def step_finished(self, step, verdict, message):
            if step.index == 1:
                raise RuntimeError("terminal went away")

    outcome = bench.test("PW22-000410", reporter=Broken())
    assert outcome.verdict is Verdict.STATION_FAULT
    assert bench.store.run(outcome.run_id).summary.verdict == "station-fault"


def test_a_plan_with_no_steps_judged_nothing_and_does_not_pass(bench):
    outcome = bench.test("PW22-000411", plan=replace(bench.plan, steps=()))
    assert outcome.verdict is Verdict.STATION_FAULT
    assert bench.store.run(outcome.run_id).summary.verdict == "station-fault"
