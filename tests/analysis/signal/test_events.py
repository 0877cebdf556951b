"""Event timing on synthetic marker channels, clicks and bursts."""

import math

import numpy as np
import pytest

from analysis.errors import ParameterError
from analysis.signal.events import (
    EventTiming,
    detect_onsets,
    event_end,
    find_event,
    marker_edges,
    noise_floor_db,
    spectral_flux,
)

FS = 48000.0
HOP_S = 0.001


def _pulse_train(starts, length, n, *, low=0.0, high=1.0, noise=0.0, seed=0):
    m = np.full(n, low)
    for s in starts:
        m[s:s + length] = high
    if noise:
        m = m + np.random.default_rng(seed).normal(0.0, noise, n)
    return m


def _click(n, start, *, f_hz, tau_s, amp):
    """Damped sinusoid A·e^(-t/τ)·sin(2πft) starting at sample `start`."""
    y = np.zeros(n)
    t = np.arange(n - start) / FS
    y[start:] = amp * np.exp(-t / tau_s) * np.sin(2 * np.pi * f_hz * t)
    return y


# ---------------------------------------------------------------- marker edges

def test_marker_edges_on_exact_samples_with_noise_on_the_channel():
    starts = [4800, 14411, 30000, 41234]
    m = _pulse_train(starts, 480, 48000, noise=0.02, seed=1)
    edges = marker_edges(m, sample_rate_hz=FS)
    np.testing.assert_array_equal(edges, np.array(starts) / FS)


def test_marker_edges_independent_of_duty_cycle_and_offset():
    starts = [1000, 20000]
    m = _pulse_train(starts, 15000, 48000, low=-2.5, high=2.5, noise=0.05, seed=2)  # high 62% of the time
    np.testing.assert_array_equal(marker_edges(m, sample_rate_hz=FS), np.array(starts) / FS)
    short = _pulse_train([1000, 30000], 5, 48000, low=0.2, high=0.9, noise=0.01, seed=3)  # 0.02% high
    np.testing.assert_array_equal(marker_edges(short, sample_rate_hz=FS), np.array([1000, 30000]) / FS)


def test_marker_edges_debounce_and_spikes():
    m = _pulse_train([5000], 100, 48000)
    m[5120:5600] = 1.0  # bounce: high again 20 samples (0.4 ms) after the pulse ended
    m[20000] = 1.0  # isolated one-sample spike
    m[30000:30480] = 1.0  # a real second pulse
    edges = marker_edges(m, sample_rate_hz=FS, min_gap_s=0.005)
    np.testing.assert_array_equal(edges, np.array([5000, 30000]) / FS)


@pytest.mark.parametrize("kind", ["clean", "spikes", "edges at the ends", "noisy", "short"])
def test_marker_median_filter_is_scipys_where_it_skips_flat_stretches(kind):
    # Reference: scipy.ndimage.median_filter(size=5, mode="nearest") over the whole channel.
    import scipy.ndimage

    from analysis.signal.events import _median_filtered

    rng = np.random.default_rng(2)
    m = _pulse_train([1000, 5000, 5003], 400, 20_000, high=0.8)
    if kind == "spikes":
        m[rng.integers(0, m.size, 30)] = rng.uniform(-1, 1, 30)
        m[7000:7002] = 0.8  # a two-sample blip
    elif kind == "edges at the ends":
        m[:3] = 0.8
        m[-2:] = 0.5
    elif kind == "noisy":
        m = m + rng.normal(0, 0.01, m.size)
    elif kind == "short":
        m = np.array([0.0, 1.0, 0.0, 1.0])
    np.testing.assert_array_equal(_median_filtered(m), scipy.ndimage.median_filter(m, size=5, mode="nearest"))


@pytest.mark.parametrize("n", [7, 8, 101, 1000])
def test_marker_level_median_is_numpys(n):
    # Reference: np.median, for every share of samples at the likely value, below, at and past half.
    from analysis.signal.events import _median

    rng = np.random.default_rng(n)
    for k in range(n + 1):
        for others in ((-1.0, 1.0), (-1.0, 0.0), (0.5, 1.0)):  # the likely value amid, above or below the rest
            a = rng.uniform(*others, n)
            a[rng.permutation(n)[:k]] = 0.25
            assert _median(a, 0.25) == np.median(a), (n, k, others)


def test_marker_edges_with_a_given_threshold():
    m = _pulse_train([1000, 9000], 200, 20000, low=0.0, high=1.0)
    m[1000:1005] = 0.3  # slow first rise: above 0.25 from sample 1000, above 0.5 only from 1005
    np.testing.assert_array_equal(marker_edges(m, sample_rate_hz=FS, threshold=0.25), np.array([1000, 9000]) / FS)
    np.testing.assert_array_equal(marker_edges(m, sample_rate_hz=FS, threshold=0.5), np.array([1005, 9000]) / FS)


def test_flat_noisy_and_non_finite_marker_channels_give_no_edges():
    assert marker_edges(np.zeros(4800), sample_rate_hz=FS).size == 0
    assert marker_edges(np.full(4800, 0.7), sample_rate_hz=FS).size == 0
    assert marker_edges(np.random.default_rng(4).normal(0, 0.1, 48000), sample_rate_hz=FS).size == 0
    assert marker_edges(np.full(4800, np.nan), sample_rate_hz=FS).size == 0
    m = _pulse_train([2000], 480, 9600)
    m[100] = np.nan
    np.testing.assert_array_equal(marker_edges(m, sample_rate_hz=FS), [2000 / FS])


def test_channel_that_starts_high_has_no_edge_at_zero():
    m = _pulse_train([0, 6000], 480, 9600)
    np.testing.assert_array_equal(marker_edges(m, sample_rate_hz=FS), [6000 / FS])


# ---------------------------------------------------------------- spectral flux

def test_spectral_flux_matches_the_published_formula_computed_directly():
    rng = np.random.default_rng(5)
    x = rng.normal(0, 0.3, 64)
    fs, n_frame, hop = 1000.0, 16, 4
    m = np.arange(n_frame)
    hann = 0.5 - 0.5 * np.cos(2 * np.pi * m / n_frame)  # periodic Hann (Harris 1978)
    n_frames = 1 + (x.size - n_frame) // hop
    for gamma in (None, 10.0):
        # SF(n) = Σ_k H(|X_k(n)| - |X_k(n-1)|), H(x) = (x + |x|)/2 (Bello et al. 2005; Dixon 2006), here by loops.
        expected = [0.0]
        prev = None
        for n in range(n_frames):
            spec = [abs(sum(x[n * hop + j] * hann[j] * complex(math.cos(2 * math.pi * k * j / n_frame),
                                                               -math.sin(2 * math.pi * k * j / n_frame))
                            for j in range(n_frame))) for k in range(n_frame // 2 + 1)]
            if gamma is not None:
                spec = [math.log1p(gamma * v) for v in spec]
            if prev is not None:
                expected.append(sum((a - b + abs(a - b)) / 2 for a, b in zip(spec, prev)))
            prev = spec
        times, flux = spectral_flux(x, sample_rate_hz=fs, frame_s=0.016, hop_s=0.004, log_gamma=gamma)
        np.testing.assert_allclose(flux, expected, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(times, (np.arange(n_frames) * hop + n_frame / 2) / fs)  # frame centres


def test_spectral_flux_of_a_stationary_sine_is_zero_after_the_first_frame():
    t = np.arange(int(FS)) / FS
    x = 0.5 * np.sin(2 * np.pi * 1000.3 * t + 0.3)
    _, flux = spectral_flux(x, sample_rate_hz=FS)
    # A stationary sinusoid has a shift-invariant magnitude spectrum, so the flux vanishes (Bello et al. 2005);
    # compare it with the total magnitude Σ|X_k| of one frame (periodic Hann, computed here with numpy).
    n_frame = 240
    hann = 0.5 - 0.5 * np.cos(2 * np.pi * np.arange(n_frame) / n_frame)
    scale = np.sum(np.abs(np.fft.rfft(x[:n_frame] * hann)))
    assert flux[0] == 0.0
    assert np.max(flux[1:]) < 1e-6 * scale
    # A step in amplitude is not stationary: the flux is no longer ~0 there.
    x[24000:] *= 2.0
    _, stepped = spectral_flux(x, sample_rate_hz=FS)
    assert np.max(stepped) > 0.1 * scale


def test_short_signal_gives_empty_flux():
    times, flux = spectral_flux(np.zeros(100), sample_rate_hz=FS)
    assert times.size == 0 and flux.size == 0


# ---------------------------------------------------------------- onsets

@pytest.mark.parametrize("snr_db", [20.0, 30.0, 40.0])
def test_onsets_within_one_hop_of_the_true_click_start(snr_db):
    rng = np.random.default_rng(int(snr_db))
    sigma = 1e-3
    amp = sigma * 10 ** (snr_db / 20)  # peak amplitude over noise RMS
    for _ in range(3):
        n = int(FS)
        starts = (np.array([0.15, 0.32, 0.55, 0.81]) * FS).astype(int) + rng.integers(0, 480, 4)
        x = rng.normal(0.0, sigma, n)
        for s in starts:
            x += _click(n, s, f_hz=rng.uniform(800, 6000), tau_s=rng.uniform(0.002, 0.02), amp=amp)
        onsets = detect_onsets(x, sample_rate_hz=FS, hop_s=HOP_S)
        assert onsets.size == starts.size
        # Onset evaluation in Bello et al. 2005 and Dixon 2006 allows ±50 ms; for a rig the goal is one hop.
        assert np.max(np.abs(onsets - starts / FS)) <= HOP_S


def test_no_onsets_in_silence_or_steady_noise():
    assert detect_onsets(np.zeros(48000), sample_rate_hz=FS).size == 0
    assert detect_onsets(np.random.default_rng(6).normal(0, 0.01, 48000), sample_rate_hz=FS).size == 0


def test_click_in_digital_silence_is_placed_on_its_first_samples():
    x = _click(48000, 12345, f_hz=3000.0, tau_s=0.005, amp=0.3)
    onsets = detect_onsets(x, sample_rate_hz=FS)
    assert onsets.size == 1
    # sin(0) = 0: the first sample that differs from silence is start + 1; allow one sample more.
    assert 12345 <= onsets[0] * FS <= 12347
    np.testing.assert_array_equal(detect_onsets(x.astype(np.float32), sample_rate_hz=FS), onsets)


# ---------------------------------------------------------------- event end

def _burst(n, start, length, *, amp, noise, seed):
    x = np.random.default_rng(seed).normal(0.0, noise, n)
    x[start:start + length] += np.random.default_rng(seed + 1).normal(0.0, amp, length)
    return x


def test_event_end_of_a_burst_of_known_length_within_a_frame():
    frame_s = 0.005
    for length in (4800, 7321, 12000):  # 100, 152.5, 250 ms
        x = _burst(48000, 10000, length, amp=0.05, noise=0.0005, seed=length)
        end = event_end(x, sample_rate_hz=FS, onset_s=10000 / FS, max_length_s=0.5, frame_s=frame_s)
        assert abs(end - (10000 + length) / FS) <= frame_s


def test_event_end_merges_a_short_dip_and_stops_at_max_length():
    x = _burst(48000, 10000, 4800, amp=0.05, noise=0.0005, seed=7)
    x[12000:12150] = 0.0005 * np.random.default_rng(8).normal(size=150)  # 3 ms dip inside the burst
    end = event_end(x, sample_rate_hz=FS, onset_s=10000 / FS, max_length_s=0.5, merge_gap_s=0.01)
    assert abs(end - 14800 / FS) <= 0.005
    capped = event_end(x, sample_rate_hz=FS, onset_s=10000 / FS, max_length_s=0.05)
    assert capped == pytest.approx((10000 + 2400) / FS)


def test_event_end_is_nan_when_nothing_rises_above_the_floor():
    x = np.random.default_rng(9).normal(0.0, 0.001, 48000)
    assert math.isnan(event_end(x, sample_rate_hz=FS, onset_s=0.3, max_length_s=0.1))


def test_noise_floor_of_steady_noise():
    # Noise of RMS σ reads 20·log10(σ) = -40 dBFS; frame-to-frame spread of 240-sample frames is ±0.6 dB or so.
    x = np.random.default_rng(10).normal(0.0, 0.01, 48000)
    assert noise_floor_db(x, sample_rate_hz=FS) == pytest.approx(-40.0, abs=1.5)


# ---------------------------------------------------------------- find_event

def _two_clicks(seed=11):
    rng = np.random.default_rng(seed)
    n = int(FS)
    x = rng.normal(0.0, 1e-3, n)
    x += _click(n, 14400, f_hz=2500.0, tau_s=0.01, amp=0.2)  # 0.300 s
    x += _click(n, 24000, f_hz=900.0, tau_s=0.02, amp=0.1)  # 0.500 s
    return x


def test_find_event_by_onset():
    x = _two_clicks()
    ev = find_event(x, sample_rate_hz=FS, name="metering_click", search_start_s=0.2, search_stop_s=0.45,
                    max_length_s=0.1)
    assert isinstance(ev, EventTiming)
    assert ev.found and ev.method == "onset" and ev.reason == ""
    assert abs(ev.onset_s - 0.3) <= HOP_S
    assert math.isnan(ev.latency_s)
    # The click's RMS A·e^(-t/τ)/√2 starts at 20·log10(0.2/√2) = -17.0 dBFS and reaches the end level, noise
    # floor 20·log10(1e-3) + 6 = -54 dBFS, after τ·ln(10^(37/20)) = 42.6 ms; allow about a frame either way.
    assert 0.035 <= ev.duration_s <= 0.05
    assert ev.end_s == pytest.approx(ev.onset_s + ev.duration_s)
    # Peak of A·e^(-t/τ)·sin(2πft) is A·e^(-1/(4fτ)) near t = 1/(4f): 20·log10(0.2) - 0.09 dB.
    assert ev.peak_dbfs == pytest.approx(20 * math.log10(0.2), abs=0.2)


def test_find_event_with_a_marker_reports_latency_and_the_strongest_onset():
    x = _two_clicks()
    ev = find_event(x, sample_rate_hz=FS, name="dose_release", search_start_s=0.49, search_stop_s=0.6,
                    max_length_s=0.2, marker_s=0.495)
    assert ev.found and ev.method == "marker"
    assert abs(ev.onset_s - 0.5) <= HOP_S
    assert ev.latency_s == pytest.approx(ev.onset_s - 0.495)
    both = find_event(x, sample_rate_hz=FS, name="loudest", search_start_s=0.0, search_stop_s=1.0, max_length_s=0.1)
    assert abs(both.onset_s - 0.3) <= HOP_S  # the 0.2 FS click is stronger than the 0.1 FS one


@pytest.mark.parametrize(
    ("x", "window", "reason"),
    [
        (np.zeros(48000), (0.3, 0.45), "no onset above threshold in 0.300–0.450 s"),
        (_two_clicks(), (0.6, 0.9), "no onset above threshold in 0.600–0.900 s"),
        (_two_clicks(), (1.2, 1.35), "the search window 1.200–1.350 s lies outside the recording (0–1.000 s)"),
        (_two_clicks(), (0.3, 0.3), "the search window 0.300–0.300 s is empty"),
        (_two_clicks(), (0.4, 0.3), "the search window 0.400–0.300 s is empty"),
        (_two_clicks(), (float("nan"), 0.3), "the search window is undefined (nan–0.300 s)"),
    ],
)
def test_missing_events_are_reported_not_raised(x, window, reason):
    for marker in (None, window[0]):
        ev = find_event(x, sample_rate_hz=FS, name="metering_click", search_start_s=window[0],
                        search_stop_s=window[1], max_length_s=0.04, marker_s=marker)
        assert not ev.found
        assert ev.method == "missing"
        assert ev.reason == reason
        assert all(math.isnan(v) for v in (ev.onset_s, ev.end_s, ev.duration_s, ev.peak_dbfs, ev.latency_s))


def test_undefined_marker_time_is_a_missing_event():
    ev = find_event(_two_clicks(), sample_rate_hz=FS, name="dose_release", search_start_s=0.49, search_stop_s=0.6,
                    max_length_s=0.2, marker_s=float("nan"))
    assert not ev.found and ev.method == "missing"
    assert ev.reason == "the marker time is undefined (nan s)"


def test_nan_input_does_not_crash_the_event_finder():
    x = _two_clicks()
    x[1000:1100] = np.nan
    x[5000] = np.inf
    ev = find_event(x, sample_rate_hz=FS, name="metering_click", search_start_s=0.2, search_stop_s=0.45,
                    max_length_s=0.1)
    assert ev.found and abs(ev.onset_s - 0.3) <= HOP_S
    assert detect_onsets(np.full(4800, np.nan), sample_rate_hz=FS).size == 0


def test_parameter_errors_name_the_parameter_and_value():
    with pytest.raises(ParameterError, match=r"hop_s must be a finite number > 0; got 0"):
        detect_onsets(np.zeros(100), sample_rate_hz=FS, hop_s=0)
    with pytest.raises(ParameterError, match=r"frame_s must span at least 4 samples at 48000 Hz; got 1e-05 s"):
        spectral_flux(np.zeros(100), sample_rate_hz=FS, frame_s=1e-5)
    with pytest.raises(ParameterError, match=r"onset_s must lie inside the recording \(0–0.1 s\); got 2"):
        event_end(np.zeros(4800), sample_rate_hz=FS, onset_s=2, max_length_s=0.1)
    with pytest.raises(ParameterError, match=r"name must be a non-empty string; got ''"):
        find_event(np.zeros(4800), sample_rate_hz=FS, name="", search_start_s=0, search_stop_s=0.1,
                   max_length_s=0.1)


# ---------------------------------------------------------------- energy detector and shared onsets

def _swell(fs=48_000, start_s=0.4, seed=5):
    """Noise floor, then noise that steps up 30 dB at start_s and stays (no strike: flux sees little of it)."""
    rng = np.random.default_rng(seed)
    n = int(1.0 * fs)
    x = 1e-3 * rng.standard_normal(n)
    i = int(start_s * fs)
    x[i:] += 3e-2 * rng.standard_normal(n - i)
    return x, fs


def test_energy_detector_finds_a_level_rise_within_one_hop():
    x, fs = _swell()
    ev = find_event(x, sample_rate_hz=fs, name="release", search_start_s=0.3, search_stop_s=0.6,
                    max_length_s=0.3, detector="energy")
    assert ev.found and ev.method == "onset"
    assert abs(ev.onset_s - 0.4) <= 0.001  # one hop (the goal of the foundation issue)


def test_energy_detector_reports_silence_as_missing():
    rng = np.random.default_rng(2)
    x = 1e-3 * rng.standard_normal(48_000)
    ev = find_event(x, sample_rate_hz=48_000, name="release", search_start_s=0.3, search_stop_s=0.6,
                    max_length_s=0.3, detector="energy")
    assert not ev.found and "dB above the noise floor" in ev.reason


def test_unknown_detector_is_named():
    x, fs = _swell()
    with pytest.raises(ParameterError, match=r"detector must be one of 'flux', 'energy'; got 'zero'"):
        find_event(x, sample_rate_hz=fs, name="e", search_start_s=0.3, search_stop_s=0.6, max_length_s=0.3,
                   detector="zero")


def test_shared_onset_candidates_give_the_same_event():
    from analysis.signal.events import onset_candidates

    rng = np.random.default_rng(9)
    fs = 48_000
    x = 1e-3 * rng.standard_normal(fs)
    t = np.arange(fs) / fs - 0.5
    x += np.where(t >= 0, 0.3 * np.exp(-np.clip(t, 0, None) / 0.004) * np.sin(2 * np.pi * 3000 * t), 0.0)
    shared = onset_candidates(x, sample_rate_hz=fs, log_gamma=1000.0)
    a = find_event(x, sample_rate_hz=fs, name="c", search_start_s=0.45, search_stop_s=0.55, max_length_s=0.05,
                   log_gamma=1000.0)
    b = find_event(x, sample_rate_hz=fs, name="c", search_start_s=0.45, search_stop_s=0.55, max_length_s=0.05,
                   log_gamma=1000.0, onsets=shared)
    assert a == b and a.found and abs(a.onset_s - 0.5) <= 0.001


# ---------------------------------------------------------------- the windowed onset search

def _click_after_two_noise_levels(seed=3):
    """1 s at 48 kHz: noise of 1e-3 FS RMS for 0.3 s, then 1e-2 FS; a 3 kHz click at 0.6 s."""
    rng = np.random.default_rng(seed)
    n = int(FS)
    x = rng.standard_normal(n) * np.where(np.arange(n) < 0.3 * FS, 1e-3, 1e-2)
    return x + _click(n, int(0.6 * FS), f_hz=3000.0, tau_s=0.004, amp=0.5)


@pytest.mark.parametrize("stretch", [(0.1, 0.2), (0.35, 0.55)])
def test_window_onsets_are_normalised_by_the_stated_background_stretch(stretch):
    # The strength of an onset is its flux peak in robust SDs of the flux of the frames wholly inside the stated
    # stretch: (SF - median)/(1.4826·MAD), computed here from spectral_flux over the whole signal. A quiet and a
    # loud stretch give different strengths for the same peak, each by its own numbers.
    from analysis.signal.events import window_onsets

    x = _click_after_two_noise_levels()
    times, strength = window_onsets(x, sample_rate_hz=FS, search_start_s=0.58, search_stop_s=0.62,
                                    background_start_s=stretch[0], background_stop_s=stretch[1], log_gamma=1000.0)
    assert times.size == 1 and abs(times[0] - 0.6) <= HOP_S
    t, flux = spectral_flux(x, sample_rate_hz=FS, log_gamma=1000.0)
    start = t - 0.0025  # frame start: centre - frame_s / 2
    inside = (start >= stretch[0] - 1e-9) & (start + 0.005 <= stretch[1] + 1e-9)
    assert inside.sum() == round((stretch[1] - stretch[0] - 0.005) / HOP_S) + 1
    centre = np.median(flux[inside])
    scale = 1.4826 * np.median(np.abs(flux[inside] - centre))
    peak = flux[np.abs(t - 0.6) < 0.006].max()
    assert strength[0] == pytest.approx((peak - centre) / scale, rel=1e-5)


def test_window_onsets_do_not_depend_on_sound_outside_the_window_and_its_stretch():
    # A loud burst elsewhere in the recording changes the whole-recording normalisation, not the windowed one.
    from analysis.signal.events import window_onsets

    x = _click_after_two_noise_levels()
    y = x.copy()
    y[int(0.8 * FS):int(0.95 * FS)] += np.random.default_rng(4).standard_normal(int(0.15 * FS)) * 0.3
    opts = dict(sample_rate_hz=FS, search_start_s=0.58, search_stop_s=0.62, background_start_s=0.1,
                background_stop_s=0.2, log_gamma=1000.0)
    a, b = window_onsets(x, **opts), window_onsets(y, **opts)
    np.testing.assert_array_equal(a[0], b[0])
    np.testing.assert_array_equal(a[1], b[1])


def test_window_onsets_without_a_usable_stretch_normalise_by_the_search_itself():
    # A stretch before the recording start holds no frame: the search's own frames normalise it, and the click
    # near the start is still found.
    from analysis.signal.events import window_onsets

    x = np.roll(_click_after_two_noise_levels(), -int(0.55 * FS))  # click at 0.05 s in the loud noise
    times, strength = window_onsets(x, sample_rate_hz=FS, search_start_s=0.0, search_stop_s=0.1,
                                    background_start_s=-0.1, background_stop_s=0.0, log_gamma=1000.0)
    assert times.size == 1 and abs(times[0] - 0.05) <= HOP_S and strength[0] > 6.0
    assert window_onsets(x, sample_rate_hz=FS, search_start_s=2.0, search_stop_s=2.1, background_start_s=0.1,
                         background_stop_s=0.2)[0].size == 0  # a window past the end holds no onset


def test_window_onsets_name_a_bad_window():
    from analysis.signal.events import window_onsets

    with pytest.raises(ParameterError, match=r"search_start_s must be a finite number; got nan"):
        window_onsets(np.zeros(4800), sample_rate_hz=FS, search_start_s=math.nan, search_stop_s=0.1,
                      background_start_s=0.0, background_stop_s=0.05)


def test_window_onsets_read_only_the_frames_window_search_frames_lists():
    # Samples outside those frames (loud noise written over them) change nothing: the search computes the flux
    # of the listed frames only, and the benchmark's floor counts exactly them.
    from analysis.signal.events import window_onsets, window_search_frames

    x = _click_after_two_noise_levels()
    opts = dict(sample_rate_hz=FS, search_start_s=0.58, search_stop_s=0.62, background_start_s=0.1,
                background_stop_s=0.2)
    starts = window_search_frames(n_samples=x.size, **opts)
    n = int(0.005 * FS)
    used = np.zeros(x.size, dtype=bool)
    for s in starts:
        used[s:s + n] = True
    assert 0.05 < used.mean() < 0.5  # a fraction of the recording: the stretch and the window with its context
    y = np.where(used, x, np.random.default_rng(5).standard_normal(x.size))
    a, b = window_onsets(x, log_gamma=1000.0, **opts), window_onsets(y, log_gamma=1000.0, **opts)
    assert a[0].size == 1
    np.testing.assert_array_equal(a[0], b[0])
    np.testing.assert_array_equal(a[1], b[1])
    # without a usable stretch only the window's own frames are read
    near = window_search_frames(n_samples=x.size, **{**opts, "background_start_s": -0.2, "background_stop_s": 0.0})
    assert near.min() > 0.3 * FS and set(near) < set(starts)
