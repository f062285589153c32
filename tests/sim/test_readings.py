"""Simulated counter readings: averaging over the gate."""

from __future__ import annotations

import numpy as np
import pytest

from fixture.sim.dut import TrueWave
from fixture.sim.readings import SCPI_OVERFLOW, counter_reading

WAVE = TrueWave(period_s=2.5e-3, high_s=1.0e-3, low_v=0.0, high_v=10.0, rise_time_s=20e-6, jitter_s_rms=200e-9)


def scatter(function: str, gate_time_s: float, n: int = 4000) -> np.ndarray:
    rng = np.random.default_rng(9)
    return np.array([counter_reading(WAVE, function, gate_time_s, 1e-9, rng) for _ in range(n)])


def test_period_scatter_falls_as_one_over_the_averaged_periods() -> None:
    # Reciprocal counting: start/stop jitter sqrt(2) sigma spread over N periods (common practice).
    short = scatter("period", 2.5e-3)  # N = 1
    long = scatter("period", 100 * 2.5e-3)  # N = 100
    expected_short = np.sqrt(2 * (200e-9) ** 2 + (1e-9) ** 2 / 3)
    assert short.std() == pytest.approx(expected_short, rel=0.05)
    assert short.std() / long.std() == pytest.approx(100, rel=0.08)


def test_readings_are_unbiased_and_duty_is_in_percent() -> None:
    assert scatter("period", 0.1).mean() == pytest.approx(2.5e-3, rel=1e-6)
    assert scatter("frequency", 0.1).mean() == pytest.approx(400.0, rel=1e-6)
    assert scatter("duty", 0.1).mean() == pytest.approx(40.0, rel=1e-3)


def test_no_signal_reads_the_scpi_overflow_value() -> None:
    stuck = TrueWave(2.5e-3, 1e-3, 0.0, 10.0, 20e-6, 0.0, stuck="low")
    assert counter_reading(stuck, "frequency", 0.1, 1e-9, np.random.default_rng(1)) == SCPI_OVERFLOW
