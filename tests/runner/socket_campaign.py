"""The fault campaign over TCP sockets: faults on the wire against whole runs on the bench server.

Each case puts one simulated unit in the fixture, schedules one socket fault
(:mod:`fixture.sim.socket_faults`) on one instrument's reading queries, once or on every one,
runs the shipped demo sequence over pyvisa-py sockets with ``run_unit`` into a SQLite store and
reads back what the store says. The goals are those of the in-process campaign
(:mod:`tests.runner.fault_campaign`, whose counting it reuses): no run stored pass with a step
missing, no good unit failed, no defective unit passed, no exception out of ``run_unit``;
"recovered" counts the faults after which the unit was still judged.

Shared by ``tests/runner/test_socket_campaign.py`` (a sample) and ``bench/fault_campaign.py --bench tcp``.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import tempfile
import time
from collections.abc import Callable, Iterable, Iterator
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass
from pathlib import Path

from fixture.files.sequence_file import load_sequence
from fixture.files.station_file import load_station
from fixture.runner.plan import compile_plan
from fixture.runner.station import open_station
from fixture.sim.bench_server import BenchServer, FaultTiming, write_served_station
from fixture.sim.dut import build_unit
from fixture.sim.faults import READING_COMMANDS, command_pattern
from fixture.sim.socket_faults import FaultSchedule, ScheduledFault, SocketFault
from fixture.sim.world import SimulatedWorld
from fixture.store import open_store

from .fault_campaign import MODES, UNITS, CampaignResult, CaseResult, run_and_read

ROOT = Path(__file__).resolve().parents[2]
ROLES = ("counter", "supply", "actuator")
#: the read timeout of the instruments faults are put on: short, so the grid runs in minutes (the scope,
#: never faulted here, keeps the station file's: a 10^4-point record takes about 0.1 s over the socket)
TIMEOUT_S = 0.25


@dataclass(frozen=True)
class SocketCase:
    """One run of the socket campaign."""

    role: str
    kind: SocketFault
    mode: str
    unit: str
    #: the queries hit (default: the role's reading queries) and how many matching ones are answered first
    match: str = ""
    after: int = 0

    @property
    def label(self) -> str:
        return f"{self.kind.value} on the {self.role}'s socket ({self.mode}), {self.unit} unit"


@dataclass
class SocketCampaignResult(CampaignResult):
    seconds: list[float] = dataclasses.field(default_factory=list)

    def recovered(self) -> list[CaseResult]:
        """Runs whose unit was judged (pass or fail) despite the fault."""
        return [r for r in self.results if r.verdict in ("pass", "fail")]


def full_grid(units: Iterable[str] = tuple(UNITS)) -> list[SocketCase]:
    """Every socket fault x role x mode on every unit."""
    return [SocketCase(role, kind, mode, unit) for unit in units for role in ROLES for kind in SocketFault
            for mode in MODES]


def ci_sample() -> list[SocketCase]:
    """Every fault x role once on the good unit; every fault persistent on one role each (rotating), on a
    defective unit (rotating)."""
    defective = [u for u in UNITS if u != "good"]
    once = [SocketCase(role, kind, "once", "good") for role in ROLES for kind in SocketFault]
    persistent = [SocketCase(ROLES[i % len(ROLES)], kind, "persistent", defective[i % len(defective)])
                  for i, kind in enumerate(SocketFault)]
    return once + persistent


@contextmanager
def served_line(folder: Path, seed: int = 3) -> Iterator[Callable[[SocketCase, str], CaseResult]]:
    """A bench server on free ports, the station opened on it over pyvisa-py, a world and a store."""
    schedule = FaultSchedule()
    # a delayed reply comes later than any read waits (the counter lengthens its timeout for a long gate)
    timing = FaultTiming(delay_s=2.0, reboot_s=TIMEOUT_S / 2, split_pause_s=0.01)
    template = load_station(ROOT / "sequences/demo-station-tcp.toml")
    with ExitStack() as stack:
        server = stack.enter_context(BenchServer({role: 0 for role in template.instruments}, faults=schedule,
                                                 timing=timing))
        path = write_served_station(ROOT / "sequences/demo-station-tcp.toml", server.ports, folder / "station.toml")
        config = load_station(path)
        config = dataclasses.replace(config, instruments={
            role: dataclasses.replace(entry, timeout_s=TIMEOUT_S) if role in ROLES else entry
            for role, entry in config.instruments.items()})
        sequence = load_sequence(ROOT / "sequences/demo-sequence.toml", station=config)
        plan = compile_plan(sequence, sequence.design, config)
        store = stack.enter_context(open_store(str(folder / "campaign.sqlite")))
        station = stack.enter_context(open_station(config, today=dt.date(2026, 12, 2)))
        world = stack.enter_context(SimulatedWorld(station, seed=seed))

        def run(case: SocketCase, serial: str) -> CaseResult:
            world.insert(build_unit(sequence.design, serial, seed=seed, defects=UNITS[case.unit]))
            profile = station.driver(case.role).session.profile
            pattern = case.match or command_pattern(profile, READING_COMMANDS[case.role]).pattern
            schedule.add(ScheduledFault(case.role, case.kind, match=pattern, after=case.after,
                                        times=1 if case.mode == "once" else None))

            def clean_up() -> None:
                schedule.clear()
                server.wait_ready(5.0)  # an instrument still rebooting comes back before the next case
            return run_and_read(plan, sequence, station, store, case, serial, clean_up)

        run.station = station  # type: ignore[attr-defined]
        run.planned_steps = len(plan.steps)  # type: ignore[attr-defined]
        yield run


def run_socket_campaign(cases: Iterable[SocketCase], *, seed: int = 3,
                        progress: Callable[[int, CaseResult, float], None] | None = None) -> SocketCampaignResult:
    """Run every case on one served line (a temporary folder) and count the goals."""
    with tempfile.TemporaryDirectory() as tmp, served_line(Path(tmp), seed) as run:
        result = SocketCampaignResult(planned_steps=run.planned_steps)  # type: ignore[attr-defined]
        for i, case in enumerate(cases):
            start = time.perf_counter()
            outcome = run(case, f"PW22-{800000 + i:06d}")
            result.seconds.append(time.perf_counter() - start)
            result.results.append(outcome)
            if progress is not None:
                progress(i, outcome, result.seconds[-1])
    return result
