import numpy as np
import pytest

from analysis.errors import ParameterError
from analysis.signal.bands import BandLayout, band_matrix, linear_bands, third_octave_bands

# ISO 266 R10 preferred numbers, 20 Hz .. 20 kHz (the nominal one-third-octave mid-band frequencies).
ISO_266_R10 = [20, 25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200, 250, 315, 400, 500, 630, 800, 1000, 1250, 1600,
               2000, 2500, 3150, 4000, 5000, 6300, 8000, 10000, 12500, 16000, 20000]


def test_third_octave_exact_mid_band_and_edges():
    layout = third_octave_bands(fmin_hz=20, fmax_hz=20000)
    assert layout.kind == "third_octave"
    assert layout.n_bands == 31
    # IEC 61260-1:2014 base-10, fm = 1000·G^(x/3): x = -17 -> 19.953 Hz, edges 17.783 / 22.387 Hz.
    np.testing.assert_allclose(layout.centres_hz[0], 19.953, atol=5e-4)
    np.testing.assert_allclose(layout.edges_hz()[0], [17.783, 22.387], atol=5e-4)
    # IEC 61260-1:2014: x = 5 -> 3162.278 Hz; x = 13 -> 19952.623 Hz; x = 0 -> 1000 Hz.
    np.testing.assert_allclose(layout.centres_hz[17 + 5], 3162.278, atol=5e-4)
    np.testing.assert_allclose(layout.centres_hz[-1], 19952.623, atol=5e-4)
    assert layout.centres_hz[17] == pytest.approx(1000.0, rel=1e-12)


def test_third_octave_nominal_values_are_iso_266():
    layout = third_octave_bands(fmin_hz=20, fmax_hz=20000)
    # ISO 266 R10 list above; exact equality: nominal values are labels users type and compare.
    assert layout.nominal_hz.tolist() == ISO_266_R10


def test_third_octave_nominal_values_extend_by_decades():
    layout = third_octave_bands(fmin_hz=10, fmax_hz=40000)
    # ISO 266 R10 extended one decade down and up: 10, 12.5, 16 ... 25000, 31500, 40000.
    assert layout.nominal_hz[:3].tolist() == [10, 12.5, 16]
    assert layout.nominal_hz[-3:].tolist() == [25000, 31500, 40000]
    assert layout.n_bands == 37


def test_third_octave_edges_meet_and_bandwidth_ratio():
    layout = third_octave_bands(fmin_hz=20, fmax_hz=20000)
    # IEC 61260-1:2014: edges fm·G^(∓1/6), so neighbouring bands share an edge and upper/lower = G^(1/3).
    np.testing.assert_allclose(layout.upper_hz[:-1], layout.lower_hz[1:], rtol=1e-12)
    np.testing.assert_allclose(layout.upper_hz / layout.lower_hz, 10 ** 0.1, rtol=1e-12)


def test_third_octave_range_takes_nominal_values_users_type():
    # 200 Hz nominal is 199.53 Hz exact (IEC 61260-1, x = -7); typing 200 must include it, 210 must not.
    assert third_octave_bands(fmin_hz=200, fmax_hz=250).nominal_hz.tolist() == [200, 250]
    assert third_octave_bands(fmin_hz=210, fmax_hz=1000).nominal_hz[0] == 250
    # 3150 Hz nominal is 3162.28 Hz exact: fmax 3150 includes it.
    assert third_octave_bands(fmin_hz=1000, fmax_hz=3150).nominal_hz[-1] == 3150


def test_linear_bands_edges_and_centres():
    layout = linear_bands(fmin_hz=0, fmax_hz=1000, n_bands=4)
    assert layout.kind == "linear"
    np.testing.assert_allclose(layout.edges_hz(), [[0, 250], [250, 500], [500, 750], [750, 1000]])
    np.testing.assert_allclose(layout.centres_hz, [125, 375, 625, 875])
    np.testing.assert_allclose(layout.nominal_hz, layout.centres_hz)


def test_layout_arrays_are_read_only():
    layout = linear_bands(fmin_hz=0, fmax_hz=1000, n_bands=4)
    with pytest.raises(ValueError):
        layout.centres_hz[0] = 1.0


@pytest.mark.parametrize(
    "call, match",
    [
        (lambda: third_octave_bands(fmin_hz=1000, fmax_hz=1000 * 0.5), "fmax_hz must be finite and > fmin_hz"),
        (lambda: third_octave_bands(fmin_hz=1000, fmax_hz=1000), "fmax_hz must be finite and > fmin_hz"),
        (lambda: third_octave_bands(fmin_hz=0, fmax_hz=1000), "fmin_hz must be a finite frequency > 0 Hz"),
        (lambda: linear_bands(fmin_hz=500, fmax_hz=100, n_bands=3), r"fmax_hz .* got 100"),
        (lambda: linear_bands(fmin_hz=0, fmax_hz=100, n_bands=0), "n_bands must be an integer >= 1; got 0"),
        (lambda: third_octave_bands(fmin_hz=1030, fmax_hz=1200), "no one-third-octave band"),
        (lambda: BandLayout("octave", [1.0], [0.5], [2.0], [1.0]), "kind must be one of"),
    ],
)
def test_invalid_band_parameters_name_the_parameter(call, match):
    with pytest.raises(ParameterError, match=match):
        call()


def test_band_matrix_splits_bins_by_overlap():
    # Bins every 10 Hz, each covering ±5 Hz; band 30..52 Hz takes half of bin 30 Hz (25..35), bin 40 whole,
    # and 7/10 of bin 50 (45..55). Fractions computed by hand from the interval overlaps.
    freqs = np.arange(0.0, 101.0, 10.0)
    layout = BandLayout("linear", [41.0], [30.0], [52.0], [41.0])
    m = band_matrix(freqs, 10.0, layout)
    expected = np.zeros((freqs.size, 1))
    expected[3, 0], expected[4, 0], expected[5, 0] = 0.5, 1.0, 0.7
    np.testing.assert_allclose(m, expected, atol=1e-12)


def test_band_narrower_than_a_bin_gets_its_share():
    # A 2 Hz wide band inside one 10 Hz bin gets 2/10 of that bin's power (hand calculation).
    freqs = np.arange(0.0, 101.0, 10.0)
    layout = BandLayout("linear", [40.0], [39.0], [41.0], [40.0])
    m = band_matrix(freqs, 10.0, layout)
    assert m[4, 0] == pytest.approx(0.2)
    assert np.count_nonzero(m) == 1


def test_band_matrix_rows_sum_to_one_inside_covered_range():
    fs, n = 48000.0, 4096
    freqs = np.fft.rfftfreq(n, 1 / fs)
    df = fs / n
    layout = third_octave_bands(fmin_hz=25, fmax_hz=16000)
    m = band_matrix(freqs, df, layout, nyquist_hz=fs / 2)
    inside = (freqs - df / 2 >= layout.lower_hz[0]) & (freqs + df / 2 <= layout.upper_hz[-1])
    # Energy conservation: a bin wholly inside contiguous bands is shared out completely.
    np.testing.assert_allclose(m[inside].sum(axis=1), 1.0, rtol=1e-12)
    outside = (freqs + df / 2 <= layout.lower_hz[0]) | (freqs - df / 2 >= layout.upper_hz[-1])
    assert np.all(m[outside] == 0)
    # So any power spectrum keeps its total over the covered range.
    rng = np.random.default_rng(7)
    power = rng.random(freqs.size)
    assert (power @ m).sum() == pytest.approx((power * m.sum(axis=1)).sum(), rel=1e-12)
    assert (power[inside] @ m[inside]).sum() == pytest.approx(power[inside].sum(), rel=1e-12)


def test_band_matrix_one_sided_dc_and_nyquist_bins():
    # One-sided spectrum: the DC bin holds power of [0, df/2] only, the Nyquist bin of [fs/2 - df/2, fs/2].
    fs, n = 8000.0, 8
    freqs = np.fft.rfftfreq(n, 1 / fs)  # 0, 1000, ..., 4000 Hz
    layout = linear_bands(fmin_hz=0, fmax_hz=fs / 2, n_bands=1)
    m = band_matrix(freqs, fs / n, layout, nyquist_hz=fs / 2)
    np.testing.assert_allclose(m[:, 0], 1.0)


def test_band_matrix_applies_power_weighting():
    freqs = np.array([0.0, 100.0, 200.0])
    layout = linear_bands(fmin_hz=50, fmax_hz=250, n_bands=2)
    plain = band_matrix(freqs, 100.0, layout)
    weighted = band_matrix(freqs, 100.0, layout, weighting_db=np.array([-np.inf, -10.0, 3.0]))
    # 10^(w/10): -10 dB is a power ratio of 0.1; +3 dB of 10^0.3; -inf removes the bin.
    np.testing.assert_allclose(weighted[1], 0.1 * plain[1])
    np.testing.assert_allclose(weighted[2], 10 ** 0.3 * plain[2])
    assert np.all(weighted[0] == 0)


def test_band_matrix_rejects_bad_input():
    layout = linear_bands(fmin_hz=0, fmax_hz=100, n_bands=2)
    with pytest.raises(ParameterError, match="bin_width_hz must be a finite width > 0 Hz; got -1"):
        band_matrix(np.arange(3.0), -1, layout)
    with pytest.raises(ParameterError, match=r"weighting_db must have the shape of freqs_hz \(3,\); got \(2,\)"):
        band_matrix(np.arange(3.0), 1.0, layout, weighting_db=np.zeros(2))
    with pytest.raises(ParameterError, match="layout must be a BandLayout"):
        band_matrix(np.arange(3.0), 1.0, "third_octave")


# ------------------------------------------------------------------------------------- 1/b-octave bands
from analysis.signal.bands import fractional_octave_bands  # noqa: E402


@pytest.mark.parametrize("b", [6, 12, 24])
def test_fractional_octave_mid_bands_and_edges_follow_iec_61260_1(b):
    # IEC 61260-1:2014, 5.4-5.6 (base-10, G = 10^(3/10), fr = 1000 Hz), as remembered: odd b: fm = fr·G^(x/b);
    # even b: fm = fr·G^((2x+1)/(2b)); edges f1 = fm·G^(-1/(2b)), f2 = fm·G^(1/(2b)). Computed here independently.
    g = 10 ** 0.3
    lay = fractional_octave_bands(fraction=b, fmin_hz=200.0, fmax_hz=8000.0)
    x = np.round(np.log(lay.centres_hz / 1000.0) / np.log(g) * 2 * b - 1) / 2  # even b: (2x+1)/(2b)
    expected = 1000.0 * g ** ((2 * x + 1) / (2 * b))
    np.testing.assert_allclose(lay.centres_hz, expected, rtol=1e-12)
    np.testing.assert_allclose(lay.lower_hz, expected * g ** (-1 / (2 * b)), rtol=1e-12)
    np.testing.assert_allclose(lay.upper_hz, expected * g ** (1 / (2 * b)), rtol=1e-12)
    np.testing.assert_allclose(lay.upper_hz[:-1], lay.lower_hz[1:], rtol=1e-12)  # adjacent, no gaps
    np.testing.assert_allclose(lay.upper_hz / lay.lower_hz, g ** (1 / b))  # one 1/b octave wide (base 10)
    assert np.isclose(lay.upper_hz, 1000.0).any()  # even b: 1000 Hz is a band edge, not a mid-band
    assert lay.centres_hz[0] >= 200.0 * 0.97 and lay.centres_hz[-1] <= 8000.0 * 1.03


def test_twelfth_octave_values_by_hand():
    # b = 12, x = 0 and x = -1: 1000·G^(1/24) = 1000·10^(0.0125) = 1029.20 Hz and 1000·G^(-1/24) = 971.63 Hz
    # (hand calculation from the formula above); the first one's edges 1000 Hz and 1000·10^(0.025) = 1059.25 Hz.
    lay = fractional_octave_bands(fraction=12, fmin_hz=900.0, fmax_hz=1100.0)
    assert 1029.20 == pytest.approx(lay.centres_hz[np.argmin(np.abs(lay.centres_hz - 1029.2))], abs=0.01)
    assert 971.63 == pytest.approx(lay.centres_hz[np.argmin(np.abs(lay.centres_hz - 971.6))], abs=0.01)
    k = int(np.argmin(np.abs(lay.centres_hz - 1029.2)))
    assert lay.lower_hz[k] == pytest.approx(1000.0) and lay.upper_hz[k] == pytest.approx(1059.25, abs=0.01)
    assert lay.kind == "fractional_octave" and lay.nominal_hz[k] == 1030.0


def test_fractional_octave_refuses_other_fractions():
    with pytest.raises(ParameterError, match="fraction must be one of 6, 12, 24"):
        fractional_octave_bands(fraction=5, fmin_hz=100.0, fmax_hz=1000.0)
    with pytest.raises(ParameterError, match="no 1/24-octave band"):
        fractional_octave_bands(fraction=24, fmin_hz=1001.0, fmax_hz=1002.0)
