"""The fault campaign: injected instrument faults against whole runs on the simulated station.

Each case puts one simulated unit (good, or with one defect) in the fixture, installs one
fault (:mod:`fixture.sim.faults`) on one role's reading query, persistently or once, runs
the shipped demo sequence with ``run_unit`` into a SQLite store, and reads back what the
store says. Three counts must be zero (issue 8, item 7):

* ``pass_incomplete``: runs stored PASS with fewer steps than the plan has (or a step not passed);
* ``good_failed``: good units judged FAIL;
* ``defective_passed``: defective units judged PASS.

Shared by ``tests/runner/test_fault_campaign.py`` (a sample covering every kind x role x
mode) and ``bench/fault_campaign.py`` (the full grid).
"""

from __future__ import annotations

import datetime as dt
import tempfile
from collections import Counter as Tally
from collections.abc import Callable, Iterable, Iterator
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass, field
from pathlib import Path

from fixture.files.sequence_file import load_sequence
from fixture.files.station_file import load_station
from fixture.runner.plan import compile_plan
from fixture.runner.station import open_station
from fixture.runner.unit_run import run_unit
from fixture.sim.dut import Defect, build_unit
from fixture.sim.faults import FaultKind, install_fault, remove_fault
from fixture.sim.world import SimulatedWorld
from fixture.store import open_store

ROOT = Path(__file__).resolve().parents[2]
ROLES = ("counter", "supply", "actuator")
MODES = ("persistent", "once")

#: The units of the campaign: a good one and one per defect the simulated bench builds
#: (fixture/sim/dut.py); each defect is one the demo sequence must catch.
UNITS: dict[str, tuple[Defect, ...]] = {
    "good": (),
    "wrong-part": (Defect("wrong-part", part="c_integrator", factor=1.5),),
    "open-wiper": (Defect("open-wiper", part="a"),),
    "stuck-output": (Defect("stuck-output", level="high"),),
    "supply-current": (Defect("supply-current", current_a=0.05),),
}


@dataclass(frozen=True)
class Case:
    """One run of the campaign."""

    role: str
    kind: FaultKind
    mode: str
    unit: str

    @property
    def label(self) -> str:
        return f"{self.kind.value} on the {self.role} ({self.mode}), {self.unit} unit"


@dataclass(frozen=True)
class CaseResult:
    case: Case
    verdict: str           # as stored
    steps_stored: int
    steps_passed: int
    escaped: str           # the exception run_unit raised, if any ("" when none)


@dataclass
class CampaignResult:
    planned_steps: int
    results: list[CaseResult] = field(default_factory=list)

    def pass_incomplete(self) -> list[CaseResult]:
        return [r for r in self.results if r.verdict == "pass"
                and (r.steps_stored < self.planned_steps or r.steps_passed < self.planned_steps)]

    def good_failed(self) -> list[CaseResult]:
        return [r for r in self.results if r.case.unit == "good" and r.verdict == "fail"]

    def defective_passed(self) -> list[CaseResult]:
        return [r for r in self.results if r.case.unit != "good" and r.verdict == "pass"]

    def escaped(self) -> list[CaseResult]:
        return [r for r in self.results if r.escaped]

    def verdicts(self) -> dict[str, int]:
        return dict(Tally(r.verdict for r in self.results))

    def summary(self) -> str:
        lines = [f"campaign: {len(self.results)} runs ({self.planned_steps} steps planned each); "
                 f"verdicts {self.verdicts()}",
                 f"  runs stored pass with missing or unpassed steps: {len(self.pass_incomplete())}",
                 f"  good units judged fail:                          {len(self.good_failed())}",
                 f"  defective units judged pass:                     {len(self.defective_passed())}",
                 f"  runs where run_unit raised:                      {len(self.escaped())}"]
        for title, bad in (("pass with missing steps", self.pass_incomplete()),
                           ("good unit failed", self.good_failed()), ("defective passed", self.defective_passed())):
            lines += [f"  {title}: {r.case.label}: {r.verdict}, {r.steps_stored} steps"
                      + (f" [{r.escaped}]" if r.escaped else "") for r in bad]
        return "\n".join(lines)


def full_grid(units: Iterable[str] = tuple(UNITS)) -> list[Case]:
    """Every kind x role x mode on every unit."""
    return [Case(role, kind, mode, unit) for unit in units for role in ROLES for kind in FaultKind for mode in MODES]


def ci_sample() -> list[Case]:
    """Every kind x role x mode on the good unit, and each of those once on a defective unit (rotating)."""
    defective = [u for u in UNITS if u != "good"]
    cases = full_grid(["good"])
    return cases + [Case(c.role, c.kind, c.mode, defective[i % len(defective)]) for i, c in enumerate(cases)]


def run_and_read(plan, sequence, station, store, case: object, serial: str,
                 clean_up: Callable[[], None]) -> CaseResult:
    """Run ``serial`` with the fault in place, then ``clean_up``; what the store kept of the run.

    An exception out of ``run_unit`` is counted (``escaped``): a run must never end that way.
    """
    escaped = ""
    try:
        run_unit(plan, sequence, station, store, serial=serial, lots={}, operator="campaign", sleep=lambda s: None)
    except Exception as exc:  # noqa: BLE001 - counted: a run must never end this way
        escaped = f"{type(exc).__name__}: {exc}"[:200]
    finally:
        clean_up()
    stored = store.runs(limit=1, serial=serial)
    if not stored:
        return CaseResult(case, "not stored", 0, 0, escaped)  # type: ignore[arg-type]
    detail = store.run(stored[0].run_id)
    return CaseResult(case, detail.summary.verdict, len(detail.steps),  # type: ignore[arg-type]
                      sum(1 for s in detail.steps if s.verdict == "pass"), escaped)


@contextmanager
def simulated_line(db: Path, seed: int = 3) -> Iterator[Callable[[Case, str], CaseResult]]:
    """An open simulated station, world and store; yields ``run(case, serial) -> CaseResult``."""
    config = load_station(ROOT / "sequences/demo-station.toml")
    sequence = load_sequence(ROOT / "sequences/demo-sequence.toml", station=config)
    plan = compile_plan(sequence, sequence.design, config)
    with ExitStack() as stack:
        store = stack.enter_context(open_store(str(db)))
        station = stack.enter_context(open_station(config, today=dt.date(2026, 12, 2)))
        world = stack.enter_context(SimulatedWorld(station, seed=seed))

        def run(case: Case, serial: str) -> CaseResult:
            world.insert(build_unit(sequence.design, serial, seed=seed, defects=UNITS[case.unit]))
            driver = station.driver(case.role)
            install_fault(driver, case.kind, times=1 if case.mode == "once" else None)
            return run_and_read(plan, sequence, station, store, case, serial, lambda: remove_fault(driver))

        run.planned_steps = len(plan.steps)  # type: ignore[attr-defined]
        yield run


def run_campaign(cases: Iterable[Case], *, seed: int = 3,
                 progress: Callable[[int, CaseResult], None] | None = None) -> CampaignResult:
    """Run every case on one simulated line (a temporary store) and count the three goals."""
    with tempfile.TemporaryDirectory() as tmp, simulated_line(Path(tmp) / "campaign.sqlite", seed) as run:
        result = CampaignResult(planned_steps=run.planned_steps)  # type: ignore[attr-defined]
        for i, case in enumerate(cases):
            outcome = run(case, f"PW22-{700000 + i:06d}")
            result.results.append(outcome)
            if progress is not None:
                progress(i, outcome)
    return result
