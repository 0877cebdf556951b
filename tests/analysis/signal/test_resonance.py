import math

import numpy as np
import pytest

from analysis.errors import ParameterError
from analysis.signal.resonance import interpolate_peak, resonances

FS = 48000


def damped_sine(f_hz, tau_s, *, dur_s=0.3, onset_s=0.05, phase=0.3, fs=FS):
    t = np.arange(int(dur_s * fs)) / fs
    x = np.zeros_like(t)
    on = t >= onset_s
    x[on] = 0.5 * np.exp(-(t[on] - onset_s) / tau_s) * np.sin(2 * np.pi * f_hz * (t[on] - onset_s) + phase)
    return x


@pytest.mark.parametrize("f_hz, tau_s", [(1183.3, 0.03), (2310.0, 0.012), (5207.7, 0.02), (9110.0, 0.008)])
def test_damped_sines_give_their_frequency_and_decay(f_hz, tau_s):
    # A damped sine x = A·exp(-t/τ)·sin(2πft) has amplitude decay rate 1/τ and, for a second-order resonance,
    # half-power bandwidth 1/(πτ) (standard result for a Lorentzian line, from memory).
    x = damped_sine(f_hz, tau_s)
    (r,) = resonances(x, sample_rate_hz=FS, onset_s=0.05, length_s=0.04, slice_window_s=0.008, slice_hop_s=0.004,
                      ranges_hz=[(0.8 * f_hz, 1.2 * f_hz)])
    # Tolerances: 0.1 % in frequency is a twentieth of the 2 % shift the feature is for; 3 % in decay rate.
    assert r.frequency_hz == pytest.approx(f_hz, rel=1e-3)
    assert r.decay_per_s == pytest.approx(1 / tau_s, rel=0.03)
    assert r.low_hz == pytest.approx(0.8 * f_hz) and r.high_hz == pytest.approx(1.2 * f_hz)


def test_two_ranges_are_read_apart():
    x = damped_sine(2300.0, 0.015) + damped_sine(5200.0, 0.006)
    a, b = resonances(x, sample_rate_hz=FS, onset_s=0.05, length_s=0.04, slice_window_s=0.008, slice_hop_s=0.004,
                      ranges_hz=[(2000, 2600), (4600, 5800)])
    assert a.frequency_hz == pytest.approx(2300.0, rel=1e-3) and b.frequency_hz == pytest.approx(5200.0, rel=1e-3)
    assert a.decay_per_s == pytest.approx(1 / 0.015, rel=0.05) and b.decay_per_s == pytest.approx(1 / 0.006, rel=0.05)


def test_sustained_resonance_reads_its_frequency_bandwidth_and_no_decay():
    # Noise through a two-pole resonator of known Q (scipy.signal.iirpeak: -3 dB bandwidth f0/Q, a Lorentzian
    # line) seen through Hann slices (-3 dB main-lobe width 1.44 bins, Harris 1978, from memory): the width of
    # the mean spectrum is about that of a Voigt line, f_V = 0.5346 f_L + sqrt(0.2166 f_L² + f_G²) (Olivero &
    # Longbothum 1977, from memory), taking the Hann lobe as Gaussian — an approximation, hence the 10 %.
    from scipy import signal

    f0, q = 1183.0, 12.0
    b, a = signal.iirpeak(f0, q, fs=FS)
    noise = np.random.default_rng(3).standard_normal(int(2.3 * FS)) * 0.05
    x = signal.lfilter(b, a, noise)
    (r,) = resonances(x, sample_rate_hz=FS, onset_s=0.1, length_s=2.0, slice_window_s=0.02, slice_hop_s=0.01,
                      ranges_hz=[(900, 1500)])
    assert r.frequency_hz == pytest.approx(f0, rel=0.01)
    f_l, f_g = f0 / q, 1.44 * FS / (0.02 * FS)
    assert r.bandwidth_hz == pytest.approx(0.5346 * f_l + math.sqrt(0.2166 * f_l**2 + f_g**2), rel=0.10)
    assert abs(r.decay_per_s) < 10.0  # s⁻¹: a sustained sound (a 30 ms decay reads 33)


def test_a_two_percent_shift_is_resolved():
    base, shifted = (resonances(damped_sine(f, 0.03), sample_rate_hz=FS, onset_s=0.05, length_s=0.04,
                                slice_window_s=0.008, slice_hop_s=0.004, ranges_hz=[(900, 1500)])[0]
                     for f in (1183.0, 1183.0 * 1.02))
    assert shifted.frequency_hz / base.frequency_hz == pytest.approx(1.02, abs=5e-4)


def test_log_quadratic_interpolation_is_exact_on_a_gaussian():
    # The log of a Gaussian is a parabola, so three samples give its peak exactly (the reason for interpolating
    # the log magnitude; Smith & Serra 1987, from memory).
    k = np.arange(40.0)
    for true in (10.0, 10.25, 10.5, 17.83):
        log_p = -((k - true) ** 2) / (2 * 1.7**2) + 3.0
        i = int(np.argmax(log_p))
        delta, top = interpolate_peak(log_p, i)
        assert i + delta == pytest.approx(true, abs=1e-12) and top == pytest.approx(3.0, abs=1e-12)


def test_hann_bias_falls_with_zero_padding():
    # Pure tones between bins: with the Hann window the log-quadratic estimate is biased; the bias in Hz falls
    # roughly as the cube of the zero-padding factor (the fitted parabola's error is of second order in the grid
    # step, measured in ever smaller bins; Abe & Smith 2004, from memory). Required: at 8x under 0.01 of an
    # unpadded bin, far below the 24 Hz a 2 % shift of a 1.2 kHz resonance makes (50 Hz bins here). The peak
    # level: a sine of amplitude A reads A²/2 in the one-sided power spectrum (Heinzel et al. 2002), so 20·log10(A)
    # - 3.01 dB once the peak is interpolated; the bin itself may be 1.42 dB low (Hann scalloping loss, Harris 1978,
    # from memory), which the interpolation on the 8x grid brings within 0.01 dB.
    n_win = 960
    bin_hz = FS / n_win
    errs = {}
    for pad in (1, 2, 8):
        worst = worst_db = 0.0
        for frac in np.linspace(0.05, 0.95, 10):
            f = (24 + frac) * bin_hz
            t = np.arange(int(0.2 * FS)) / FS
            (r,) = resonances(np.sin(2 * np.pi * f * t), sample_rate_hz=FS, onset_s=0.0, length_s=0.1,
                              slice_window_s=0.02, slice_hop_s=0.01, ranges_hz=[(900, 1500)], zero_pad=pad)
            worst = max(worst, abs(r.frequency_hz - f))
            worst_db = max(worst_db, abs(r.level_db - (20 * math.log10(1.0) - 10 * math.log10(2.0))))
        errs[pad] = worst / bin_hz
        if pad == 8:
            assert worst_db < 0.01
        if pad == 1:
            assert worst_db > 0.1  # the unpadded grid's level error is real: the test can see the difference
    assert errs[1] > errs[2] > errs[8]
    assert errs[2] / errs[8] > 16  # at least quadratic; cubic would be 64
    assert errs[8] < 0.01


@pytest.mark.parametrize("kw, match", [
    ({"ranges_hz": [(1500, 900)]}, "low < high"),
    ({"ranges_hz": [(900, 30000)]}, "Nyquist"),
    ({"zero_pad": 0}, "zero_pad"),
    ({"slice_window_s": 1e-5}, "slice_window_s must span at least 2 samples"),
])
def test_bad_parameters_say_what_was_wrong(kw, match):
    args = dict(sample_rate_hz=FS, onset_s=0.05, length_s=0.04, slice_window_s=0.008, slice_hop_s=0.004,
                ranges_hz=[(900, 1500)])
    args.update(kw)
    with pytest.raises(ParameterError, match=match):
        resonances(damped_sine(1183.0, 0.03), **args)


def test_the_zoomed_bins_are_those_of_the_zero_padded_transform():
    # The chirp z-transform of a range must give the same bins as the full zero-padded rfft (scipy.fft, through
    # stft_power with its "spectrum" scaling), so the features are those of the padded spectrum, only cheaper.
    from analysis.signal.resonance import zoom_power
    from analysis.signal.spectra import frames, stft_power, window_values

    rng = np.random.default_rng(8)
    x = rng.standard_normal(4000)
    starts = np.array([0, 480, 960, 3500])  # the last frame runs past the end and reads zeros
    n, n_fft = 960, 7680
    full = stft_power(x, sample_rate_hz=FS, starts=starts, n_window=n, scaling="spectrum", n_fft=n_fft)
    w = window_values("hann", n)
    zoom = zoom_power(frames(x, starts, n) * w, first_bin=140, n_bins=120, n_fft=n_fft) * 2.0 / np.sum(w) ** 2
    np.testing.assert_allclose(zoom, full[:, 140:260], rtol=1e-9, atol=1e-12 * full.max())
