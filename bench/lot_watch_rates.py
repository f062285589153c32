"""Early warning of a shifted lot: false lot alerts per 1000 units and detection delays (seeded study).

    python bench/lot_watch_rates.py [--null-batches N] [--line-units N] [--batches N] [--units N] [--seed S]

Units are planned as the demo plans a batch (:func:`fixture.sim.batch.plan_batch`, lots used one
after another, no defective units) and read as ``bench/lot_error_rates.py`` reads them (frequency
at each knob A stop, duty at each knob B stop, through the simulated counter). Each unit is
diagnosed in production order and fed to its lots' charts exactly as ``knobline test`` does
(:func:`fixture.analytics.lot_watch.recentred_design`, ``diagnose_unit``, ``watch_unit``).

* **in control**: batches with no lot off (``shift=0``), ``--line-units`` units each (long lots,
  as on a line); false lot alerts per 1000 units (each alert once, however many lots it names),
  with an exact 95 % interval (Poisson), and the standardized values' mean and sd per part (the
  standardization check: 0 and 1 when the algebra holds);
* **detection**: one planted lot per scenario, ``--units`` units per batch; delay = units of the
  planted lot in production order (left-out units included) up to and including the one whose
  alert names the lot; median and 90th percentile, and the batches whose alert never came
  within the lot. An alert names the lot when it is the alert's own lot, alerted with it, or a lot of a
  part the readings cannot tell apart from the alert's (``named first``: the alert's own lot).
  Alerts naming no planted lot in those batches are counted too.
The CUSUM's in-control ARL is printed beside: Siegmund's approximation and a seeded simulation.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy.stats import chi2

sys.path.insert(0, str(Path(__file__).resolve().parent))

from lot_error_rates import SCENARIOS as ERROR_RATE_SCENARIOS  # noqa: E402  (the same batches)
from lot_error_rates import unit_readings  # noqa: E402  (the same reading simulation)

from fixture._data import data_dir  # noqa: E402
from fixture.analytics.diagnosis import diagnose_unit  # noqa: E402
from fixture.analytics.cusum_arl import siegmund_arl, simulated_run_lengths  # noqa: E402
from fixture.analytics.lot_watch import (  # noqa: E402
    WatchSettings,
    part_label,
    recentred_design,
    watch_unit,
)
from fixture.files.design_file import load_design  # noqa: E402
from fixture.model.design import ProductDesign  # noqa: E402
from fixture.sim.batch import plan_batch  # noqa: E402


#: the planted lots of the lot-findings study, so the two benches speak of the same batches
SCENARIOS = tuple(sc for sc in ERROR_RATE_SCENARIOS if sc.shift)


@dataclass
class BatchResult:
    units: int = 0
    alerts: list = field(default_factory=list)  # (unit index, alert)
    z: dict = field(default_factory=dict)  # part -> standardized values fed
    delay: int | None = None
    first: bool = False  # the alert's own lot (not one it cannot tell apart from it)
    lot_units: int = 0


def run_batch(design: ProductDesign, *, units: int, seed: int, part: str, shift: float,
              settings: WatchSettings) -> BatchResult:
    """One batch through the charts in production order."""
    plan = plan_batch(design, units=units, seed=seed, shifted_part=part, shift=shift, defect_fraction=0.0)
    rng = np.random.default_rng(seed)
    _, planted, _ = plan.shifted
    states: dict = {}
    result = BatchResult(units=units)
    seen_of_lot = 0
    for planned in plan.units:
        readings = unit_readings(plan.build(design, planned), design, rng)
        fit_design, centres = recentred_design(design, {k: s for k, s in states.items()
                                                        if planned.lots.get(k[0]) == k[1]})
        diagnosis = diagnose_unit(fit_design, readings, serial=planned.serial)
        steps, alerts = watch_unit(design, diagnosis, planned.lots, states, settings, centres)
        for key, step in steps.items():
            states[key] = step.state
            if step.standardized is not None:
                result.z.setdefault(key[0], []).append(step.standardized)
        of_lot = planned.lots.get(part) == planted
        seen_of_lot += of_lot
        for alert in alerts:
            result.alerts.append((planned.index, alert))
            if shift != 0.0 and alert.names(part, planted) and result.delay is None:
                result.delay = seen_of_lot
                result.first = (alert.part, alert.lot) == (part, planted)
    result.lot_units = seen_of_lot
    return result


def poisson_interval(k: int) -> tuple[float, float]:
    """Exact 95 % interval of a Poisson count (Garwood 1936)."""
    low = 0.0 if k == 0 else chi2.ppf(0.025, 2 * k) / 2
    return low, chi2.ppf(0.975, 2 * k + 2) / 2


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--null-batches", type=int, default=10, help="in-control batches")
    parser.add_argument("--line-units", type=int, default=500, help="units per in-control batch")
    parser.add_argument("--batches", type=int, default=30, help="batches per detection scenario")
    parser.add_argument("--units", type=int, default=150, help="units per detection batch")
    parser.add_argument("--seed", type=int, default=1, help="first batch seed")
    args = parser.parse_args()
    design = load_design(data_dir("sequences") / "demo-panel.toml")
    settings = WatchSettings()
    arl = simulated_run_lengths(settings, 0.0, 4000, seed=args.seed)
    print(f"CUSUM per (part, lot): k = {settings.k:g}, h = {settings.h:g}, standardized values capped at "
          f"+-{settings.z_cap:g}; in-control ARL per chart: Siegmund {siegmund_arl(settings.k, settings.h):.0f}, "
          f"simulated {arl.mean():.0f} +- {arl.std(ddof=1) / math.sqrt(arl.size):.0f} (4000 seeded N(0,1) charts)")

    start = time.perf_counter()
    total, false_alerts, z = 0, [], {}
    for seed in range(args.seed, args.seed + args.null_batches):
        r = run_batch(design, units=args.line_units, seed=seed, part="c_integrator", shift=0.0, settings=settings)
        total += r.units
        false_alerts += [(seed, i, a) for i, a in r.alerts]
        for part, values in r.z.items():
            z.setdefault(part, []).extend(values)
    low, high = poisson_interval(len(false_alerts))
    print(f"\nin control: {total} units in {args.null_batches} batches of {args.line_units} "
          f"({time.perf_counter() - start:.0f} s): {len(false_alerts)} false lot alerts = "
          f"{1000 * len(false_alerts) / total:.2f} per 1000 units [{1000 * low / total:.2f}, {1000 * high / total:.2f}]")
    for seed, i, a in false_alerts:
        print(f"  batch seed {seed}, unit {i + 1}: {a.text}")
    print("standardized values of in-control units (mean, sd; 0 and 1 when the standardization holds):")
    for part, values in z.items():
        v = np.asarray(values)
        print(f"  {part_label(design, part):44s} n {v.size:5d}  mean {v.mean():+.3f} (se {v.std(ddof=1) / math.sqrt(v.size):.3f})"
              f"  sd {v.std(ddof=1):.3f}")

    print(f"\ndetection: {args.batches} batches of {args.units} units per scenario; delay = units of the planted lot "
          "until the alert naming it")
    print(f"{'scenario':28s} {'lot units':>9s}  {'median':>6s} {'90th pct':>8s}  not alerted  named first  "
          "other alerts per batch")
    for sc in SCENARIOS:
        start = time.perf_counter()
        delays, sizes, other, first = [], [], 0, 0
        for seed in range(args.seed, args.seed + args.batches):
            r = run_batch(design, units=args.units, seed=seed, part=sc.part, shift=sc.shift, settings=settings)
            planted = plan_batch(design, units=args.units, seed=seed, shifted_part=sc.part, shift=sc.shift,
                                 defect_fraction=0.0).shifted[1]
            delays.append(r.delay if r.delay is not None else math.inf)
            sizes.append(r.lot_units)
            first += r.first
            other += sum(1 for _, a in r.alerts if not a.names(sc.part, planted))
        d = np.asarray(delays, dtype=float)
        missed = int(np.sum(~np.isfinite(d)))

        def pct(q: float, d: np.ndarray = d) -> str:
            value = float(np.percentile(d, q, method="inverted_cdf"))  # a missed lot counts as never
            return f"{value:.0f}" if math.isfinite(value) else "never"
        print(f"{sc.name:28s} {np.median(sizes):9.0f}  {pct(50):>6s} {pct(90):>8s}  {missed:3d} of {len(d):3d}"
              f"  {first:3d} of {len(d):3d}  {other / len(d):.2f}   ({time.perf_counter() - start:.0f} s)", flush=True)


if __name__ == "__main__":
    main()
