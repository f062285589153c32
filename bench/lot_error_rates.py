"""Error rates of the batch report's lot findings: a seeded simulation study.

    python bench/lot_error_rates.py [--batches N] [--units N ...] [--seed S] [--no-defects]

Each simulated batch is planned as the demo plans one (lots change at different units per
part; defective units as the demo has them unless --no-defects), with either no shifted
lot ("null") or one planted lot per scenario below. Every unit's readings are drawn from
its true wave through the simulated counter (100 ms gate, 100 ps single-shot resolution:
a bench counter class, from memory) at the design's knob stops: frequency at each knob A
stop with B held, duty at each knob B stop with A held. The lots are judged exactly as
``knobline report batch`` judges them (:func:`fixture.analytics.lot_attribution.attribute_lots`),
and the study counts per scenario:

* false-finding rate: batches with any finding that does not name the planted lot
  (family-wise; a finding naming the planted lot and a lot the batch cannot tell from it
  is a true finding, as the issue that asked for this study defines it);
* power: batches with a finding naming the planted lot;
* pairs: of those, how many name it together with a lot the batch cannot tell from it;
* coverage: of the findings led by the planted lot, how often the stated 95 % interval
  holds the lot's planted shift (the lot as a population, what its reel really is).

Every figure carries its 95 % Clopper-Pearson interval over the batches. The functions
are imported by ``tests/analytics/test_lot_error_rates.py``, which keeps a small version
of the study in CI with the goals asserted.
"""

from __future__ import annotations

import argparse
import time
from dataclasses import dataclass

import numpy as np
from scipy.stats import beta

from fixture._data import data_dir
from fixture.analytics.lot_attribution import LotUnit, attribute_lots
from fixture.analytics.part_fit import Reading
from fixture.files.design_file import load_design
from fixture.model.design import ProductDesign
from fixture.sim.batch import plan_batch
from fixture.sim.readings import counter_reading

GATE_TIME_S = 0.1
RESOLUTION_S = 100e-12
DEMO_DEFECTS = 0.04  # the demo's defect fraction (fixture/commands/demo.py plans with the default)


@dataclass(frozen=True)
class Scenario:
    """One planted lot (or none): part key, relative shift."""

    name: str
    part: str
    shift: float


SCENARIOS = (
    Scenario("null (no lot off)", "c_integrator", 0.0),
    Scenario("C1 capacitor lot -8 %", "c_integrator", -0.08),
    Scenario("C1 capacitor lot -3 %", "c_integrator", -0.03),
    Scenario("R5 1 % resistor lot +2 %", "r_integrator", 0.02),
    Scenario("RV1 pot lot -10 %", "knob_a_pot", -0.10),
)


def clopper_pearson(k: int, n: int) -> tuple[float, float]:
    """Exact 95 % interval of a binomial proportion (Clopper and Pearson 1934)."""
    low = 0.0 if k == 0 else float(beta.ppf(0.025, k, n - k + 1))
    high = 1.0 if k == n else float(beta.ppf(0.975, k + 1, n - k))
    return low, high


def unit_readings(unit, design: ProductDesign, rng: np.random.Generator) -> list[Reading]:
    """What the demo sequence reads of a unit: frequency at knob A stops, duty at knob B stops."""
    a, b = design.knobs["a"], design.knobs["b"]
    readings = []
    for stop in a.stops_pct:
        wave = unit.wave(stop, b.hold_pct)
        readings.append(Reading(stop, b.hold_pct, "frequency_hz",
                                counter_reading(wave, "frequency", GATE_TIME_S, RESOLUTION_S, rng)))
    for stop in b.stops_pct:
        wave = unit.wave(a.hold_pct, stop)
        readings.append(Reading(a.hold_pct, stop, "duty_pct",
                                counter_reading(wave, "duty", GATE_TIME_S, RESOLUTION_S, rng)))
    return readings


@dataclass
class Tally:
    """Counts over the batches of one scenario and size."""

    batches: int = 0
    any_false: int = 0
    found: int = 0
    pairs: int = 0
    covered: int = 0
    led: int = 0
    false_findings: int = 0

    def rate(self, what: str) -> float:
        k, n = {"false": (self.any_false, self.batches), "power": (self.found, self.batches),
                "coverage": (self.covered, self.led)}[what]
        return k / n if n else float("nan")


def run_batch(design: ProductDesign, scenario: Scenario, units: int, seed: int, tally: Tally,
              defect_fraction: float = DEMO_DEFECTS) -> None:
    """Simulate one batch, judge its lots and add the outcome to ``tally``."""
    plan = plan_batch(design, units=units, seed=seed, shifted_part=scenario.part, shift=scenario.shift,
                      defect_fraction=defect_fraction)
    rng = np.random.default_rng(seed)
    batch = [LotUnit(p.serial, unit_readings(plan.build(design, p), design, rng), dict(p.lots)) for p in plan.units]
    findings = attribute_lots(design, batch).findings
    _, planted, shift = plan.shifted
    names = [scenario.shift != 0.0 and planted in f.lots for f in findings]
    tally.batches += 1
    tally.false_findings += sum(1 for n in names if not n)
    tally.any_false += any(not n for n in names)
    if scenario.shift != 0.0:
        tally.found += any(names)
        tally.pairs += any(n and len(f.lots) > 1 for n, f in zip(names, findings, strict=True))
        for f in findings:
            if f.lot == planted:
                tally.led += 1
                tally.covered += f.interval_pct[0] <= 100.0 * shift <= f.interval_pct[1]


def study(design: ProductDesign, scenario: Scenario, units: int, seeds: range,
          defect_fraction: float = DEMO_DEFECTS) -> Tally:
    """One row of the study: ``scenario`` over batches of ``units`` units, one per seed."""
    tally = Tally()
    for seed in seeds:
        run_batch(design, scenario, units, seed, tally, defect_fraction)
    return tally


def rate(k: int, n: int) -> str:
    if n == 0:
        return "   -"
    low, high = clopper_pearson(k, n)
    return f"{100 * k / n:5.1f} % [{100 * low:4.1f}, {100 * high:5.1f}]"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--batches", type=int, default=200, help="batches per scenario and batch size")
    parser.add_argument("--units", type=int, action="append", help="units per batch (repeatable; default 30, 60)")
    parser.add_argument("--seed", type=int, default=1, help="first batch seed")
    parser.add_argument("--no-defects", action="store_true", help="no defective units in the batches")
    args = parser.parse_args()
    design = load_design(data_dir("sequences") / "demo-panel.toml")
    sizes = args.units or [30, 60]
    defects = 0.0 if args.no_defects else DEMO_DEFECTS
    seeds = range(args.seed, args.seed + args.batches)
    print(f"lot findings of the batch report, {args.batches} batches per row, seeds {seeds.start}..{seeds.stop - 1}, "
          f"{'no defective units' if not defects else 'defective units as in the demo'}; "
          "rates with exact 95 % intervals")
    print(f"{'scenario':26s} {'units':>5s}  {'batches with a false finding':30s} {'power (planted lot named)':30s} "
          f"{'of which as a pair':18s} {'interval coverage':26s}")
    for scenario in SCENARIOS:
        for units in sizes:
            start = time.perf_counter()
            t = study(design, scenario, units, seeds, defects)
            planted = scenario.shift != 0.0
            print(f"{scenario.name:26s} {units:5d}  {rate(t.any_false, t.batches):30s} "
                  f"{rate(t.found, t.batches) if planted else '   -':30s} "
                  f"{(f'{t.pairs:4d} of {t.found:<4d}' if planted else '   -'):18s} "
                  f"{rate(t.covered, t.led) if planted else '   -':26s} ({time.perf_counter() - start:.0f} s)",
                  flush=True)


if __name__ == "__main__":
    main()
