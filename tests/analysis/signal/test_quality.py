"""Recording quality checks on constructed signals that just pass and just fail."""

import math
import re

import numpy as np
import pytest
import soundfile as sf

from analysis.errors import ParameterError
from analysis.io import read_audio
from analysis.signal._common import runs
from analysis.signal.quality import (
    CHECK_NAMES,
    LEVEL_FLOOR_DBFS,
    QCResult,
    check_clipping,
    check_dc_offset,
    check_dropouts,
    check_duration,
    check_markers,
    check_sample_rate,
    check_silence,
    check_snr,
    run_quality_checks,
)

FS = 48000.0


def _noise(n, sigma, seed):
    return np.random.default_rng(seed).normal(0.0, sigma, n)


# ---------------------------------------------------------------- clipping

def _clipped_sine(level, n=FS, f_hz=997.0):
    t = np.arange(int(n)) / FS
    return np.clip(level * np.sin(2 * np.pi * f_hz * t + 0.1), -1.0, 1.0)


def test_clipped_sine_fraction_matches_the_arcsine_formula():
    x = _clipped_sine(1.5)
    # REFERENCES.md [C]: a sine driven to 1.5x full scale and clipped spends 1 - (2/π)·asin(1/1.5) = 0.5354 of
    # its samples at the rails.
    expected = 1 - (2 / math.pi) * math.asin(1 / 1.5)
    assert expected == pytest.approx(0.5354, abs=1e-4)
    result = check_clipping(x, clip_level=1.0)
    assert result.check == "clipping"
    assert result.value == pytest.approx(expected, abs=1e-3)
    assert not result.passed
    # With the default level 0.999 the samples between 0.999 and 1.0 count too: same formula at |x| = 0.999.
    expected_999 = 1 - (2 / math.pi) * math.asin(0.999 / 1.5)
    assert check_clipping(x).value == pytest.approx(expected_999, abs=1e-3)


def test_clipping_just_passes_and_just_fails():
    n = 60000
    x = 0.5 * np.sin(2 * np.pi * 440.0 * np.arange(n) / FS)
    for start in (1000, 20000):
        x[start:start + 3] = 1.0
    result = check_clipping(x, clip_level=0.999, min_run=3, max_fraction=1e-4)
    assert result.value == pytest.approx(6 / n)  # two runs of 3 samples: exactly at the limit
    assert result.passed
    assert result.detail == "0.01% of samples in 2 runs of 3 or more samples at or above 0.999 FS (limit 0.01%)."

    x[40000:40003] = -1.0
    result = check_clipping(x, clip_level=0.999, min_run=3, max_fraction=1e-4)
    assert result.value == pytest.approx(9 / n)
    assert not result.passed


def test_clipping_ignores_runs_shorter_than_min_run():
    x = np.zeros(1000)
    x[100:102] = 1.0  # two samples at the rail: a peak, not a clipped run
    x[500] = -1.0
    result = check_clipping(x, min_run=3, max_fraction=0.0)
    assert result.value == 0.0
    assert result.passed


def test_clipping_counts_infinite_samples_and_survives_nan():
    x = np.zeros(100)
    x[10:15] = np.inf
    x[50:60] = np.nan
    result = check_clipping(x, min_run=3)
    assert result.value == pytest.approx(5 / 100)
    assert not result.passed


# Clipping below full scale, at the recording's own peaks. A sine x = A·sin(θ) with θ uniform over a period spends
# a fraction (1/π)·acos(c/A) of its samples at or above c (0 <= c <= A): the arcsine distribution (standard result,
# written from memory; the full-scale test above uses the same law).

def _sine(amplitude, *, n=int(FS), f_hz=997.0, phase=0.1):
    return amplitude * np.sin(2 * np.pi * f_hz * np.arange(n) / FS + phase)


def _q16(x):
    """Round to a 16-bit file's steps the way a writer that scales by 32767 does, and read back as /32768."""
    return np.clip(np.round(np.asarray(x) * 32767.0), -32768, 32767) / 32768.0


def test_clipping_at_nine_tenths_of_full_scale_is_found_at_the_own_peaks():
    x = np.clip(_sine(1.2), -0.9, 0.9)
    assert np.abs(x).max() < 0.999  # nothing reaches the full-scale level
    expected = (2 / math.pi) * math.acos(0.9 / 1.2)  # arcsine law, both polarities
    result = check_clipping(x)
    assert not result.passed
    assert result.value == pytest.approx(expected, abs=1e-3)
    assert "flattened at the recording's own peaks of +0.900 and -0.900 FS" in result.detail


def test_one_sided_clipping_names_only_the_clipped_side():
    x = np.minimum(_sine(1.2), 0.9)  # the positive half clips at 0.9 FS, the negative half swings to -1.2 FS
    result = check_clipping(x, clip_level=1.5)
    assert not result.passed
    assert result.value == pytest.approx((1 / math.pi) * math.acos(0.9 / 1.2), abs=1e-3)
    assert re.fullmatch(r"\d+ samples \([\d.]+%\) in \d+ runs flattened at the recording's own positive peak of "
                        r"0\.900 FS; also .* \(limit 0\.01%\)\.", result.detail), result.detail
    assert "negative" not in result.detail and "-1.200" not in result.detail


@pytest.mark.parametrize("fmt", ["FLAC", "WAV"])
def test_sixteen_bit_file_clipped_just_below_the_full_scale_level(tmp_path, fmt):
    # A recorder that clips at 0.999 of full scale stores 32734 of 32768: 0.99896 FS, under clip_level 0.999.
    ints = np.clip(np.round(_sine(1.1) * 32767.0), -32734, 32734).astype(np.int16)
    path = tmp_path / f"clipped.{fmt.lower()}"
    sf.write(path, ints, int(FS), format=fmt, subtype="PCM_16")
    x = read_audio(path).channel(0)
    assert float(np.abs(x).max()) == 32734 / 32768 < 0.999
    # Samples that round to 32734 or beyond: 1.1·32767·|sin θ| >= 32733.5, by the arcsine law.
    expected = (2 / math.pi) * math.acos(32733.5 / (1.1 * 32767.0))
    result = check_clipping(x, clip_level=0.999)
    assert not result.passed
    assert result.value == pytest.approx(expected, abs=1e-3)
    assert "own peaks of +0.999 and -0.999 FS" in result.detail


def _impact(peak=0.95, f_hz=3000.0, decay_s=0.01, start_s=0.5, n=int(FS)):
    t = np.arange(n) / FS - start_s
    return np.where(t >= 0, peak * np.sin(2 * np.pi * f_hz * np.maximum(t, 0)) * np.exp(-np.maximum(t, 0) / decay_s),
                    0.0)


def _noise_with_repeated_peak():
    x = _q16(_noise(int(FS), 0.2, seed=21))
    top = int(np.argmax(x))
    x[(top + 20000) % x.size] = x[top]  # the peak value occurs twice, far apart
    return x


def _noise_burst():
    x = _noise(int(FS), 0.001, seed=24)
    x[20000:24800] = _noise(4800, 0.25, seed=23)
    return _q16(x)


def _slow_sine_16_bit():
    x = _q16(_sine(0.9, n=2 * int(FS), f_hz=20.0))
    _, lengths = runs(x == x.max())
    # Its crests hold runs of 6 equal samples, over the limit in all: a rounded top that only looks flat.
    assert lengths[lengths >= 3].sum() / x.size > 1e-4
    return x


CLEAN_LOUD = {
    "sine 997 Hz at 0.99 FS": lambda: _sine(0.99),
    "sine 997 Hz at 0.95 FS in 16 bits": lambda: _q16(_sine(0.95)),
    "sine 1 kHz: 48 samples a period, every value repeated each period": lambda: _q16(_sine(0.9, f_hz=1000.0,
                                                                                            phase=0.0)),
    "sine 440 Hz: 11 periods in 1200 samples": lambda: _q16(_sine(0.9, n=60000, f_hz=440.0)),
    "sine 20 Hz at 0.9 FS in 16 bits": _slow_sine_16_bit,
    "Gaussian noise, sd 0.2 FS": lambda: _noise(2 * int(FS), 0.2, seed=22),
    "noise burst, sd 0.25 FS for 0.1 s": _noise_burst,
    "one loud impact, 0.95 FS": lambda: _q16(_impact()),
    "16-bit noise whose peak value occurs twice": _noise_with_repeated_peak,
}


@pytest.mark.parametrize("name", list(CLEAN_LOUD))
def test_clean_loud_recordings_pass(name):
    x = CLEAN_LOUD[name]()
    assert np.abs(x).max() > 0.5  # loud: the own-peak counts look at every one of them
    result = check_clipping(x)
    assert result.passed, result.detail
    assert result.value <= 1e-4


def test_a_clean_sine_piles_up_by_the_arcsine_law_when_the_ratio_is_set_too_low():
    # Amplitude 0.78125 = 25600/32768, so that a bin of 1% of the peak is a whole 256 steps of 2^-15.
    x = _sine(0.78125)
    a98, a99 = math.acos(0.98), math.acos(0.99)
    # Per the arcsine law the top 1% holds (2/π)·acos(0.99) of the samples and the next 1% (2/π)·(acos(0.98) -
    # acos(0.99)): 2.41 times fewer, under the default ratio of 3 ...
    assert a99 / (a98 - a99) == pytest.approx(1 + math.sqrt(2), abs=0.01)
    assert check_clipping(x).value == 0.0
    # ... but over a ratio of 2, by (2/π)·(acos(0.99) - 2·(acos(0.98) - acos(0.99))).
    result = check_clipping(x, pileup_ratio=2.0)
    assert not result.passed
    assert result.value == pytest.approx((2 / math.pi) * (3 * a99 - 2 * a98), abs=5e-4)
    assert "piled up at the recording's own peaks of +0.781 and -0.781 FS beyond 2 times" in result.detail
    # The profile's keywords reach the check: a 2% bin gives (2/π)·(acos(0.98) - 2·(acos(0.96) - acos(0.98))).
    results = run_quality_checks(x, sample_rate_hz=FS, sample_rate_min_hz=44100, sample_rate_max_hz=96000,
                                 min_duration_s=0.5, clip_pileup_ratio=2.0, clip_bin_width=0.02)
    assert results[2].value == pytest.approx((2 / math.pi) * (3 * a98 - 2 * math.acos(0.96)), abs=5e-4)


def test_clipping_blurred_by_noise_is_found_by_the_histogram_and_by_a_wider_tolerance():
    x = np.clip(_sine(1.2), -0.9, 0.9) + np.random.default_rng(25).uniform(-2e-4, 2e-4, int(FS))
    result = check_clipping(x)
    assert not result.passed and "piled up" in result.detail and "flattened" not in result.detail
    # Arcsine law: all samples in the top 1% (>= 0.891 FS), less 3 times those of the next 1% down.
    a1, a2 = math.acos(0.891 / 1.2), math.acos(0.882 / 1.2)
    assert result.value == pytest.approx((2 / math.pi) * (a1 - 3 * (a2 - a1)), abs=2e-3)
    results = run_quality_checks(x, sample_rate_hz=FS, sample_rate_min_hz=44100, sample_rate_max_hz=96000,
                                 min_duration_s=0.5, clip_peak_tolerance=1e-3)
    assert "flattened at the recording's own peaks" in results[2].detail


def test_clipping_in_a_recording_with_silence():
    x = np.zeros(int(FS))
    burst = slice(20000, 24800)
    x[burst] = _sine(0.8, n=4800)
    assert check_clipping(x).passed and check_clipping(x).value == 0.0
    x[burst] = np.clip(_sine(0.8, n=4800), -0.5, 0.5)
    result = check_clipping(x)
    assert not result.passed
    # 0.1 s of the 1 s recording, of which the arcsine share clips
    assert result.value == pytest.approx(0.1 * (2 / math.pi) * math.acos(0.5 / 0.8), abs=5e-4)
    assert "own peaks of +0.500 and -0.500 FS" in result.detail
    silent = check_clipping(np.zeros(int(FS)))
    assert silent.passed and silent.value == 0.0


def test_clipping_at_full_scale_names_every_count_that_fired():
    result = check_clipping(_clipped_sine(1.5))
    assert result.detail.startswith("53.")  # the full-scale count: 1 - (2/π)·asin(0.999/1.5) = 53.6%
    assert "at or above 0.999 FS" in result.detail and "; also " in result.detail
    assert "flattened at the recording's own peaks of +1.000 and -1.000 FS" in result.detail


# ---------------------------------------------------------------- dropout

def test_ten_ms_of_zeros_in_noise_is_a_dropout():
    x = _noise(int(FS), 0.01, seed=1)
    x[20000:20480] = 0.0  # 480 samples = 10 ms at 48 kHz
    result = check_dropouts(x, sample_rate_hz=FS, max_dropout_s=0.002)
    assert result.check == "dropout"
    assert result.value == pytest.approx(0.010)
    assert not result.passed
    assert "10.0 ms" in result.detail and "1 run longer" in result.detail


def test_dropout_at_the_limit_passes_and_one_sample_more_fails():
    x = _noise(int(FS), 0.01, seed=2)
    x[1000:1096] = 0.0  # 96 samples = 2.0 ms
    assert check_dropouts(x, sample_rate_hz=FS, max_dropout_s=0.002).passed
    x[1096] = 0.0
    result = check_dropouts(x, sample_rate_hz=FS, max_dropout_s=0.002)
    assert result.value == pytest.approx(97 / FS)
    assert not result.passed


# ---------------------------------------------------------------- DC offset

def test_dc_offset_just_passes_and_just_fails():
    square = np.tile([0.1, -0.1], 5000)  # mean exactly 0
    ok = check_dc_offset(square + 0.0099, max_dc_offset=0.01)
    assert ok.value == pytest.approx(0.0099, rel=1e-9)
    assert ok.passed
    bad = check_dc_offset(square - 0.0101, max_dc_offset=0.01)
    assert bad.value == pytest.approx(0.0101, rel=1e-9)
    assert not bad.passed


# ---------------------------------------------------------------- silence

def test_silence_level_of_a_sine_and_the_limit():
    t = np.arange(int(FS)) / FS
    # A sine of amplitude A has RMS A/√2 (textbook): a full-scale sine reads 20·log10(1/√2) = -3.0103 dB re FS.
    full = check_silence(np.sin(2 * np.pi * 1000.0 * t))
    assert full.value == pytest.approx(-3.0103, abs=1e-3)
    assert full.passed
    amp_pass = math.sqrt(2) * 10 ** (-69.9 / 20)
    amp_fail = math.sqrt(2) * 10 ** (-70.1 / 20)
    quiet = check_silence(amp_pass * np.sin(2 * np.pi * 1000.0 * t), min_rms_dbfs=-70.0)
    assert quiet.value == pytest.approx(-69.9, abs=1e-3) and quiet.passed
    silent = check_silence(amp_fail * np.sin(2 * np.pi * 1000.0 * t), min_rms_dbfs=-70.0)
    assert silent.value == pytest.approx(-70.1, abs=1e-3) and not silent.passed


def test_all_zero_signal_reads_the_finite_floor_and_fails():
    result = check_silence(np.zeros(4800))
    assert result.value == LEVEL_FLOOR_DBFS
    assert math.isfinite(result.value)
    assert not result.passed


# ---------------------------------------------------------------- duration, sample rate, markers

def test_duration_just_passes_and_just_fails():
    assert check_duration(38400, sample_rate_hz=FS, min_duration_s=0.8).passed  # 0.8 s exactly
    short = check_duration(38399, sample_rate_hz=FS, min_duration_s=0.8)
    assert not short.passed
    assert short.value == pytest.approx(38399 / FS)
    assert "0.800 s" in short.detail


def test_sample_rate_bounds():
    assert check_sample_rate(44100, min_hz=44100, max_hz=96000).passed
    low = check_sample_rate(32000, min_hz=44100, max_hz=96000)
    assert not low.passed and low.limit == 44100
    high = check_sample_rate(192000, min_hz=44100, max_hz=96000)
    assert not high.passed and high.limit == 96000
    assert "outside the allowed 44100–96000 Hz" in high.detail


def test_markers_count_and_missing_source():
    assert check_markers(2, 2, source="marker channel 1").passed
    wrong = check_markers(1, 2, source="marker channel 1")
    assert not wrong.passed
    assert wrong.detail == "1 marker edge on marker channel 1 (2 expected)."
    gone = check_markers(0, 2, source="marker channel 1", problem="the file has 1 channel")
    assert not gone.passed and math.isnan(gone.value)
    assert "the file has 1 channel" in gone.detail


# ---------------------------------------------------------------- SNR

def _tone_burst_in_noise(burst_rms, noise_rms, start_s, seed, length_s=0.02, n=int(FS)):
    x = _noise(n, noise_rms, seed)
    i0, i1 = int(start_s * FS), int((start_s + length_s) * FS)
    t = np.arange(i1 - i0) / FS
    x[i0:i1] += math.sqrt(2) * burst_rms * np.sin(2 * np.pi * 2000.0 * t)
    return x


def test_snr_of_a_burst_twenty_db_over_the_noise():
    # By construction: burst RMS 0.01 over noise RMS 0.001 is 20 dB; with the noise under the burst the level
    # difference is 10·log10((0.01² + 0.001²)/0.001²) = 20.04 dB (uncorrelated powers add).
    x = _tone_burst_in_noise(0.01, 0.001, start_s=0.5, seed=3)
    result = check_snr(x, sample_rate_hz=FS, first_event_s=0.5, min_snr_db=10.0)
    assert result.check == "snr"
    assert result.value == pytest.approx(10 * math.log10(101), abs=1.5)
    assert result.passed
    # A burst of RMS 0.002 reads 10·log10((0.002² + 0.001²)/0.001²) = 6.99 dB and fails a 10 dB limit.
    weak = check_snr(_tone_burst_in_noise(0.002, 0.001, start_s=0.5, seed=4), sample_rate_hz=FS,
                     first_event_s=0.5, min_snr_db=10.0)
    assert weak.value == pytest.approx(10 * math.log10(5), abs=1.5)
    assert not weak.passed


def test_snr_with_too_short_a_background_fails_clearly():
    x = _tone_burst_in_noise(0.01, 0.001, start_s=0.01, seed=5)
    result = check_snr(x, sample_rate_hz=FS, first_event_s=0.01)
    assert not result.passed
    assert math.isnan(result.value)
    assert result.detail.startswith("Not evaluated: only 5.0 ms of quiet signal before the first event at 0.010 s")


def test_snr_with_the_event_on_the_last_sample_does_not_crash():
    x = _noise(48000, 0.001, seed=9)
    result = check_snr(x, sample_rate_hz=FS, first_event_s=47999.6 / FS)
    assert math.isfinite(result.value)
    short = check_snr(x, sample_rate_hz=FS, first_event_s=0.5, event_length_s=1e-9)
    assert math.isfinite(short.value)


def test_snr_with_an_event_outside_the_recording_fails():
    x = _noise(4800, 0.001, seed=6)
    for t0 in (2.0, float("nan"), -0.1):
        result = check_snr(x, sample_rate_hz=FS, first_event_s=t0)
        assert not result.passed and "not inside the recording" in result.detail


# ---------------------------------------------------------------- non-finite input, order, parameters

def test_non_finite_input_does_not_crash_and_fails_level_checks():
    x = _noise(48000, 0.01, seed=7)
    x[100] = np.nan
    x[200] = np.inf
    for result in (check_dc_offset(x), check_silence(x),
                   check_snr(x, sample_rate_hz=FS, first_event_s=0.5)):
        assert not result.passed
        assert math.isnan(result.value)
        assert "2 of 48000 samples are not finite" in result.detail
    all_nan = np.full(48000, np.nan)
    results = run_quality_checks(all_nan, sample_rate_hz=FS, sample_rate_min_hz=44100, sample_rate_max_hz=96000,
                                 min_duration_s=0.8)
    assert all(isinstance(r, QCResult) for r in results)


def test_run_quality_checks_fixed_order_and_profile_keywords():
    x = _noise(int(FS), 0.01, seed=8)
    results = run_quality_checks(x, sample_rate_hz=FS, sample_rate_min_hz=44100, sample_rate_max_hz=96000,
                                 min_duration_s=0.8, clip_level=0.999, clip_min_run=3, max_clipped_fraction=1e-4,
                                 max_dropout_s=0.002, max_dc_offset=0.01, min_rms_dbfs=-70.0)
    assert [r.check for r in results] == ["sample_rate", "duration", "clipping", "dropout", "dc_offset", "silence"]
    assert all(r.passed is True for r in results)
    assert all(type(r.value) is float and type(r.limit) is float for r in results)
    assert set(r.check for r in results) <= set(CHECK_NAMES)


def test_empty_signal_fails_without_crashing():
    for result in (check_clipping(np.zeros(0)), check_dropouts(np.zeros(0), sample_rate_hz=FS),
                   check_dc_offset(np.zeros(0)), check_silence(np.zeros(0))):
        assert not result.passed and "no samples" in result.detail


@pytest.mark.parametrize("call, match", [
    (lambda: check_clipping(np.zeros(10), clip_level=0), r"clip_level must be a finite number > 0; got 0"),
    (lambda: check_clipping(np.zeros(10), min_run=0), r"min_run must be an integer >= 1; got 0"),
    (lambda: check_clipping(np.zeros(10), max_fraction=2),
     r"max_fraction must be a finite number >= 0 and <= 1; got 2"),
    (lambda: check_clipping(np.zeros(10), peak_tolerance=0),
     r"peak_tolerance must be a finite number > 0 and <= 0.01; got 0"),
    (lambda: check_clipping(np.zeros(10), bin_width=0.6),
     r"bin_width must be a finite number > 0 and <= 0.5; got 0.6"),
    (lambda: check_clipping(np.zeros(10), pileup_ratio=0.5), r"pileup_ratio must be a finite number >= 1; got 0.5"),
    (lambda: check_dropouts(np.zeros(10), sample_rate_hz=-1), r"sample_rate_hz must be a finite number > 0; got -1"),
    (lambda: check_silence(np.zeros((2, 5))), r"x must be a 1-D array of samples; got an array of shape \(2, 5\)"),
    (lambda: check_sample_rate(48000, min_hz=44100, max_hz=100), r"max_hz must be a finite number >= 44100; got 100"),
])
def test_parameter_errors_name_the_parameter_and_value(call, match):
    with pytest.raises(ParameterError, match=match):
        call()


@pytest.mark.parametrize("gap_bins", [1, 3, 10, 50, 200])
def test_own_peak_counts_match_a_plain_histogram_however_far_the_bin_below(gap_bins):
    # The counts read the histogram's top first and go further down only when needed: they must equal the plain
    # count over all samples (numpy's floor of each distance below the peak; the end bin against the nearest
    # occupied bin below it), with the samples below the pile 1 to 200 coarse bins (1 % of the peak each) down.
    from analysis.signal.quality import PEAK_TOLERANCE, _side

    rng = np.random.default_rng(gap_bins)
    peak, ratio = 0.6, 3.0
    y = np.concatenate([np.full(40, peak), peak * (1 - 0.01 * gap_bins) - rng.uniform(0, 0.004, 30),
                        rng.uniform(-0.1, 0.1, 5000)])
    rng.shuffle(y)
    side = _side(y, "+", tolerance=PEAK_TOLERANCE, run=3, bin_width=0.01, ratio=ratio)
    d = peak - y
    plain = {}
    for bin_fs in (PEAK_TOLERANCE, round(0.01 * peak / PEAK_TOLERANCE) * PEAK_TOLERANCE):
        steps = np.floor(d[d >= bin_fs] / bin_fs)
        end, below = int(np.count_nonzero(d < bin_fs)), int(np.count_nonzero(steps == steps.min()))
        plain[bin_fs] = (end, below, math.floor(end - ratio * below))
    assert (side.pile.end, side.pile.below, side.pile.excess) == plain[side.pile.bin_fs]
    assert side.pile.excess == max(v[2] for v in plain.values())


def test_runs_of_a_mask_are_every_run_with_its_start_and_length():
    # Against a plain loop over the samples.
    rng = np.random.default_rng(11)
    for mask in (rng.random(5000) < p for p in (0.0, 0.01, 0.5, 0.99, 1.0)):
        expected, i = [], 0
        while i < mask.size:
            if mask[i]:
                j = i
                while j < mask.size and mask[j]:
                    j += 1
                expected.append((i, j - i))
                i = j
            else:
                i += 1
        starts, lengths = runs(mask)
        assert starts.dtype == np.int64 and lengths.dtype == np.int64
        assert list(zip(starts.tolist(), lengths.tolist())) == expected
