"""How many runs end in a verdict they should not: faults injected into each step kind.

For every step kind of the demo plan (plus a custom step) and every injected fault
(an exception that is not a station fault, a NaN or 1E999 reading, a custom step's
bad return), one good simulated unit is tested; and a good unit is tested with an
SCPI overflow (9.91E37) from the supply-current query and from the actuator. The
script prints how many runs were stored pass although a step ended early, and how
many good units were failed by an instrument fault. Both must be 0.

Runs against whatever ``fixture`` is first on the path, so the same script measures
a branch and an older checkout:

    python bench/fail_safe.py
    PYTHONPATH=/path/to/old/checkout python bench/fail_safe.py
"""

from __future__ import annotations

import datetime as dt
import math
import tempfile
from collections import Counter
from dataclasses import replace
from pathlib import Path

from fixture.errors import OverflowReading
from fixture.files.sequence_file import load_sequence
from fixture.files.station_file import load_station
from fixture.runner.plan import compile_plan
from fixture.runner.plan_points import PlanStep
from fixture.runner.station import open_station
from fixture.runner.unit_run import run_unit
from fixture.sim.dut import build_unit
from fixture.sim.world import SimulatedWorld
from fixture.store import open_store

ROOT = Path(__file__).resolve().parent.parent


def custom_raises(context, parameters):
    raise ValueError("bug in a custom step")


def custom_returns(context, parameters):
    return parameters["value"] if parameters["value"] != "nan" else math.nan


class Watcher:
    """A reporter that knows the running step's kind (so a fault hits one kind of step only)."""

    kind = None

    def step_started(self, step, total_steps):
        self.kind = str(step.kind)

    def point_done(self, *args):
        pass

    def step_finished(self, *args):
        pass


def _raise(exc):
    def effect():
        raise exc
    return effect


READING_FAULTS = {
    "ValueError": _raise(ValueError("could not convert string to float: '1.2.3'")),
    "ConnectionResetError": _raise(ConnectionResetError(104, "Connection reset by peer")),
    "NaN reading": lambda: math.nan,
    "1E999 reading": lambda: float("1E999"),
}
CUSTOM_FAULTS = {"raises ValueError": ("bench_fail_safe:custom_raises", {}),
                 "returns 'maybe'": ("bench_fail_safe:custom_returns", {"value": "maybe"}),
                 "returns NaN": ("bench_fail_safe:custom_returns", {"value": "nan"})}


def main() -> None:
    import sys

    sys.modules.setdefault("bench_fail_safe", sys.modules[__name__])
    config = load_station(ROOT / "sequences/demo-station.toml")
    sequence = load_sequence(ROOT / "sequences/demo-sequence.toml", station=config)
    plan = compile_plan(sequence, sequence.design, config)
    custom = PlanStep(index=len(plan.steps), name="custom check", kind="custom", station_fault_retries=2,
                      points=(), call="bench_fail_safe:custom_returns", parameters=(("value", "pass"),))
    full = replace(plan, steps=(*plan.steps, custom))
    cases = []
    for kind in dict.fromkeys(str(s.kind) for s in plan.steps):
        for name in READING_FAULTS:
            cases.append((kind, name, full))
    for name, (call, params) in CUSTOM_FAULTS.items():
        cases.append(("custom", name, replace(full, steps=(*plan.steps, replace(
            custom, call=call, parameters=tuple(params.items()))))))
    tally: Counter[str] = Counter()
    wrong_pass = []
    with tempfile.TemporaryDirectory() as tmp, open_store(str(Path(tmp) / "r.sqlite")) as store, \
            open_station(config, today=dt.date(2026, 12, 2)) as station, SimulatedWorld(station, seed=3) as world:
        for i, (kind, name, run_plan) in enumerate(cases):
            serial = f"PW22-{700000 + i:06d}"
            watcher = Watcher()
            restore = []
            if kind != "custom":
                role, method = ("supply", "measure_current") if kind == "power-up" else ("counter", "read")
                driver = station.driver(role)
                real = getattr(driver, method)
                effect = READING_FAULTS[name]

                def faulty(*args, _real=real, _effect=effect, _kind=kind, _watcher=watcher, **kwargs):
                    return _effect() if _watcher.kind == _kind else _real(*args, **kwargs)
                setattr(driver, method, faulty)
                restore.append((driver, method))
            world.insert(build_unit(sequence.design, serial, seed=i))
            try:
                run_unit(run_plan, sequence, station, store, serial=serial, lots={}, operator="bench",
                         sleep=lambda s: None, reporter=watcher)
            except Exception as exc:  # an older runner let the exception out (after storing its verdict)
                tally[f"run_unit raised {type(exc).__name__}"] += 1
            for driver, method in restore:
                delattr(driver, method)
            stored = store.run(store.runs(serial=serial)[0].run_id)
            tally[str(stored.summary.verdict)] += 1
            if stored.summary.verdict == "pass":
                wrong_pass.append(f"{kind} / {name}: stored pass with {len(stored.steps)} of "
                                  f"{len(run_plan.steps)} steps")
        good_failed = []
        for j, (role, method) in enumerate((("supply", "measure_current"), ("actuator", "move_both"))):
            serial = f"PW22-{710000 + j:06d}"
            driver = station.driver(role)

            def overflow(*args, _role=role, **kwargs):
                raise OverflowReading(f"{_role}: 9.91E37")
            setattr(driver, method, overflow)
            world.insert(build_unit(sequence.design, serial, seed=100 + j))
            run_unit(plan, sequence, station, store, serial=serial, lots={}, operator="bench", sleep=lambda s: None)
            delattr(driver, method)
            verdict = store.runs(serial=serial)[0].verdict
            if verdict == "fail":
                good_failed.append(f"good unit failed by a {role} overflow")
            tally[f"overflow {role}: {verdict}"] += 1
    kinds = (len(cases) - len(CUSTOM_FAULTS)) // len(READING_FAULTS)
    print(f"{len(cases)} good units, a fault injected into one step kind each: {len(READING_FAULTS)} reading "
          f"faults x {kinds} built-in step kinds + {len(CUSTOM_FAULTS)} custom-step faults")
    print("stored verdicts:", dict(sorted(tally.items())))
    print(f"runs stored pass although a step ended early: {len(wrong_pass)}")
    for line in wrong_pass:
        print("  " + line)
    print(f"good units failed by a supply or actuator overflow: {len(good_failed)} of 2")


if __name__ == "__main__":
    main()
