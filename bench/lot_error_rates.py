"""Error rates of the batch report's lot findings: a seeded simulation study (baseline for issue 10).

    python bench/lot_error_rates.py [--batches N] [--units N ...] [--seed S]

Each simulated batch is planned as the demo plans one (lots change at different units per
part, no defective units here), with either no shifted lot ("null") or one planted lot per
scenario below. Every unit's readings are drawn from its true wave through the simulated
counter (100 ms gate, 100 ps single-shot resolution: a bench counter class, from memory) at
the design's knob stops: frequency at each knob A stop with B held, duty at each knob B stop
with A held. The units are diagnosed and the lots combined exactly as ``knobline report
batch`` does (:func:`fixture.analytics.diagnosis.diagnose_unit`,
:func:`fixture.analytics.lot_diagnosis.diagnose_lots`, a finding is a lot not explained by
another with ``|t| >= 4``), and the study counts per scenario:

* false-finding rate: batches with any finding other than the planted lot (family-wise);
* power: batches whose findings include the planted lot (a finding naming a lot that shares
  every unit with the planted one counts as a false finding here: the report names them apart);
* coverage: how often the planted lot's stated 95 % interval (shift +- 1.96 standard errors)
  holds the mean deviation its units' parts really have (the realised shift, not the nominal).

Every figure carries its 95 % Clopper-Pearson interval over the batches.
"""

from __future__ import annotations

import argparse
import math
import time
from dataclasses import dataclass

import numpy as np
from scipy.stats import beta

from fixture._data import data_dir
from fixture.analytics.diagnosis import Reading, diagnose_unit
from fixture.analytics.lot_diagnosis import diagnose_lots
from fixture.files.design_file import load_design
from fixture.model.design import ProductDesign
from fixture.sim.batch import plan_batch
from fixture.sim.readings import counter_reading

GATE_TIME_S = 0.1
RESOLUTION_S = 100e-12
FINDING_T = 4.0  # the batch report's bar (fixture/reporting/batch_report.py)


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
    batches: int = 0
    any_false: int = 0
    found: int = 0
    covered: int = 0
    with_interval: int = 0
    false_findings: int = 0


def run_batch(design: ProductDesign, scenario: Scenario, units: int, seed: int, tally: Tally) -> None:
    plan = plan_batch(design, units=units, seed=seed, shifted_part=scenario.part, shift=scenario.shift,
                      defect_fraction=0.0)
    rng = np.random.default_rng(seed)
    diagnoses, lots, true_dev = {}, {}, {}
    part, planted, _ = plan.shifted
    nominal = design.part(part).nominal
    for planned in plan.units:
        unit = plan.build(design, planned)
        diagnoses[planned.serial] = diagnose_unit(design, unit_readings(unit, design, rng), serial=planned.serial)
        lots[planned.serial] = dict(planned.lots)
        if planned.lots.get(part) == planted:
            true_dev[planned.serial] = 100.0 * (unit.values[part] / nominal - 1.0)
    every_lot = diagnose_lots(diagnoses, lots)
    findings = [d for d in every_lot
                if d.explained_by is None and math.isfinite(d.t) and abs(d.t) >= FINDING_T]
    is_planted = [scenario.shift != 0.0 and (d.part, d.lot) == (part, planted) for d in findings]
    tally.batches += 1
    tally.false_findings += sum(1 for p in is_planted if not p)
    tally.any_false += any(not p for p in is_planted)
    if scenario.shift != 0.0:
        tally.found += any(is_planted)
        lot = next((d for d in every_lot if (d.part, d.lot) == (part, planted)), None)
        if lot is not None and math.isfinite(lot.shift_pct[1]) and true_dev:
            mean, se = lot.shift_pct
            realised = float(np.mean([true_dev[s] for s in true_dev if s in diagnoses]))
            tally.with_interval += 1
            tally.covered += abs(mean - realised) <= 1.96 * se


def rate(k: int, n: int) -> str:
    if n == 0:
        return "   -"
    low, high = clopper_pearson(k, n)
    return f"{100 * k / n:5.1f} % [{100 * low:4.1f}, {100 * high:5.1f}]"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--batches", type=int, default=40, help="batches per scenario and batch size")
    parser.add_argument("--units", type=int, action="append", help="units per batch (repeatable; default 30, 60)")
    parser.add_argument("--seed", type=int, default=1, help="first batch seed")
    args = parser.parse_args()
    design = load_design(data_dir("sequences") / "demo-panel.toml")
    sizes = args.units or [30, 60]
    print(f"lot findings of the batch report (|t| >= {FINDING_T:g}, not explained by another lot), "
          f"{args.batches} batches per row, seeds {args.seed}..{args.seed + args.batches - 1}; "
          "rates with exact 95 % intervals")
    print(f"{'scenario':28s} {'units':>5s}  {'batches with a false finding':30s} {'power (planted lot found)':30s} "
          f"{'interval coverage':26s} false per batch")
    for scenario in SCENARIOS:
        for units in sizes:
            tally = Tally()
            start = time.perf_counter()
            for seed in range(args.seed, args.seed + args.batches):
                run_batch(design, scenario, units, seed, tally)
            print(f"{scenario.name:28s} {units:5d}  {rate(tally.any_false, tally.batches):30s} "
                  f"{rate(tally.found, tally.batches) if scenario.shift else '   -':30s} "
                  f"{rate(tally.covered, tally.with_interval) if scenario.shift else '   -':26s} "
                  f"{tally.false_findings / tally.batches:5.2f}   ({time.perf_counter() - start:.0f} s)", flush=True)


if __name__ == "__main__":
    main()
