"""A unit's instrument time on the demo sequence: planned, against the least that reaches TUR 4:1 and
against fixed 1 s gates; and units per hour of one station.

Instrument time is what the instruments and the actuator take (fixture/runner/plan_time.py): readings
(gate rounded up to whole periods plus the wait for the first edge), knob travel at the actuator's
stated speed, settling. Four versions of the shipped demo sequence on the demo station:

* as shipped (fixed 100 ms gates), in the sequence's own stop order and in the plan's order;
* ``gate_time = "shortest"`` (the plan picks the shortest gate reaching the station's target TUR);
* fixed 1 s gates (a common "safe" default), in the plan's order.

The least that reaches TUR 4:1 (a lower bound, so the ratio is conservative): each reading with the least
whole number N of periods whose counter budget reaches TUR 4 against its tolerance ((N + 1) T per
measurement; readings judged by a step check, which have no tolerance of their own, with N = 1), each step's
stops by the shortest path through them starting anywhere (exact, Held-Karp), and the sequence's settle
time once per stop but one. Goals (issue 13): planned <= 1.2x the least, fixed 1 s gates >= 10x the planned.

Units per hour: 3600 s over the planned instrument time plus knobline's own time per unit on the
simulated bench (measured here: the runner with waits skipped, SQLite, one store commit per step).

    python bench/test_time.py [--units N]
"""

from __future__ import annotations

import argparse
import datetime as dt
import math
import tempfile
import time
from dataclasses import replace
from pathlib import Path

from fixture.files.sequence_file import load_sequence
from fixture.files.station_file import load_station
from fixture.model.measurement_plan import signal_facts
from fixture.model.quantities import QUANTITIES
from fixture.model.test_time import least_travel_order, path_travel_s
from fixture.model.tolerance.space import KnobSetting
from fixture.model.uncertainty import CounterGate, counter_budget
from fixture.model.decision import TUR_COVERAGE_FACTOR, tur
from fixture.runner.plan import compile_plan
from fixture.runner.plan_points import TestPlan
from fixture.runner.plan_time import plan_time
from fixture.runner.station import open_station
from fixture.runner.unit_run import record_provenance, run_unit
from fixture.sim.dut import build_unit
from fixture.sim.world import SimulatedWorld
from fixture.store import open_store

ROOT = Path(__file__).resolve().parent.parent
TARGET_TUR = 4.0


def variant(folder: Path, gate: str) -> Path:
    text = (ROOT / "sequences/demo-sequence.toml").read_text()
    text = text.replace('gate_time = "100 ms"', f'gate_time = "{gate}"')
    text = text.replace('design = "demo-panel.toml"', f'design = "{ROOT / "sequences/demo-panel.toml"}"')
    path = folder / f"demo-{gate.replace(' ', '')}.toml"
    path.write_text(text)
    return path


def least_periods(plan: TestPlan, design, setup, point) -> int:
    """The least whole number of periods whose counter budget reaches TUR 4 (1 without a tolerance)."""
    if point.limits is None:
        return 1
    knob = QUANTITIES[point.quantity].knob
    setting = KnobSetting(knob, point.knob_a_pct if knob == "a" else point.knob_b_pct, point.knob_a_pct,
                          point.knob_b_pct)
    facts = signal_facts(design, setting, setup)
    value = float(QUANTITIES[point.quantity].extract(design.signal(design.nominal_values(), point.knob_a_pct,
                                                                   point.knob_b_pct)))
    for n in range(1, 1_000_001):
        budget = counter_budget(point.quantity, facts, setup.counter, CounterGate(n * facts.period_s))
        ratio = tur(point.limits.tolerance_low, point.limits.tolerance_high,
                    TUR_COVERAGE_FACTOR * budget.combined_standard_uncertainty, value=value)
        if ratio >= TARGET_TUR:
            return n
    raise SystemExit(f"no number of periods reaches TUR {TARGET_TUR:g} at {point}")


def least_time_s(plan: TestPlan, design, setup) -> tuple[float, float, float]:
    """(measuring, travel, settling) of the lower bound described in the module's docstring."""
    measuring = travel = settling = 0.0
    for step in plan.steps:
        for p in step.points:
            if p.setting.instrument != "counter":
                continue
            period = float(design.signal(design.nominal_values(), p.knob_a_pct, p.knob_b_pct).period_s)
            n = least_periods(plan, design, setup, p)
            measuring += (2 if p.quantity == "duty_pct" else 1) * (n + 1) * period
        stops = tuple(dict.fromkeys(p.position for p in step.points if p.position is not None))
        if stops and plan.motion is not None:
            order = least_travel_order(plan.motion, None, stops)
            travel += path_travel_s(plan.motion, None, [stops[i] for i in order])
            # at most one stop can be where the knobs already stand: every other one costs a settle
            settling += (len(stops) - 1) * max(p.setting.settle_s for p in step.points)
        elif step.settle_s and not stops:
            settling += step.settle_s
    return measuring, travel, settling


def overhead_s(plan: TestPlan, sequence, config, units: int) -> float:
    """knobline's own wall time per simulated unit (waits skipped), median of ``units``."""
    times = []
    with tempfile.TemporaryDirectory() as folder, open_store(f"sqlite:///{folder}/r.sqlite") as store, \
            open_station(config, today=dt.date(2026, 12, 2)) as station, SimulatedWorld(station, seed=1) as world:
        ids = record_provenance(store, sequence, station)
        for i in range(units):
            serial = f"PW22-{i + 1:06d}"
            world.insert(build_unit(sequence.design, serial, seed=i))
            start = time.perf_counter()
            run_unit(plan, sequence, station, store, serial=serial, lots={}, operator="bench", sleep=lambda s: None,
                     instrument_ids=ids)
            times.append(time.perf_counter() - start)
    times.sort()
    return times[len(times) // 2]


def line(label: str, timing) -> str:
    m = sum(s.measuring_s for s in timing.steps)
    t = sum(s.travel_s for s in timing.steps)
    s = sum(s.settling_s for s in timing.steps)
    return (f"  {label:<44} {timing.instrument_s:7.2f} s  (measuring {m:6.3f} s, travel {t:5.2f} s, "
            f"settling {s:4.2f} s)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--units", type=int, default=20, help="simulated units for knobline's own time")
    args = parser.parse_args()
    config = load_station(ROOT / "sequences/demo-station.toml")
    setup = config.measurement
    with tempfile.TemporaryDirectory() as folder:
        plans = {}
        for key, gate in (("shipped", "100 ms"), ("shortest", "shortest"), ("one_second", "1 s")):
            sequence = load_sequence(variant(Path(folder), gate), station=config)
            plans[key] = (sequence, compile_plan(sequence, sequence.design, config))
    design = plans["shipped"][0].design
    shipped = plans["shipped"][1]
    as_written = replace(shipped, steps=tuple(replace(s, order=()) for s in shipped.steps))
    timings = {k: plan_time(p) for k, (_, p) in plans.items()}
    least = least_time_s(plans["shortest"][1], design, setup)
    least_total = sum(least)
    print(f"demo sequence on {config.name}: actuator {shipped.motion.speed_deg_per_s:g} deg/s (stated), "
          f"target TUR {setup.target_tur:g}")
    print(line("shipped, 100 ms gates, sequence's stop order", plan_time(as_written)))
    print(line("shipped, 100 ms gates, plan's stop order", timings["shipped"]))
    print(line('gate_time = "shortest", plan\'s stop order', timings["shortest"]))
    print(line("fixed 1 s gates, plan's stop order", timings["one_second"]))
    print(f"  {'least reaching TUR 4:1 (lower bound)':<44} {least_total:7.2f} s  (measuring {least[0]:6.3f} s, "
          f"travel {least[1]:5.2f} s, settling {least[2]:4.2f} s)")
    planned = timings["shortest"].instrument_s
    print(f"planned (shortest gates) / least reaching TUR 4:1: {planned / least_total:.3f}x (goal <= 1.2x); "
          f"measuring alone {sum(s.measuring_s for s in timings['shortest'].steps) / least[0]:.3f}x")
    print(f"shipped 100 ms gates / least: {timings['shipped'].instrument_s / least_total:.3f}x")
    one_s = timings["one_second"]
    print(f"fixed 1 s gates / planned: {one_s.instrument_s / planned:.2f}x faster per unit (goal >= 10x); "
          f"measuring alone {sum(s.measuring_s for s in one_s.steps) / sum(s.measuring_s for s in timings['shortest'].steps):.0f}x")
    sequence, plan = plans["shortest"]
    own = overhead_s(plan, sequence, config, args.units)
    print(f"knobline's own time per simulated unit (median of {args.units}, waits skipped): {own * 1e3:.1f} ms")
    for key, label in (("shortest", 'gate_time = "shortest"'), ("shipped", "shipped 100 ms gates")):
        total = timings[key].instrument_s + own
        print(f"units per hour of one station, {label}: {3600.0 / total:.0f} "
              f"({timings[key].instrument_s:.2f} s instrument + {own * 1e3:.0f} ms knobline; unit handling not counted)")
    assert math.isfinite(planned)


if __name__ == "__main__":
    main()
