import numpy as np
import pytest

from analysis.errors import ParameterError
from analysis.signal.bands import linear_bands, third_octave_bands
from analysis.signal.features import calibration_offset_db, event_features, events_features

FS = 48000.0
WINDOW_S = 4096 / FS
BANDS = third_octave_bands(fmin_hz=25, fmax_hz=16000)


def sine(amplitude, freq_hz, duration_s=1.0, phase=0.3):
    t = np.arange(int(duration_s * FS)) / FS
    return amplitude * np.sin(2 * np.pi * freq_hz * t + phase)


def features(x, **kwargs):
    params = dict(sample_rate_hz=FS, onset_s=0.1, length_s=0.5, slice_window_s=WINDOW_S, slice_hop_s=0.025,
                  bands=BANDS)
    params.update(kwargs)
    return event_features(x, **params)


def band_of(layout, freq_hz):
    return int(np.flatnonzero((layout.lower_hz <= freq_hz) & (layout.upper_hz > freq_hz))[0])


@pytest.mark.parametrize("amplitude, freq_hz", [(1.0, 1000.0), (0.25, 3162.278), (0.01, 501.187)])
def test_sine_in_mid_band_reads_its_rms_in_dbfs(amplitude, freq_hz):
    # A sine of amplitude A has mean square A²/2, i.e. 20·log10(A/√2) dB re full scale (1.0); the frequencies are
    # IEC 61260-1 exact mid-band frequencies (x = 0, 5, -3).
    f = features(sine(amplitude, freq_hz))
    k = band_of(BANDS, freq_hz)
    np.testing.assert_allclose(f.levels_db[:, k], 20 * np.log10(amplitude / np.sqrt(2)), atol=0.1)
    assert f.reference == "dBFS"
    # The whole-event level over all bands is the same sine's level.
    assert f.band_energy_db == pytest.approx(20 * np.log10(amplitude / np.sqrt(2)), abs=0.1)
    # Neighbouring bands are far below (Hann side lobes fall away quickly).
    assert np.all(np.delete(f.levels_db, k, axis=1) < f.levels_db[:, [k]] - 40)


def test_result_carries_its_axes():
    f = features(sine(0.5, 1000.0))
    # Slice count from the grid formula: floor((0.5 - 4096/48000)/0.025) + 1 = 17 slices.
    assert f.levels_db.shape == (17, BANDS.n_bands)
    np.testing.assert_allclose(f.slice_times_s, np.arange(17) * 0.025 + 2048 / FS)
    np.testing.assert_array_equal(f.band_centres_hz, BANDS.centres_hz)
    np.testing.assert_array_equal(f.band_edges_hz, BANDS.edges_hz())
    assert f.padded_slices == 0


def test_white_noise_band_powers_sum_to_its_mean_square():
    rng = np.random.default_rng(42)
    x = 0.1 * rng.standard_normal(int(FS))
    layout = linear_bands(fmin_hz=0, fmax_hz=FS / 2, n_bands=12)
    f = features(x, bands=layout, length_s=0.8, slice_hop_s=WINDOW_S)
    band_power = 10 ** (f.levels_db / 10)
    # Parseval: bands covering 0..Nyquist hold the whole mean square of each frame. Frame by frame the
    # Hann-weighted mean square of the samples is the reference (Heinzel et al. 2002).
    n = 4096
    w = 0.5 - 0.5 * np.cos(2 * np.pi * np.arange(n) / n)
    starts = np.rint((0.1 + np.arange(f.n_slices) * WINDOW_S) * FS).astype(int)
    weighted_ms = np.array([np.sum((x[s:s + n] * w) ** 2) / np.sum(w**2) for s in starts])
    np.testing.assert_allclose(band_power.sum(axis=1), weighted_ms, rtol=1e-9)
    # And over the event the level approaches σ² = 0.01 (-20 dBFS).
    assert f.band_energy_db == pytest.approx(-20.0, abs=0.2)


def test_a_weighted_sine_reads_the_weighting():
    # IEC 61672-1:2013 Table 3 (from memory): A-weighting +1.0 dB at 4 kHz; the analytic formula gives +0.970 dB
    # at the exact 3981.07 Hz (REFERENCES.md [S, C]).
    x = sine(0.5, 3981.072)
    k = band_of(BANDS, 3981.072)
    plain = features(x)
    weighted = features(x, weighting="A")
    np.testing.assert_allclose(weighted.levels_db[:, k] - plain.levels_db[:, k], 0.970, atol=0.05)
    assert weighted.weighting == "A"


def test_dominant_and_centroid():
    # Two on-bin sines (bins 88 and 256 of a 4096-point frame at 48 kHz): 1031.25 Hz at amplitude 1 and
    # 3000 Hz at amplitude 0.5. Power-weighted mean frequency = (1·1031.25 + 0.25·3000)/1.25 = 1425 Hz.
    x = sine(1.0, 1031.25) + sine(0.5, 3000.0, phase=1.1)
    f = features(x)
    assert f.dominant_hz == 1031.25
    assert f.centroid_hz == pytest.approx(1425.0, abs=1.0)


def test_silent_event_gives_floor_levels_and_nan_summaries():
    f = features(np.zeros(int(FS)))
    np.testing.assert_allclose(f.levels_db, -200.0)  # floor 1e-20 -> -200 dB
    assert np.isnan(f.centroid_hz) and np.isnan(f.dominant_hz)


def test_slices_past_the_end_are_zero_padded_and_counted():
    x = sine(0.5, 1000.0, duration_s=0.5)  # 24000 samples
    f = features(x, onset_s=0.3, length_s=0.4, slice_hop_s=0.05)
    # floor((0.4 - 4096/48000)/0.05) + 1 = 7 slices; slice k starts at (0.3 + 0.05k)·48000 = 14400 + 2400k and
    # needs 4096 samples: k = 0, 1, 2 end at 18496, 20896, 23296 <= 24000; k = 3..6 run past the end (by hand).
    assert f.n_slices == 7
    assert f.padded_slices == 4
    assert np.all(np.isfinite(f.levels_db))


def test_same_instant_of_every_actuation():
    # The same burst at two onsets (whole samples apart) gives the same band levels slice by slice.
    rng = np.random.default_rng(1)
    burst = rng.standard_normal(12000) * np.hanning(12000)
    x = np.zeros(int(3 * FS))
    x[12000:24000] += burst
    x[100000:112000] += burst
    a, b = events_features(x, sample_rate_hz=FS, onsets_s=[12000 / FS, 100000 / FS], length_s=0.3,
                           slice_window_s=0.02, slice_hop_s=0.01, bands=BANDS, names=["first", "second"])
    assert (a.name, b.name) == ("first", "second")
    np.testing.assert_allclose(a.levels_db, b.levels_db, atol=1e-9)
    single = event_features(x, sample_rate_hz=FS, onset_s=100000 / FS, length_s=0.3, slice_window_s=0.02,
                            slice_hop_s=0.01, bands=BANDS)
    np.testing.assert_allclose(single.levels_db, b.levels_db, rtol=1e-12)


def test_calibrator_reads_94_db():
    # 94 dB SPL = 1 Pa RMS re 20 µPa (IEC 60942 calibrator level; 20·log10(1/20e-6) = 93.98 dB).
    assert 20 * np.log10(1 / 20e-6) == pytest.approx(93.98, abs=0.005)
    rms = 0.05
    cal = sine(rms * np.sqrt(2), 1000.0, duration_s=2.0)
    offset = calibration_offset_db(cal, sample_rate_hz=FS, level_db=94.0)
    f = features(cal, offset_db=offset)
    k = band_of(BANDS, 1000.0)
    np.testing.assert_allclose(f.levels_db[:, k], 94.0, atol=0.1)
    assert f.reference == "dB re 20 µPa"
    # A tone 20 dB quieter through the same chain reads 74 dB.
    quieter = features(cal / 10, offset_db=offset)
    np.testing.assert_allclose(quieter.levels_db[:, k], 74.0, atol=0.1)


def test_calibration_uses_the_middle_80_percent():
    tone = sine(0.1, 1000.0, duration_s=2.0)
    handled = tone.copy()
    n = tone.size
    handled[: n // 20] = 0.9  # plugging the calibrator in: first 5 % and last 5 % are not the tone
    handled[-n // 20:] = -0.9
    expected = 94.0 - 20 * np.log10(0.1 / np.sqrt(2))  # level_db - 20·log10(rms), rms of the tone A/√2
    assert calibration_offset_db(handled, sample_rate_hz=FS) == pytest.approx(expected, abs=0.01)


def test_calibration_rejects_silence():
    with pytest.raises(ParameterError, match="cal_signal is silent"):
        calibration_offset_db(np.zeros(48000), sample_rate_hz=FS)


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(slice_hop_s=-0.01), r"slice_hop_s must be a finite number > 0; got -0.01"),
        (dict(slice_window_s=0.6), r"slice_window_s must be <= length_s \(0.5 s\)"),
        (dict(weighting="B"), r"weighting must be one of \('none', 'A', 'C'\); got 'B'"),
        (dict(bands=third_octave_bands(fmin_hz=1000, fmax_hz=31500)), r"bands must have their centres below"),
        (dict(bands="third_octave"), "bands must be a BandLayout; got str"),
        (dict(offset_db=float("nan")), "offset_db must be a finite number of dB"),
    ],
)
def test_invalid_parameters_are_named(kwargs, match):
    with pytest.raises(ParameterError, match=match):
        features(sine(0.5, 1000.0), **kwargs)
