"""Synthetic scope records are what they claim: levels, edge times and shapes, jitter, noise, ADC steps, faults.

Checked on the samples directly (no waveform analysis), so the analysis tests can rely on these records.
Statistical checks use 99.9 % chi-square intervals (any statistics text, from memory; scipy.stats quantiles).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from fixture.errors import UserInputError
from fixture.sim import records as records_module
from fixture.sim.dut import TrueWave
from fixture.sim.records import (
    Acquisition,
    ExtraPulse,
    RectangleWave,
    flat_record,
    glitch_record,
    runt_record,
    stuck_record,
    synthesize,
    wave_record,
)

P = 1e-3
WAVE = RectangleWave(period_s=1e-3, duty=0.3, low_v=0.2, high_v=3.1, phase_s=0.1e-3)
ACQ = Acquisition(sample_rate_hz=1e6, n_samples=10_000)


def assert_std(values: np.ndarray, sigma: float, mean: float | None = None) -> None:
    """``values`` scatter with standard deviation ``sigma`` (about ``mean`` when known)."""
    dof = values.size if mean is not None else values.size - 1
    centre = mean if mean is not None else values.mean()
    ratio = float(np.sum((values - centre) ** 2)) / dof / sigma**2
    low, high = stats.chi2.ppf([P / 2, 1 - P / 2], dof) / dof
    assert low < ratio < high, f"variance ratio {ratio:.4f} outside ({low:.4f}, {high:.4f})"


def crossing_times(volts: np.ndarray, level: float, t0_s: float, dt: float, rising: bool) -> np.ndarray:
    """Linear-interpolated crossings of ``level`` (test's own, deliberately simple)."""
    above = volts > level
    k = np.flatnonzero(~above[:-1] & above[1:]) if rising else np.flatnonzero(above[:-1] & ~above[1:])
    return t0_s + dt * (k + (level - volts[k]) / (volts[k + 1] - volts[k]))


def test_the_same_seed_gives_the_same_record_and_another_seed_another() -> None:
    wave = RectangleWave(period_s=1e-3, duty=0.3, rise_time_s=5e-6, jitter_s_rms=1e-7)
    acq = Acquisition(sample_rate_hz=1e6, n_samples=5000, noise_v_rms=0.01, lsb_v=0.02)
    a = synthesize(wave, acq, rng=np.random.default_rng(5))
    b = synthesize(wave, acq, rng=np.random.default_rng(5))
    c = synthesize(wave, acq, rng=np.random.default_rng(6))
    assert np.array_equal(a.record.volts, b.record.volts) and np.array_equal(a.rising_s, b.rising_s)
    assert not np.array_equal(a.record.volts, c.record.volts)


def test_rendering_in_blocks_does_not_change_the_record(monkeypatch: pytest.MonkeyPatch) -> None:
    wave = RectangleWave(period_s=1e-3, duty=0.3, rise_time_s=5e-6, jitter_s_rms=1e-7)
    acq = Acquisition(sample_rate_hz=1e6, n_samples=5000, noise_v_rms=0.01)
    whole = synthesize(wave, acq, rng=np.random.default_rng(5)).record.volts
    monkeypatch.setattr(records_module, "RENDER_BLOCK", 333)
    assert np.array_equal(synthesize(wave, acq, rng=np.random.default_rng(5)).record.volts, whole)


def test_an_ideal_wave_is_high_exactly_between_its_rising_and_falling_edges() -> None:
    synthetic = synthesize(WAVE, ACQ, rng=np.random.default_rng(0))
    record = synthetic.record
    t = record.times_s()
    # Rising edges at 0.1 + k ms, falling 0.3 ms later (the stated phase, period and duty).
    assert synthetic.rising_s == pytest.approx(0.1e-3 + 1e-3 * np.arange(10), abs=1e-15)
    assert synthetic.falling_s == pytest.approx(0.4e-3 + 1e-3 * np.arange(10), abs=1e-15)
    phase = (t - 0.1e-3) % 1e-3
    high = (phase > 1e-12) & (phase < 0.3e-3 - 1e-12)
    low = (phase > 0.3e-3 + 1e-12) & (phase < 1e-3 - 1e-12)
    assert np.all(record.volts[high] == 3.1) and np.all(record.volts[low] == 0.2)
    assert set(np.unique(record.volts)) == {0.2, 3.1}


@pytest.mark.parametrize("shape", ["linear", "exponential"])
def test_edges_have_the_stated_10_90_time_and_cross_50_percent_at_the_stated_time(shape: str) -> None:
    # Linear: 10-90 % is 0.8 of a full ramp; RC: tau ln 9 (step response 1 - exp(-t/tau); from memory).
    rise, fall = 20e-6, 35e-6
    wave = RectangleWave(period_s=1e-3, duty=0.3, low_v=0.2, high_v=3.1, rise_time_s=rise, fall_time_s=fall,
                         edge_shape=shape, phase_s=0.1e-3)
    dt = 1e-8  # fine sampling: linear interpolation of an RC edge errs ~ (dt/tau)^2 / 8 of the swing
    acq = Acquisition(sample_rate_hz=1 / dt, n_samples=200_000)  # 2 ms
    synthetic = synthesize(wave, acq, rng=np.random.default_rng(0))
    v = synthetic.record.volts
    swing = 2.9
    at = {pct: crossing_times(v, 0.2 + pct / 100 * swing, 0.0, dt, True) for pct in (10, 50, 90)}
    down = {pct: crossing_times(v, 0.2 + pct / 100 * swing, 0.0, dt, False) for pct in (10, 50, 90)}
    assert at[90] - at[10] == pytest.approx(np.full(2, rise), rel=1e-4)
    assert down[10] - down[90] == pytest.approx(np.full(2, fall), rel=1e-4)
    assert at[50] == pytest.approx(synthetic.rising_s, abs=1e-3 * dt)
    assert down[50] == pytest.approx(synthetic.falling_s, abs=1e-3 * dt)


def test_edge_jitter_is_white_with_the_stated_rms() -> None:
    sigma = 2e-6
    wave = RectangleWave(period_s=1e-3, duty=0.3, jitter_s_rms=sigma)
    acq = Acquisition(sample_rate_hz=1e5, n_samples=200_000)  # 2 s: 2000 cycles
    synthetic = synthesize(wave, acq, rng=np.random.default_rng(1))
    k = np.round(synthetic.rising_s / 1e-3)
    rising_error = synthetic.rising_s - k * 1e-3
    falling_error = synthetic.falling_s - (np.round((synthetic.falling_s - 0.3e-3) / 1e-3) * 1e-3 + 0.3e-3)
    assert_std(rising_error, sigma, mean=0.0)
    assert_std(falling_error, sigma, mean=0.0)
    # White: successive edges uncorrelated (|r| < 3.3 / sqrt(n) for independent samples; large-sample result).
    r = np.corrcoef(rising_error[:-1], rising_error[1:])[0, 1]
    assert abs(r) < 3.3 / math.sqrt(rising_error.size)


def test_noise_on_the_levels_has_the_stated_rms_and_zero_mean() -> None:
    acq = Acquisition(sample_rate_hz=1e6, n_samples=10_000, noise_v_rms=0.04)
    record = synthesize(WAVE, acq, rng=np.random.default_rng(2)).record
    phase = (record.times_s() - 0.1e-3) % 1e-3
    low = record.volts[(phase > 0.35e-3) & (phase < 0.95e-3)]
    assert_std(low, 0.04, mean=0.2)
    high = record.volts[(phase > 0.05e-3) & (phase < 0.25e-3)]
    assert_std(high, 0.04, mean=3.1)


def test_quantisation_rounds_to_the_lsb_with_the_uniform_error_of_q_over_root_12() -> None:
    # Quantisation error of a signal busy over many steps: uniform, rms q / sqrt(12) (Widrow; from memory).
    lsb = 0.05
    noisy = Acquisition(sample_rate_hz=1e6, n_samples=10_000, noise_v_rms=0.2)
    quantised = Acquisition(sample_rate_hz=1e6, n_samples=10_000, noise_v_rms=0.2, lsb_v=lsb)
    fine = synthesize(WAVE, noisy, rng=np.random.default_rng(3)).record.volts
    coarse = synthesize(WAVE, quantised, rng=np.random.default_rng(3)).record.volts
    codes = coarse / lsb
    assert np.allclose(codes, np.round(codes), atol=1e-9)
    error = coarse - fine
    assert np.max(np.abs(error)) <= lsb / 2 * (1 + 1e-9)
    assert_std(error, lsb / math.sqrt(12), mean=0.0)


def test_flat_and_stuck_records_sit_at_their_level() -> None:
    rng = np.random.default_rng(4)
    flat = flat_record(1.25, ACQ, rng=rng)
    assert np.all(flat.volts == 1.25) and flat.sample_interval_s == 1e-6
    assert np.all(stuck_record(WAVE, "high", ACQ, rng=rng).volts == 3.1)
    assert np.all(stuck_record(WAVE, "low", ACQ, rng=rng).volts == 0.2)
    noisy = flat_record(1.25, Acquisition(sample_rate_hz=1e6, n_samples=10_000, noise_v_rms=0.1), rng=rng)
    assert_std(noisy.volts, 0.1, mean=1.25)


def test_runts_rise_to_their_height_inside_low_times() -> None:
    synthetic = runt_record(WAVE, ACQ, rng=np.random.default_rng(5), count=3, height=0.5)
    v = synthetic.record.volts
    peaks = crossing_times(v, 0.2 + 0.25 * 2.9, 0.0, 1e-6, True)
    distance = np.min(np.abs(peaks[:, None] - synthetic.rising_s[None, :]), axis=1)
    runt_starts = peaks[distance > 5e-6]  # not one of the wave's own rising edges
    assert runt_starts.size == 3
    # Centred in the 0.7 ms low time: 0.3 + 0.35 ms after a rising edge, 0.21 ms wide (30 % of it).
    assert np.allclose((runt_starts - 0.1e-3) % 1e-3, 0.65e-3 - 0.105e-3, atol=1e-6)  # a step: within a sample
    phase = (synthetic.record.times_s() - 0.1e-3) % 1e-3
    in_low = (phase > 0.35e-3) & (phase < 0.95e-3)
    assert v[in_low].max() == pytest.approx(0.2 + 0.5 * 2.9)


def test_glitches_are_full_swing_pulses_of_the_stated_width() -> None:
    wave = RectangleWave(period_s=1e-3, duty=0.3, low_v=0.2, high_v=3.1, rise_time_s=1e-6, phase_s=0.1e-3)
    synthetic = glitch_record(wave, ACQ, rng=np.random.default_rng(6), count=4, width_s=20e-6)
    v = synthetic.record.volts
    up = crossing_times(v, 1.65, 0.0, 1e-6, True)
    down = crossing_times(v, 1.65, 0.0, 1e-6, False)
    widths = down - up[: down.size] if down[0] > up[0] else down[1:] - up[: down.size - 1]
    assert np.sum(np.isclose(widths, 20e-6, atol=1e-9)) == 4
    assert np.sum(np.isclose(widths, 0.3e-3, atol=1e-9)) >= 9
    assert v.max() == 3.1


def test_a_pulse_shorter_than_its_slew_limited_edge_turns_back_early() -> None:
    # Slew-limited output: it climbs at 0.8 swing / rise for as long as the pulse lasts (a runt), exactly.
    wave = RectangleWave(period_s=1e-3, duty=0.5, rise_time_s=100e-6, phase_s=0.1e-3)  # 40 kV/s on 5 V
    acq = Acquisition(sample_rate_hz=1e7, n_samples=20_000)
    pulses = [ExtraPulse(start_s=1.8e-3, width_s=50e-6, height=1.0)]
    v = synthesize(wave, acq, rng=np.random.default_rng(0), extra_pulses=pulses).record.volts
    phase = (np.arange(20_000) * 1e-7 - 0.1e-3) % 1e-3
    assert v[(phase > 0.6e-3) & (phase < 0.95e-3)].max() == pytest.approx(0.8 * 5.0 / 100e-6 * 50e-6, abs=1e-9)


def test_a_simulated_units_true_wave_becomes_its_record() -> None:
    true = TrueWave(period_s=1e-3, high_s=0.25e-3, low_v=0.1, high_v=4.9, rise_time_s=2e-6, jitter_s_rms=0.0)
    record = wave_record(true, ACQ, rng=np.random.default_rng(7), phase_s=0.2e-3)
    assert crossing_times(record.volts, 2.5, 0.0, 1e-6, True) == pytest.approx(0.2e-3 + 1e-3 * np.arange(10),
                                                                            abs=1e-12)
    stuck = TrueWave(period_s=1e-3, high_s=0.0, low_v=0.1, high_v=4.9, rise_time_s=2e-6, jitter_s_rms=0.0,
                     stuck="high")
    assert np.all(wave_record(stuck, ACQ, rng=np.random.default_rng(7)).volts == 4.9)


@pytest.mark.parametrize("kwargs", [
    {"duty": 0.0}, {"duty": 1.0}, {"high_v": 0.0}, {"rise_time_s": -1e-6}, {"edge_shape": "sine"},
    {"jitter_s_rms": 0.05e-3}, {"period_s": float("nan")},
])
def test_a_wave_that_is_not_a_rectangle_wave_is_refused(kwargs: dict) -> None:
    with pytest.raises(UserInputError):
        RectangleWave(**{"period_s": 1e-3, "duty": 0.3, **kwargs})


def test_impossible_acquisitions_and_pulses_are_refused() -> None:
    with pytest.raises(UserInputError):
        Acquisition(sample_rate_hz=0.0, n_samples=100)
    with pytest.raises(UserInputError):
        Acquisition(sample_rate_hz=1e6, n_samples=1)
    with pytest.raises(UserInputError):  # crosses the falling edge at 0.4 ms
        synthesize(WAVE, ACQ, rng=np.random.default_rng(0), extra_pulses=[ExtraPulse(0.35e-3, 0.1e-3)])
    with pytest.raises(UserInputError):
        stuck_record(WAVE, "sideways", ACQ, rng=np.random.default_rng(0))
