"""The rig's background band levels before the first event (analysis.signal.background)."""

import numpy as np
import pytest

from analysis.errors import ParameterError
from analysis.signal.background import background_distance, background_levels

FS = 48000


def test_a_hum_reads_its_level_in_its_band():
    # A sine of amplitude A has mean square A²/2: 20·log10(A/√2) dB re full scale (definition of RMS level).
    t = np.arange(int(0.4 * FS)) / FS
    a = 0.01
    x = a * np.sin(2 * np.pi * 1000.0 * t)
    bg = background_levels(x, sample_rate_hz=FS, first_event_s=0.35, background_max_s=0.25)
    k = int(np.argmin(np.abs(bg.band_centres_hz - 1000.0)))
    assert bg.levels_db[k] == pytest.approx(20 * np.log10(a / np.sqrt(2)), abs=0.3)
    assert bg.duration_s == pytest.approx(0.25, abs=1e-3) and bg.start_s == pytest.approx(0.095, abs=1e-3)
    others = np.delete(bg.levels_db, [k - 1, k, k + 1])
    assert others.max() < bg.levels_db[k] - 40  # the Hann window keeps it in its band


def test_white_noise_band_powers_add_up_to_its_variance():
    # Parseval: the band powers of a white noise sum to its variance over the bands covered (σ² · covered/(fs/2)).
    rng = np.random.default_rng(1)
    x = rng.normal(0, 0.01, int(0.5 * FS))
    bg = background_levels(x, sample_rate_hz=FS, first_event_s=0.45, background_max_s=0.4, fmax_hz=16000)
    total = np.sum(10 ** (bg.levels_db / 10))
    lo = bg.band_centres_hz[0] * 10 ** (-0.05)
    hi = bg.band_centres_hz[-1] * 10 ** (0.05)
    assert total == pytest.approx(1e-4 * (hi - lo) / (FS / 2), rel=0.1)


@pytest.mark.parametrize("n_samples", [12000, 12001])  # an even and an odd number of samples
def test_band_levels_are_scipys_hann_periodogram_summed_into_the_bands(n_samples):
    # Reference: scipy.signal.periodogram (Hann, density scaling, mean removed) of the same stretch, each bin
    # summed into the one-third-octave band its frequency falls in.
    from scipy.signal import periodogram

    from analysis.signal.bands import third_octave_bands

    rng = np.random.default_rng(5)
    t = np.arange(int(0.4 * FS)) / FS
    x = 0.003 + rng.normal(0, 0.001, t.size) + 0.02 * np.sin(2 * np.pi * 50 * t) + 0.01 * np.sin(2 * np.pi * 3150 * t)
    bg = background_levels(x, sample_rate_hz=FS, first_event_s=0.3, background_max_s=n_samples / FS)
    start = int(round(bg.start_s * FS))
    seg = x[start:start + int(round(bg.duration_s * FS))]
    assert seg.size == n_samples
    f, psd = periodogram(seg - seg.mean(), fs=FS, window="hann", detrend=False, scaling="density")
    layout = third_octave_bands(fmin_hz=40.0, fmax_hz=16000.0)
    expected = []
    for lo, hi, centre in zip(layout.lower_hz, layout.upper_hz, layout.centres_hz):
        if centre in bg.band_centres_hz:
            inside = (f >= lo) & (f < hi)
            expected.append(10 * np.log10(np.sum(psd[inside]) * FS / seg.size))
    np.testing.assert_allclose(bg.levels_db, expected, rtol=0, atol=1e-9)


def test_too_short_a_stretch_or_bad_samples_give_none():
    x = np.zeros(FS)
    assert background_levels(x, sample_rate_hz=FS, first_event_s=0.02) is None
    y = np.full(FS, np.nan)
    assert background_levels(y, sample_rate_hz=FS, first_event_s=0.5) is None
    assert background_levels(x, sample_rate_hz=FS, first_event_s=float("nan")) is None
    with pytest.raises(ParameterError, match="sample_rate_hz"):
        background_levels(x, sample_rate_hz=0, first_event_s=0.5)


def test_distance_grows_with_a_new_tone():
    rng = np.random.default_rng(2)
    t = np.arange(int(0.3 * FS)) / FS
    ref = [background_levels(rng.normal(0, 0.01, t.size), sample_rate_hz=FS, first_event_s=0.29).levels_db
           for _ in range(20)]
    same = background_levels(rng.normal(0, 0.01, t.size), sample_rate_hz=FS, first_event_s=0.29).levels_db
    whine = background_levels(rng.normal(0, 0.01, t.size) + 0.01 * np.sin(2 * np.pi * 3150 * t),
                              sample_rate_hz=FS, first_event_s=0.29).levels_db
    d = background_distance(np.vstack([same, whine]), np.vstack(ref))
    assert d[0] < 3 and d[1] > 10 * d[0]
    with pytest.raises(ParameterError, match="3 reference rows"):
        background_distance(same, np.vstack(ref[:2]))
