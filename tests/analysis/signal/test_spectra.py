import numpy as np
import pytest
import scipy.signal

from analysis.errors import ParameterError
from analysis.signal.spectra import frames, rfft_freqs, slice_grid, stft_power, window_values

FS = 48000.0
N = 4096


def test_periodic_hann_gains():
    w = window_values("hann", N)
    # Harris 1978 (Proc. IEEE 66(1)), DFT-even Hann: w[n] = 0.5 - 0.5·cos(2πn/N).
    np.testing.assert_allclose(w, 0.5 - 0.5 * np.cos(2 * np.pi * np.arange(N) / N), atol=1e-15)
    # Harris 1978; Heinzel et al. 2002: coherent gain 0.5, NENBW 1.5 bins.
    assert w.sum() / N == pytest.approx(0.5, abs=1e-12)
    assert N * np.sum(w**2) / w.sum() ** 2 == pytest.approx(1.5, abs=1e-12)


def test_rfft_freqs_axis():
    f = rfft_freqs(N, FS)
    assert f.shape == (N // 2 + 1,)
    # Bin k is at k·fs/N; the last bin of an even frame is the Nyquist frequency fs/2.
    assert f[1] == pytest.approx(FS / N)
    assert f[-1] == pytest.approx(FS / 2)


def test_slice_grid_count_starts_and_times():
    # length 0.5 s, window 0.1 s, hop 0.1 s: (0.5-0.1)/0.1 = 4 hops -> 5 slices (the count formula of the grid;
    # in binary floating point (0.5-0.1)/0.1 is 3.9999999999999996, which the 1e-9 slack must absorb).
    grid = slice_grid(onset_s=0.25, length_s=0.5, slice_window_s=0.1, slice_hop_s=0.1, sample_rate_hz=1000.0,
                      n_samples=10_000)
    assert grid.n_slices == 5
    assert grid.n_window == 100
    # Frame k starts at round((onset + k·hop)·fs) = 250, 350, ..., 650 samples.
    np.testing.assert_array_equal(grid.starts, [250, 350, 450, 550, 650])
    # Slice times: frame centre relative to the onset = k·hop + window/2.
    np.testing.assert_allclose(grid.times_s, [0.05, 0.15, 0.25, 0.35, 0.45])
    assert grid.n_padded == 0


def test_slice_grid_is_the_same_for_every_onset():
    a = slice_grid(onset_s=1.0, length_s=0.3, slice_window_s=0.05, slice_hop_s=0.025, sample_rate_hz=FS,
                   n_samples=10**6)
    b = slice_grid(onset_s=[1.0, 7.5], length_s=0.3, slice_window_s=0.05, slice_hop_s=0.025, sample_rate_hz=FS,
                   n_samples=10**6)
    assert b.starts.shape == (2, a.n_slices)
    np.testing.assert_array_equal(b.starts[0], a.starts)
    # The second actuation's slices are the first's shifted by exactly 6.5 s = 312000 samples.
    np.testing.assert_array_equal(b.starts[1] - b.starts[0], 312000)
    np.testing.assert_array_equal(a.times_s, b.times_s)


def test_frames_past_the_end_are_zero_padded_and_counted():
    x = np.arange(1.0, 1001.0)  # 1000 samples at 1 kHz
    grid = slice_grid(onset_s=0.8, length_s=0.4, slice_window_s=0.1, slice_hop_s=0.1, sample_rate_hz=1000.0,
                      n_samples=x.size)
    # Starts 800, 900, 1000, 1100: the frames at 1000 and 1100 lie wholly past the end; the one at 900 ends at 999.
    np.testing.assert_array_equal(grid.starts, [800, 900, 1000, 1100])
    np.testing.assert_array_equal(grid.padded, [False, False, True, True])
    assert grid.n_padded == 2
    f = frames(x, grid.starts, grid.n_window)
    np.testing.assert_array_equal(f[1], x[900:1000])
    assert np.all(f[2:] == 0)
    # A frame half past the end keeps its real samples and zeros after them.
    g = frames(x, [950], 100)
    np.testing.assert_array_equal(g[0, :50], x[950:])
    assert np.all(g[0, 50:] == 0)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_frames_are_the_samples_of_each_frame_wherever_it_starts(dtype):
    # Against a frame-by-frame copy out of a signal padded by two frames of zeros on each side: frames before the
    # start, inside, across either end and wholly outside, from a float32 recording or a float64 signal.
    x = (np.arange(1.0, 1001.0) / 1000.0).astype(dtype)
    n = 64
    padded = np.concatenate((np.zeros(2 * n), x.astype(np.float64), np.zeros(2 * n)))
    for starts in ([-200, -64, -10, 0, 500, 990, 1000, 1300], [300, 400], [-5], [999]):
        got = frames(x, starts, n)
        assert got.dtype == np.float64 and got.shape == (len(starts), n)
        want = [padded[2 * n + s:3 * n + s] if -2 * n <= s <= x.size + n else np.zeros(n) for s in starts]
        np.testing.assert_array_equal(got, want)


def test_spectrum_scaling_matches_welch_on_a_single_frame():
    # REFERENCES.md [C]: sine A = 1 at 1031.25 Hz (bin 88), fs 48 kHz, Hann 4096, welch 'spectrum' peak 0.5.
    t = np.arange(N) / FS
    x = np.sin(2 * np.pi * 1031.25 * t)
    ours = stft_power(x, sample_rate_hz=FS, starts=[0], n_window=N, scaling="spectrum")[0]
    f_ref, ref = scipy.signal.welch(x, fs=FS, window="hann", nperseg=N, noverlap=0, detrend=False,
                                    scaling="spectrum")
    np.testing.assert_allclose(ours, ref, rtol=1e-6, atol=1e-18)
    assert ours.max() == pytest.approx(0.5, rel=1e-9)
    assert rfft_freqs(N, FS)[np.argmax(ours)] == 1031.25
    density = stft_power(x, sample_rate_hz=FS, starts=[0], n_window=N, scaling="density")[0]
    # REFERENCES.md [C]: welch 'density' peak 0.0284444 for the same sine.
    assert density.max() == pytest.approx(0.0284444, rel=1e-5)


def test_off_bin_sine_spectrum_sum_over_nenbw():
    # REFERENCES.md [C]: sine A = 1 at 1000 Hz (off-bin): 'spectrum' peak 0.43279 at 996.09 Hz, and
    # Σ spectrum / NENBW (1.5 bins, Harris 1978) = A²/2 = 0.5.
    x = np.sin(2 * np.pi * 1000.0 * np.arange(N) / FS)
    p = stft_power(x, sample_rate_hz=FS, starts=[0], n_window=N, scaling="spectrum")[0]
    assert p.max() == pytest.approx(0.43279, abs=1e-5)
    assert rfft_freqs(N, FS)[np.argmax(p)] == pytest.approx(996.09, abs=0.01)
    assert p.sum() / 1.5 == pytest.approx(0.5, rel=1e-4)


def test_density_matches_scipy_short_time_fft():
    rng = np.random.default_rng(3)
    x = rng.standard_normal(30_000)
    n, hop = 1024, 256
    w = scipy.signal.get_window("hann", n)
    sft = scipy.signal.ShortTimeFFT(w, hop=hop, fs=FS, fft_mode="onesided2X", scale_to="psd")
    p1 = 100
    ref = np.abs(sft.stft(x, p0=0, p1=p1)) ** 2  # (n_bins, n_slices); slice p is centred on sample p·hop
    starts = np.arange(p1) * hop - n // 2  # so frame p starts half a window earlier (scipy pads with zeros)
    ours = stft_power(x, sample_rate_hz=FS, starts=starts, n_window=n, scaling="density")
    np.testing.assert_allclose(ours, ref.T, rtol=1e-6, atol=1e-15)


def test_parseval_mean_square_scaling():
    rng = np.random.default_rng(11)
    x = rng.standard_normal(N)
    w = window_values("hann", N)
    ms = stft_power(x, sample_rate_hz=FS, starts=[0], n_window=N, scaling="mean_square")[0]
    density = stft_power(x, sample_rate_hz=FS, starts=[0], n_window=N, scaling="density")[0]
    # Parseval (Heinzel et al. 2002): Σ_k density·df = Σ(x·w)²/Σw², the frame's window-weighted mean square.
    windowed_ms = np.sum((x * w) ** 2) / np.sum(w**2)
    assert np.sum(density) * FS / N == pytest.approx(windowed_ms, rel=1e-10)
    np.testing.assert_allclose(ms, density * FS / N, rtol=1e-12)


def test_odd_frame_length_parseval():
    rng = np.random.default_rng(5)
    x = rng.standard_normal(1001)
    w = window_values("hann", 1001)
    ms = stft_power(x, sample_rate_hz=1000.0, starts=[0], n_window=1001, scaling="mean_square")[0]
    # Parseval with no Nyquist bin for an odd frame: every bin but DC is doubled.
    assert ms.sum() == pytest.approx(np.sum((x * w) ** 2) / np.sum(w**2), rel=1e-10)


def test_white_noise_mean_density():
    # REFERENCES.md [C]: white noise σ = 0.1 at 48 kHz has one-sided density 2σ²/fs = 4.167e-7 per Hz.
    rng = np.random.default_rng(2024)
    x = 0.1 * rng.standard_normal(200 * N)
    starts = np.arange(200) * N
    density = stft_power(x, sample_rate_hz=FS, starts=starts, n_window=N, scaling="density")
    assert density[:, 1:-1].mean() == pytest.approx(4.167e-7, rel=0.01)


def test_stft_power_is_one_call_over_all_frames():
    rng = np.random.default_rng(9)
    x = rng.standard_normal(20_000)
    starts = np.array([[0, 500, 1000], [4000, 4500, 5000]])
    both = stft_power(x, sample_rate_hz=FS, starts=starts, n_window=512)
    assert both.shape == (2, 3, 257)
    single = stft_power(x, sample_rate_hz=FS, starts=[4500], n_window=512)
    np.testing.assert_allclose(both[1, 1], single[0], rtol=1e-12)


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(slice_hop_s=-0.01), r"slice_hop_s must be a finite number > 0; got -0.01"),
        (dict(slice_hop_s=0.0), r"slice_hop_s must be a finite number > 0; got 0.0"),
        (dict(slice_window_s=0.6), r"slice_window_s must be <= length_s \(0.5 s\) .* got 0.6 s"),
        (dict(sample_rate_hz=0), r"sample_rate_hz must be a finite number > 0; got 0"),
        (dict(length_s=float("nan")), r"length_s must be a finite number > 0"),
        (dict(onset_s=float("inf")), r"onset_s must be a finite time"),
        (dict(slice_window_s=1e-6), r"slice_window_s must span at least 2 samples"),
    ],
)
def test_slice_grid_rejects_bad_parameters(kwargs, match):
    params = dict(onset_s=0.0, length_s=0.5, slice_window_s=0.1, slice_hop_s=0.05, sample_rate_hz=FS, n_samples=100)
    params.update(kwargs)
    with pytest.raises(ParameterError, match=match):
        slice_grid(**params)


def test_stft_power_rejects_bad_parameters():
    x = np.zeros(1000)
    with pytest.raises(ParameterError, match=r"scaling must be one of \('density', 'spectrum', 'mean_square'\)"):
        stft_power(x, sample_rate_hz=FS, starts=[0], n_window=256, scaling="psd")
    with pytest.raises(ParameterError, match="window must be a window name"):
        stft_power(x, sample_rate_hz=FS, starts=[0], n_window=256, window="no-such-window")
    with pytest.raises(ParameterError, match=r"x must be a 1-D signal; got shape \(2, 500\)"):
        stft_power(x.reshape(2, 500), sample_rate_hz=FS, starts=[0], n_window=256)
    with pytest.raises(ParameterError, match="n_window must be an integer >= 2; got 1"):
        stft_power(x, sample_rate_hz=FS, starts=[0], n_window=1)


def test_zero_padded_frames_match_welch_with_nfft_and_keep_parseval():
    # scipy.signal.welch with nfft > nperseg zero-pads each segment: the same spectrum on a finer grid.
    rng = np.random.default_rng(21)
    x = rng.standard_normal(N)
    for scaling, welch_scaling in (("spectrum", "spectrum"), ("density", "density")):
        ours = stft_power(x, sample_rate_hz=FS, starts=[0], n_window=N, n_fft=4 * N, scaling=scaling)[0]
        f_ref, ref = scipy.signal.welch(x, fs=FS, window="hann", nperseg=N, noverlap=0, nfft=4 * N, detrend=False,
                                        scaling=welch_scaling)
        np.testing.assert_allclose(ours, ref, rtol=1e-6, atol=1e-18)
        np.testing.assert_allclose(rfft_freqs(4 * N, FS), f_ref)
    # Parseval on the padded grid (Heinzel et al. 2002): the bins still sum to the window-weighted mean square.
    w = window_values("hann", N)
    ms = stft_power(x, sample_rate_hz=FS, starts=[0], n_window=N, n_fft=3 * N + 1, scaling="mean_square")[0]
    assert ms.sum() == pytest.approx(np.sum((x * w) ** 2) / np.sum(w**2), rel=1e-10)
    with pytest.raises(ParameterError, match=r"n_fft must be an integer >= n_window \(4096\); got 100"):
        stft_power(x, sample_rate_hz=FS, starts=[0], n_window=N, n_fft=100)
