"""Waveform analysis of scope records: edges, least-squares period, duty, jitter and diagnoses.

Records come from fixture.sim.records, whose own tests pin that they are what they claim (levels, edge
times, rise times, noise). Wave and record figures are invented test inputs of plausible size.

Statistical checks use 99.9 % intervals (chi-square for a variance, F for a ratio of variances; any
statistics text, from memory; quantiles from scipy.stats), on fixed seeds.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from fixture.errors import UserInputError
from fixture.model import uncertainty
from fixture.model.waveform import (
    AnalysisOptions,
    Diagnosis,
    ScopeRecord,
    Thresholds,
    analyze_record,
    find_edges,
    fit_period,
)
from fixture.model.waveform import edges as edges_module
from fixture.sim.records import (
    Acquisition,
    RectangleWave,
    flat_record,
    glitch_record,
    runt_record,
    stuck_record,
    synthesize,
)

P = 1e-3  # two-sided miss probability of every statistical interval below

# 1 ms period, 40 % duty, 0..5 V, linear 10-90 % rise of 8 us sampled every 2 us (a full ramp of 10 us:
# five samples on every edge, so interpolation is exact and only jitter and noise scatter the edges).
WAVE = RectangleWave(period_s=1e-3, duty=0.4, rise_time_s=8e-6, phase_s=0.25e-3)
ACQ = Acquisition(sample_rate_hz=500e3, n_samples=10_250)  # 20.5 ms: rising edges at 0.25 .. 20.25 ms


def variance_interval(dof: int) -> tuple[float, float]:
    """Range of ``s^2 / sigma^2`` for a variance estimate with ``dof`` degrees of freedom."""
    return tuple(stats.chi2.ppf([P / 2, 1 - P / 2], dof) / dof)


def assert_variance(estimates: np.ndarray, truth: float, sigma: float) -> None:
    """Scatter of ``estimates`` about the known ``truth`` is ``sigma``, and their mean is unbiased."""
    n = estimates.size
    low, high = variance_interval(n)
    ratio = float(np.mean((estimates - truth) ** 2)) / sigma**2
    assert low < ratio < high, f"variance ratio {ratio:.3f} outside ({low:.3f}, {high:.3f})"
    z = stats.norm.ppf(1 - P / 2)
    assert abs(float(estimates.mean()) - truth) < z * sigma / math.sqrt(n)


def timing_errors(found_s: np.ndarray, true_s: np.ndarray) -> np.ndarray:
    """Each found edge minus the nearest true edge (edges at the record ends may or may not be found)."""
    i = np.clip(np.searchsorted(true_s, found_s), 1, true_s.size - 1)
    nearest = np.where(np.abs(found_s - true_s[i - 1]) < np.abs(found_s - true_s[i]), true_s[i - 1], true_s[i])
    return found_s - nearest


def test_clean_record_is_ok_with_no_findings_and_the_true_period_and_duty() -> None:
    result = analyze_record(synthesize(WAVE, ACQ, rng=np.random.default_rng(1)).record)
    assert result.ok and result.findings == () and result.diagnosis is Diagnosis.OK
    assert result.cycles == 20
    # Noise- and jitter-free linear edges with >= 2 samples on the ramp: exact up to rounding.
    assert result.period_s == pytest.approx(1e-3, rel=1e-12)
    assert result.frequency_hz == pytest.approx(1e3, rel=1e-12)
    assert result.duty == pytest.approx(0.4, rel=1e-10) and result.duty_pct == pytest.approx(40.0, rel=1e-10)
    assert result.high_times_s == pytest.approx(np.full(20, 0.4e-3), rel=1e-10)
    assert result.periods_s == pytest.approx(np.full(20, 1e-3), rel=1e-10)
    assert result.levels.low_v == 0.0 and result.levels.high_v == 5.0
    assert result.thresholds.lower_v < 2.5 == result.thresholds.mid_v < result.thresholds.upper_v


def test_least_squares_period_has_the_ols_slope_variance_on_jittered_records() -> None:
    # var(T) = 12 sigma^2 / (N (N+1) (N+2)) for N+1 equally spaced edges with white errors
    # (OLS slope variance sigma^2 / Sxx, Sxx = M (M^2 - 1) / 12; any regression text, from memory).
    sigma, n_cycles = 2e-6, 20
    wave = RectangleWave(period_s=1e-3, duty=0.4, rise_time_s=8e-6, phase_s=0.25e-3, jitter_s_rms=sigma)
    rng = np.random.default_rng(7)
    periods, duties, jitters = [], [], []
    for _ in range(400):
        synthetic = synthesize(wave, ACQ, rng=rng)
        result = analyze_record(synthetic.record)
        assert result.ok and result.cycles == n_cycles
        # The analysis fits exactly the edges the synthesis placed (interpolation is exact here).
        assert result.rising_s == pytest.approx(synthetic.rising_s, abs=1e-12)
        periods.append(result.period_s)
        duties.append(result.duty)
        jitters.append(result.edge_jitter_s_rms)
    n = n_cycles
    assert_variance(np.array(periods), 1e-3, sigma * math.sqrt(12.0 / (n * (n + 1) * (n + 2))))
    # Duty = mean of 20 or 21 high times / T; each high time has variance 2 sigma^2 (two independent edges);
    # 20 high pulses start at the 20 rising edges before the last (the last rising edge at 20.25 ms has its
    # falling edge at 20.65 ms, outside the 20.5 ms record).
    assert_variance(np.array(duties), 0.4, math.sqrt(2.0 / 20) * sigma / 1e-3)
    # rms residual with M - 2 dof estimates sigma; pooled over records it is chi-square with 400 (M - 2) dof.
    low, high = variance_interval(400 * (n + 1 - 2))
    assert low < float(np.mean(np.square(jitters))) / sigma**2 < high


def test_fit_period_matches_ols_variance_and_beats_three_edges_by_the_expected_factor() -> None:
    # Three-edge estimate (t2 - t0) / 2 has variance 2 sigma^2 / 4. Ratio of standard deviations to the
    # OLS slope: sqrt(N (N+1) (N+2) / 24), 207 for N = 100 (same formulas as above).
    n, sigma, period, trials = 100, 1e-9, 1e-6, 2000
    rng = np.random.default_rng(11)
    k = np.arange(n + 1)
    lsq, three, residual_sq, cycle_sq = [], [], [], []
    for _ in range(trials):
        t = 3.0 + k * period + rng.normal(0.0, sigma, n + 1)  # far from zero: centring matters
        fit = fit_period(t)
        lsq.append(fit.period_s)
        three.append((t[2] - t[0]) / 2)
        residual_sq.append(fit.edge_jitter_s_rms**2)
        cycle_sq.append(fit.cycle_jitter_s_rms**2)
    lsq, three = np.array(lsq), np.array(three)
    sigma_lsq = sigma * math.sqrt(12.0 / (n * (n + 1) * (n + 2)))
    assert_variance(lsq, period, sigma_lsq)
    assert_variance(three, period, sigma / math.sqrt(2.0))
    # Ratio of the two variance estimates: F(trials, trials) about the predicted ratio.
    f_ratio = (np.mean((three - period) ** 2) / np.mean((lsq - period) ** 2)) / (n * (n + 1) * (n + 2) / 24.0)
    assert stats.f.ppf(P / 2, trials, trials) < f_ratio < stats.f.ppf(1 - P / 2, trials, trials)
    low, high = variance_interval(trials * (n + 1 - 2))
    assert low < np.mean(residual_sq) / sigma**2 < high
    # Cycle-to-cycle: p_{k+1} - p_k = e_{k+2} - 2 e_{k+1} + e_k has variance 6 sigma^2 (derived). Neighbouring
    # second differences are correlated, so no chi-square: the standard error of this mean is ~0.5 %.
    assert np.mean(cycle_sq) / (6 * sigma**2) == pytest.approx(1.0, abs=0.03)


def test_fit_period_standard_error_is_the_residual_over_root_sxx() -> None:
    t = np.array([0.0, 1.1, 1.9, 3.05, 4.0])
    fit = fit_period(t)
    slope, intercept = np.polyfit(np.arange(5), t, 1)  # numpy's own least squares as the reference
    assert fit.period_s == pytest.approx(slope, rel=1e-12) and fit.first_edge_s == pytest.approx(intercept)
    residual = t - (intercept + slope * np.arange(5))
    s = math.sqrt(float(residual @ residual) / 3)
    assert fit.edge_jitter_s_rms == pytest.approx(s) and fit.period_std_error_s == pytest.approx(s / math.sqrt(10))
    assert math.isnan(fit_period(np.array([0.0, 1.0])).edge_jitter_s_rms)
    with pytest.raises(UserInputError):
        fit_period(np.array([1.0]))


def test_amplitude_noise_and_jitter_scatter_the_period_and_duty_within_their_bounds() -> None:
    # Linear interpolation between samples v0, v1 with noise sigma_v moves a crossing by
    # sigma_v sqrt((1 - f)^2 + f^2) / slope, f the crossing's fraction of the sample interval (first-order
    # error propagation, derived): between sqrt(1/2) and 1 times sigma_v / slope. Added to the jitter.
    sigma_j, noise = 1e-6, 0.1  # noise 2 % of the 5 V swing
    wave = RectangleWave(period_s=1e-3, duty=0.4, rise_time_s=40e-6, phase_s=0.25e-3, jitter_s_rms=sigma_j)
    slope = 0.8 * 5.0 / 40e-6  # V/s
    acq = Acquisition(sample_rate_hz=500e3, n_samples=10_250, noise_v_rms=noise)
    rng = np.random.default_rng(5)
    results = [analyze_record(synthesize(wave, acq, rng=rng).record) for _ in range(300)]
    assert all(r.ok and r.cycles == 20 for r in results)
    periods = np.array([r.period_s for r in results])
    duties = np.array([r.duty for r in results])
    n = 20
    for estimates, truth, per_edge_factor in ((periods, 1e-3, math.sqrt(12.0 / (n * (n + 1) * (n + 2)))),
                                              (duties, 0.4, math.sqrt(2.0 / 20) / 1e-3)):
        low_sigma = per_edge_factor * math.hypot(sigma_j, math.sqrt(0.5) * noise / slope)
        high_sigma = per_edge_factor * math.hypot(sigma_j, noise / slope)
        ratio = float(np.mean((estimates - truth) ** 2))
        low, high = variance_interval(estimates.size)
        assert low * low_sigma**2 < ratio < high * high_sigma**2
        assert abs(estimates.mean() - truth) < stats.norm.ppf(1 - P / 2) * high_sigma / math.sqrt(estimates.size)


def test_hysteresis_keeps_noise_on_slow_edges_from_making_extra_edges() -> None:
    # Schmitt trigger: a band wider than the noise excursions cannot be crossed back (common practice,
    # no source). Slow edges (50 samples on each ramp) with 3 % noise cross a lone mid threshold many times.
    wave = RectangleWave(period_s=1e-3, duty=0.4, rise_time_s=80e-6, phase_s=0.25e-3)
    acq = Acquisition(sample_rate_hz=500e3, n_samples=10_250, noise_v_rms=0.15)
    synthetic = synthesize(wave, acq, rng=np.random.default_rng(3))
    volts = synthetic.record.volts
    naive = int(np.count_nonzero(np.diff(volts > 2.5)))
    true_edges = synthetic.rising_s.size + synthetic.falling_s.size
    assert naive > 1.5 * true_edges  # the contrast: a plain comparator chatters
    result = analyze_record(synthetic.record)
    assert result.ok and result.findings == ()
    assert result.rising_s.size == synthetic.rising_s.size and result.falling_s.size == synthetic.falling_s.size
    # Each edge is timed near its truth: noise / slope = 0.15 / 50 kV/s = 3 us rms per edge; 6 us is 2 samples.
    assert np.max(np.abs(result.rising_s - synthetic.rising_s)) < 5 * 3e-6
    assert np.max(np.abs(result.falling_s - synthetic.falling_s)) < 5 * 3e-6


@pytest.mark.parametrize("ramp_samples", [2.0, 2.5, 7.3])
def test_interpolation_is_exact_on_a_linear_edge_with_two_samples_on_the_ramp(ramp_samples: float) -> None:
    # Derivation: the samples k, k+1 bracketing the 50 % crossing t50 lie within one interval of it, and a
    # full-swing ramp of duration E extends E/2 either side of t50; with E >= 2 dt both samples are on the
    # same straight line, and the line through two of its points meets mid exactly at t50.
    dt = 1e-6
    rng = np.random.default_rng(int(ramp_samples * 10))
    errors = []
    for phase in rng.uniform(0.0, 1e-4, 20):  # arbitrary alignment of edges to samples
        wave = RectangleWave(period_s=1e-4 * math.pi, duty=0.37, rise_time_s=0.8 * ramp_samples * dt, phase_s=phase)
        synthetic = synthesize(wave, Acquisition(sample_rate_hz=1 / dt, n_samples=2000), rng=rng)
        result = analyze_record(synthetic.record)
        errors += [timing_errors(result.rising_s, synthetic.rising_s),
                   timing_errors(result.falling_s, synthetic.falling_s)]
    errors = np.concatenate(errors)
    assert errors.size > 200 and np.max(np.abs(errors)) < 1e-9 * dt
    # Contrast: timing an edge at the nearest sample errs by up to half a sample.
    nearest = np.round(synthetic.rising_s / dt) * dt - synthetic.rising_s
    assert np.max(np.abs(nearest)) > 0.2 * dt


def test_interpolation_error_on_a_ramp_shorter_than_two_samples_stays_within_the_budget_bound() -> None:
    # Consistency with fixture.model.uncertainty.interpolation_error_bound_s (our own derivation there,
    # brute-forced in its tests): the budget must cover what the analysis actually does.
    dt, ramp = 1e-6, 1.2e-6
    rng = np.random.default_rng(2)
    wave = RectangleWave(period_s=1e-4 * math.e, duty=0.41, rise_time_s=0.8 * ramp)
    errors = []
    for phase in rng.uniform(0.0, 1e-4, 30):
        synthetic = synthesize(wave.__class__(**{**wave.__dict__, "phase_s": phase}),
                               Acquisition(sample_rate_hz=1 / dt, n_samples=3000), rng=rng)
        errors.append(timing_errors(analyze_record(synthetic.record).rising_s, synthetic.rising_s))
    worst = float(np.max(np.abs(np.concatenate(errors))))
    bound = uncertainty.interpolation_error_bound_s(dt, ramp)
    assert 0.2 * bound < worst <= bound * (1 + 1e-9)


def test_edges_straddling_block_boundaries_are_found_once(monkeypatch: pytest.MonkeyPatch) -> None:
    synthetic = runt_record(WAVE, ACQ, rng=np.random.default_rng(4))
    record = synthetic.record
    thresholds = Thresholds.from_levels(0.0, 5.0)
    whole = find_edges(record.volts, thresholds)
    for block in (7, 64, 1000):  # 7 puts many ramps across boundaries
        monkeypatch.setattr(edges_module, "CHUNK_SAMPLES", block)
        split = find_edges(record.volts, thresholds)
        for name in ("rising", "falling", "runts"):
            assert np.array_equal(getattr(split, name), getattr(whole, name)), (block, name)


def test_time_axis_follows_t0_and_integer_adc_codes_give_the_same_edges() -> None:
    synthetic = synthesize(WAVE, ACQ, rng=np.random.default_rng(1))
    base = analyze_record(synthetic.record)
    shifted = analyze_record(ScopeRecord(synthetic.record.volts, ACQ.sample_interval_s, t0_s=-1.5))
    assert shifted.rising_s == pytest.approx(base.rising_s - 1.5, abs=1e-12)
    assert shifted.period_s == pytest.approx(base.period_s, rel=1e-9)
    codes = np.rint(synthetic.record.volts * 40).astype(np.int16)  # 25 mV per code, as an ADC returns
    coded = analyze_record(ScopeRecord(codes, ACQ.sample_interval_s))
    assert coded.ok and coded.rising_s.size == base.rising_s.size
    assert coded.period_s == pytest.approx(1e-3, rel=1e-4)


def test_levels_and_noise_are_estimated_from_the_record() -> None:
    acq = Acquisition(sample_rate_hz=500e3, n_samples=200_000, noise_v_rms=0.05)
    wave = RectangleWave(period_s=1e-3, duty=0.2, low_v=0.3, high_v=3.3, rise_time_s=4e-6)
    levels = analyze_record(synthesize(wave, acq, rng=np.random.default_rng(8)).record).levels
    # Median of n normal samples: standard error 1.2533 sigma / sqrt(n) (large-sample result, from memory);
    # the high half holds ~20 % of the 32768 spread samples.
    assert levels.low_v == pytest.approx(0.3, abs=4 * 1.2533 * 0.05 / math.sqrt(0.8 * 32768))
    assert levels.high_v == pytest.approx(3.3, abs=4 * 1.2533 * 0.05 / math.sqrt(0.2 * 32768))
    # MAD-based sigma: standard error ~1.65 sigma / sqrt(n) (asymptotic efficiency 37 %, from memory).
    assert levels.noise_v_rms == pytest.approx(0.05, rel=4 * 1.65 / math.sqrt(32768))


def test_given_thresholds_are_used_as_given() -> None:
    record = synthesize(WAVE, ACQ, rng=np.random.default_rng(1)).record
    result = analyze_record(record, AnalysisOptions(threshold_v=1.0, hysteresis_v=0.4))
    assert result.thresholds == Thresholds(0.8, 1.0, 1.2, "given")
    # A linear 0 -> 5 V ramp of 10 us crosses 1.0 V 4 us before it crosses 2.5 V; falling edges 4 us late.
    assert result.rising_s == pytest.approx(analyze_record(record).rising_s - 3e-6, abs=1e-12)
    assert result.high_time_s == pytest.approx(0.4e-3 + 6e-6, rel=1e-9)


# -- diagnoses ---------------------------------------------------------------------------------------------

LEVELS = AnalysisOptions(expected_levels_v=(0.0, 5.0))
NOISY = Acquisition(sample_rate_hz=500e3, n_samples=10_250, noise_v_rms=0.05)


@pytest.mark.parametrize("options", [None, LEVELS], ids=["own levels", "expected levels"])
def test_a_noisy_clean_record_gives_no_diagnosis(options: AnalysisOptions | None) -> None:
    result = analyze_record(synthesize(WAVE, NOISY, rng=np.random.default_rng(9)).record, options)
    assert result.ok and result.findings == () and result.runts_s.size == 0 and result.glitches_s.size == 0


@pytest.mark.parametrize("acq", [ACQ, NOISY, Acquisition(500e3, 10_250, noise_v_rms=0.004, lsb_v=0.01)],
                         ids=["flat", "noise only", "noise over three ADC codes"])
def test_a_record_without_two_levels_is_no_signal(acq: Acquisition) -> None:
    result = analyze_record(flat_record(1.7, acq, rng=np.random.default_rng(1)))
    assert result.diagnosis is Diagnosis.NO_SIGNAL and not result.ok
    assert math.isnan(result.period_s) and result.thresholds is None
    assert "1.70 V" in result.message


@pytest.mark.parametrize(("level", "diagnosis"), [("high", Diagnosis.STUCK_HIGH), ("low", Diagnosis.STUCK_LOW)])
def test_a_stuck_output_is_told_apart_against_expected_levels(level: str, diagnosis: Diagnosis) -> None:
    record = stuck_record(WAVE, level, NOISY, rng=np.random.default_rng(2))
    assert analyze_record(record, LEVELS).diagnosis is diagnosis
    # Without expected levels a flat record cannot say which logic level it sits at.
    assert analyze_record(record).diagnosis is Diagnosis.NO_SIGNAL


def test_a_record_sitting_between_the_expected_levels_is_no_signal() -> None:
    result = analyze_record(flat_record(2.4, NOISY, rng=np.random.default_rng(3)), LEVELS)
    assert result.diagnosis is Diagnosis.NO_SIGNAL and "between the thresholds" in result.message


def test_a_floating_line_whose_noise_reaches_the_thresholds_is_no_signal_not_edges() -> None:
    # Noise of 0.2 V rms about 2.5 V reaches the 2.0 / 3.0 V thresholds (2.5 sigma) every few hundred samples.
    record = flat_record(2.5, Acquisition(sample_rate_hz=500e3, n_samples=10_250, noise_v_rms=0.2),
                         rng=np.random.default_rng(3))
    assert np.count_nonzero(record.volts > 3.0) > 20 and np.count_nonzero(record.volts < 2.0) > 20
    result = analyze_record(record, LEVELS)
    assert result.diagnosis is Diagnosis.NO_SIGNAL and result.rising_s.size == 0


def test_runt_pulses_are_found_where_they_are_and_do_not_disturb_the_period() -> None:
    synthetic = runt_record(WAVE, NOISY, rng=np.random.default_rng(4), count=3, height=0.55)
    result = analyze_record(synthetic.record)
    assert result.diagnosis is Diagnosis.RUNT_PULSES and [f.diagnosis for f in result.findings] == [
        Diagnosis.RUNT_PULSES]
    assert result.runts_s.size == 3
    # Each runt sits in the middle of a low time: 0.4 + 0.3 ms after a rising edge, within its 180 us width.
    offsets = (result.runts_s - 0.25e-3) % 1e-3
    assert np.all(np.abs(offsets - 0.7e-3) < 0.1e-3)
    assert result.period_s == pytest.approx(1e-3, rel=1e-4)


def test_a_pulse_short_of_mid_is_not_a_runt() -> None:
    # Runts must cross mid (the definition keeps noise at the near threshold from counting).
    synthetic = runt_record(WAVE, NOISY, rng=np.random.default_rng(4), count=3, height=0.45)
    assert analyze_record(synthetic.record).ok


def test_glitches_are_found_and_counted() -> None:
    synthetic = glitch_record(WAVE, NOISY, rng=np.random.default_rng(5), count=3, width_s=30e-6)
    result = analyze_record(synthetic.record)
    assert result.diagnosis is Diagnosis.GLITCHES and result.glitches_s.size == 3
    assert np.all(np.abs((result.glitches_s - 0.25e-3) % 1e-3 - (0.7e-3 - 15e-6)) < 5e-6)
    # An explicit minimum width below the glitch width accepts them as pulses.
    assert analyze_record(synthetic.record, AnalysisOptions(min_pulse_s=20e-6)).diagnosis is not Diagnosis.GLITCHES


def test_a_record_shorter_than_two_cycles_is_too_short() -> None:
    acq = Acquisition(sample_rate_hz=500e3, n_samples=1_100)  # 2.2 ms: rising edges at 0.25 and 1.25 ms
    result = analyze_record(synthesize(WAVE, acq, rng=np.random.default_rng(6)).record)
    assert result.diagnosis is Diagnosis.TOO_SHORT and result.cycles == 1 and math.isnan(result.period_s)
    assert result.rising_s.size == 2


def test_a_weak_output_that_never_reaches_the_high_threshold_gives_runts_not_a_short_record() -> None:
    # Slew-limited 10-90 % rise of 100 us (40 kV/s) for a 70 us high time: the output turns back at 2.8 V,
    # past mid (2.5 V) but short of the upper threshold (3.0 V) of the expected 0/5 V levels.
    wave = RectangleWave(period_s=1e-3, duty=0.07, rise_time_s=100e-6, phase_s=0.25e-3)
    result = analyze_record(synthesize(wave, ACQ, rng=np.random.default_rng(1)).record, LEVELS)
    assert [f.diagnosis for f in result.findings] == [Diagnosis.RUNT_PULSES, Diagnosis.TOO_SHORT]
    assert result.runts_s.size == 21 and result.rising_s.size == 0


def test_malformed_input_is_a_user_input_error() -> None:
    with pytest.raises(UserInputError):
        ScopeRecord(np.zeros((2, 5)), 1e-6)
    with pytest.raises(UserInputError):
        ScopeRecord(np.zeros(5), 0.0)
    with pytest.raises(UserInputError):
        AnalysisOptions(threshold_v=1.0)
    with pytest.raises(UserInputError):
        AnalysisOptions(expected_levels_v=(5.0, 0.0))
    with pytest.raises(UserInputError):
        analyze_record(ScopeRecord(np.full(10, np.nan), 1e-6))
    # One bad sample anywhere in a long record, not only among the samples the levels are estimated from.
    volts = synthesize(WAVE, Acquisition(sample_rate_hz=500e3, n_samples=1_000_000),
                       rng=np.random.default_rng(1)).record.volts
    volts[777_777] = np.nan
    with pytest.raises(UserInputError, match="finite samples"):
        analyze_record(ScopeRecord(volts, ACQ.sample_interval_s))
