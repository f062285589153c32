"""Waveform analysis speed and period precision, pinned to one core.

Prints seconds and ratios measured in this one run (compare ratios, not seconds across machines).
Targets (issue 3):

* analysis of a 10^7-sample record within 4x the time of one ``np.copy`` of that record;
* standard deviation of the least-squares period within 1.25x of its bound for white edge jitter
  ``sigma``: ``sigma sqrt(12 / (N (N+1) (N+2)))`` over ``N + 1`` rising edges (OLS slope variance, equal to
  the Cramer-Rao bound for normal jitter);
* at least 10x better than the three-edge estimate ``(t_2 - t_0) / 2`` (``sigma / sqrt(2)``) on 100 cycles.

    python bench/waveform.py [--samples N] [--records R]
"""

from __future__ import annotations

import argparse
import math

import numpy as np

from timing import best_of, pin_to_one_core

from fixture.model.waveform import analyze_record
from fixture.sim.records import Acquisition, RectangleWave, synthesize


def speed(samples: int, repeats: int) -> None:
    # 10 kHz, 40 % duty, 0.5 us edges, 2 % noise, 8-bit steps and 10 ns jitter at 10 MSa/s: 10^4 cycles in
    # 10^7 samples.
    wave = RectangleWave(period_s=100e-6, duty=0.4, rise_time_s=0.5e-6, jitter_s_rms=10e-9, phase_s=13e-6)
    acq = Acquisition(sample_rate_hz=10e6, n_samples=samples, noise_v_rms=0.1, lsb_v=5.0 / 256)
    record = synthesize(wave, acq, rng=np.random.default_rng(1)).record
    t_copy = best_of(repeats, lambda: np.copy(record.volts))
    t_analysis = best_of(repeats, lambda: analyze_record(record))
    result = analyze_record(record)
    print(f"record: {samples:.3g} samples, {result.cycles} cycles, diagnosis {result.diagnosis.value}")
    print(f"  analysis          {t_analysis * 1e3:8.2f} ms")
    print(f"  np.copy           {t_copy * 1e3:8.2f} ms")
    print(f"  ratio             {t_analysis / t_copy:8.2f} x   (target <= 4)")


def precision(records: int, cycles: int) -> None:
    sigma, period = 1e-6, 1e-3
    # Linear edges with 5 samples on the ramp and no amplitude noise: white edge jitter is the only error.
    wave = RectangleWave(period_s=period, duty=0.4, rise_time_s=8e-6, jitter_s_rms=sigma, phase_s=0.25e-3)
    acq = Acquisition(sample_rate_hz=500e3, n_samples=int((cycles + 0.5) * period * 500e3))
    rng = np.random.default_rng(2)
    lsq, three = np.empty(records), np.empty(records)
    for i in range(records):
        result = analyze_record(synthesize(wave, acq, rng=rng).record)
        if result.cycles != cycles:
            raise SystemExit(f"record {i}: expected {cycles} cycles, found {result.cycles} ({result.message})")
        lsq[i] = result.period_s
        three[i] = (result.rising_s[2] - result.rising_s[0]) / 2
    n = cycles
    bound = sigma * math.sqrt(12.0 / (n * (n + 1) * (n + 2)))
    std_lsq = math.sqrt(float(np.mean((lsq - period) ** 2)))  # about the known true period
    std_three = math.sqrt(float(np.mean((three - period) ** 2)))
    # A standard deviation from R records is itself uncertain by about 1/sqrt(2R) (relative).
    print(f"period precision: {records} records of {cycles} cycles, white edge jitter {sigma * 1e9:.0f} ns rms")
    print(f"  least-squares bound sigma*sqrt(12/(N(N+1)(N+2)))  {bound * 1e9:8.3f} ns")
    print(f"  least-squares std                                 {std_lsq * 1e9:8.3f} ns")
    print(f"  ratio to bound    {std_lsq / bound:8.3f} x   (target <= 1.25; +-{1 / math.sqrt(2 * records):.3f} "
          f"statistical)")
    print(f"  three-edge std    {std_three * 1e9:8.3f} ns   (expected sigma/sqrt(2) = {sigma / math.sqrt(2) * 1e9:.1f} ns)")
    print(f"  three-edge / lsq  {std_three / std_lsq:8.1f} x   (target >= 10; expected "
          f"{math.sqrt(n * (n + 1) * (n + 2) / 24):.0f})")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=10_000_000)
    parser.add_argument("--records", type=int, default=1000)
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args()
    pin_to_one_core()
    speed(args.samples, args.repeats)
    precision(args.records, 100)


if __name__ == "__main__":
    main()
