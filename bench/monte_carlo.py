"""Monte Carlo speed on the demo design, pinned to one core.

Prints seconds and ratios measured in this one run (machines are noisy, so
compare ratios, not seconds across runs). Target (issue 2): 10^6 samples
under 1 s on one core, within 10x of a single numpy pass over the same
sample matrix.

    python bench/monte_carlo.py [--samples N]
"""

from __future__ import annotations

import argparse
import tracemalloc
from pathlib import Path

import numpy as np
from timing import best_of, pin_to_one_core

from fixture.files.design_file import load_design
from fixture.model.quantities import DEFAULT_QUANTITIES
from fixture.model.tolerance.monte_carlo import McOptions, draw, monte_carlo
from fixture.model.tolerance.space import KnobSetting, ParameterSpace, knob_settings

DEMO = Path(__file__).resolve().parent.parent / "sequences" / "demo-panel.toml"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=1_000_000)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    pin_to_one_core()

    design = load_design(DEMO)
    space = ParameterSpace(design, design.conditions["production"])
    one = [KnobSetting("a", 50.0, 50.0, 50.0)]
    quantities = {"a": ("frequency_hz", "period_s", "duty_pct"), "b": ("duty_pct",)}
    n = args.samples

    t_mc_one = best_of(args.repeats, lambda: monte_carlo(space, one, quantities, (), McOptions(samples=n)))
    matrix = draw(space, np.random.default_rng(1), n, "random")
    t_model_pass = best_of(args.repeats, lambda: space.signal(matrix, one[0]))
    t_sum_pass = best_of(args.repeats, lambda: matrix.sum(axis=0))
    t_copy = best_of(args.repeats, lambda: np.copy(matrix))
    settings = knob_settings(design)
    t_table = best_of(1, lambda: monte_carlo(space, settings, DEFAULT_QUANTITIES, design.spec,
                                             McOptions(samples=n)))
    tracemalloc.start()
    monte_carlo(space, one, quantities, (), McOptions(samples=n))
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()

    print(f"demo design, {n} samples, {space.dims} dimensions, one core")
    print(f"  Monte Carlo, one knob setting (draw, temperature, model, quantiles): {t_mc_one:.3f} s")
    print(f"  one model evaluation over the pre-drawn {n}x{space.dims} matrix:   {t_model_pass:.3f} s")
    print(f"  ratio Monte Carlo / one model pass:                                {t_mc_one / t_model_pass:.2f}x")
    print(f"  ratio Monte Carlo / one matrix.sum pass ({t_sum_pass * 1e3:.1f} ms):              "
          f"{t_mc_one / t_sum_pass:.1f}x")
    print(f"  ratio Monte Carlo / one np.copy of the matrix ({t_copy * 1e3:.1f} ms):        "
          f"{t_mc_one / t_copy:.1f}x")
    print(f"  Monte Carlo of the whole table ({len(settings)} settings, spec yields):      {t_table:.3f} s")
    print(f"  peak traced memory, one setting:                                   {peak / 2**20:.0f} MiB")


if __name__ == "__main__":
    main()
