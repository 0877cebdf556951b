"""Sound models of the demo generator, checked against their published formulas computed here independently."""

import numpy as np
import pytest

from analysis.demo import physics

FS = 48000


def third_octave_level_db(x, *, centre_hz, sample_rate_hz=FS):
    """Band power in dB over fm·G^(-1/6)..fm·G^(1/6), G = 10^(3/10) (IEC 61260-1:2014 base-10 edges)."""
    g = 10.0 ** 0.3
    spec = np.abs(np.fft.rfft(x)) ** 2
    f = np.fft.rfftfreq(len(x), 1.0 / sample_rate_hz)
    band = (f >= centre_hz * g ** (-1 / 6)) & (f < centre_hz * g ** (1 / 6))
    return 10.0 * np.log10(spec[band].sum())


def test_speed_of_sound_at_20_c():
    # 343.21 m/s at 20 °C from c = 331.3·sqrt(1 + T/273.15) (REFERENCES.md, [S, C])
    assert physics.speed_of_sound_m_s(20.0) == pytest.approx(343.21, abs=0.01)


def test_helmholtz_check_value():
    # Kinsler et al. 2000, Fundamentals of Acoustics 4th ed. (end correction 1.7a from memory): V = 2 cm³, a = 2 mm,
    # L = 10 mm, 20 °C -> 1182.8 Hz (REFERENCES.md, [C])
    f = physics.helmholtz_frequency_hz(volume_m3=2e-6, neck_radius_m=2e-3, neck_length_m=10e-3, temperature_c=20.0)
    assert f == pytest.approx(1182.8, abs=0.1)


def test_helmholtz_scales_as_inverse_square_root_of_volume():
    # f ∝ V^(-1/2) from the Helmholtz formula
    f1 = physics.helmholtz_frequency_hz(volume_m3=2e-6, neck_radius_m=2e-3, neck_length_m=10e-3)
    f2 = physics.helmholtz_frequency_hz(volume_m3=0.5e-6, neck_radius_m=2e-3, neck_length_m=10e-3)
    assert f2 / f1 == pytest.approx(2.0, rel=1e-12)


def test_flow_level_law_is_18_06_db_per_doubling():
    # Curle 1955 surface dipole W ∝ U^6: 60·log10(2) = 18.06 dB per doubling (REFERENCES.md, [S, C])
    assert physics.flow_noise_level_db(20.0, reference_velocity_m_s=10.0) == pytest.approx(18.06, abs=0.01)


@pytest.mark.parametrize("centre_hz", [500.0, 1000.0, 2000.0])
def test_flow_noise_band_level_follows_u6(centre_hz):
    # Independent noise draws at U and 1.5·U: band level difference 60·log10(1.5) = 10.57 dB (Curle 1955)
    n = 4 * FS
    kw = dict(sample_rate_hz=FS, rms_at_reference=0.05, low_hz=300.0, high_hz=4000.0)
    lo = physics.flow_noise(np.random.default_rng(1), relative_velocity=np.full(n, 1.0), **kw)
    hi = physics.flow_noise(np.random.default_rng(2), relative_velocity=np.full(n, 1.5), **kw)
    diff = third_octave_level_db(hi, centre_hz=centre_hz) - third_octave_level_db(lo, centre_hz=centre_hz)
    assert diff == pytest.approx(60.0 * np.log10(1.5), abs=0.4)


def test_resonator_peak_at_centre():
    # White noise through the 2-pole resonator: the averaged spectrum peaks at the centre frequency
    from scipy.signal import welch

    x = physics.resonator(np.random.default_rng(3).standard_normal(4 * FS), centre_hz=1182.8, q=12.0,
                          sample_rate_hz=FS)
    f, p = welch(x, FS, nperseg=8192)
    assert f[np.argmax(p)] == pytest.approx(1182.8, abs=FS / 8192)


def test_damped_sinusoid_decays_as_q_says():
    # A·e^(-t/τ)·sin(2πft) with Q = πfτ: successive peaks one period apart fall by exp(-π/Q) (REFERENCES.md, [S])
    f, q = 1000.0, 10.0
    t = np.arange(FS // 10) / FS
    x = physics.damped_sinusoids(t, onset_s=0.0, amplitudes=[1.0], freqs_hz=[f], q=[q])
    period = int(FS / f)
    first = np.max(x[:period])
    second = np.max(x[period:2 * period])
    assert second / first == pytest.approx(np.exp(-np.pi / q), rel=2e-3)
    assert np.all(physics.damped_sinusoids(t, onset_s=0.05, amplitudes=[1.0], freqs_hz=[f], q=[q])[t < 0.05] == 0)


def test_impact_count_and_times_follow_the_decaying_rate():
    # Poisson process with rate ∝ exp(-t/τ) on [0, w]: mean count N·(1 - e^(-w/τ)); mean arrival time of the
    # truncated exponential τ - w·e^(-w/τ)/(1 - e^(-w/τ)) (standard results for an exponential density)
    rng = np.random.default_rng(4)
    n_exp, tau, w, onset = 200.0, 0.07, 0.25, 0.4
    draws = [physics.impact_times_s(rng, onset_s=onset, expected_count=n_exp, decay_s=tau, window_s=w)
             for _ in range(400)]
    counts = np.array([d.size for d in draws])
    frac = 1.0 - np.exp(-w / tau)
    assert counts.mean() == pytest.approx(n_exp * frac, rel=0.02)
    assert counts.var() == pytest.approx(n_exp * frac, rel=0.2)          # Poisson: variance = mean
    times = np.concatenate(draws) - onset
    assert times.min() >= 0.0 and times.max() <= w
    assert times.mean() == pytest.approx(tau - w * np.exp(-w / tau) / frac, rel=0.01)


def test_impact_ring_frequency_inverse_to_diameter():
    f = physics.impact_ring_hz(np.array([60.0, 69.6]), reference_diameter_um=60.0, reference_ring_hz=6500.0)
    assert f[0] == pytest.approx(6500.0)
    assert f[0] / f[1] == pytest.approx(1.16)


def test_impact_train_places_each_impact_at_its_time():
    n = FS // 10
    x = physics.impact_train(np.array([0.01, 0.05]), amplitudes=[1.0, 0.5], ring_hz=[5000.0, 8000.0], q=5.0,
                             n_samples=n, sample_rate_hz=FS)
    assert np.all(x[: int(0.01 * FS)] == 0.0)
    # each kernel matches the closed form A·e^(-t/τ)·sin(2πft), τ = Q/(πf)
    t = np.arange(200) / FS
    ref = 0.5 * np.exp(-t * np.pi * 8000.0 / 5.0) * np.sin(2 * np.pi * 8000.0 * t)
    i0 = int(0.05 * FS)
    assert np.allclose(x[i0:i0 + 80], ref[:80], atol=1e-9)          # within the 6·τ_max kernel length
    assert np.max(np.abs(x[i0 + 200:])) == 0.0


def test_mains_hum_matches_direct_sum():
    t = np.arange(FS) / FS
    amps, phases = [1.0, 0.3, 0.5], [0.1, 1.0, 2.0]
    x = physics.mains_hum(t, mains_hz=60.0, amplitudes=amps, phases_rad=phases)
    ref = sum(a * np.sin(2 * np.pi * k * 60.0 * t + p) for k, (a, p) in enumerate(zip(amps, phases), start=1))
    assert np.max(np.abs(x - ref)) < 1e-5


def test_marker_pulses_are_2_ms_at_0_8():
    x = physics.marker_pulses(FS, sample_rate_hz=FS, times_s=[0.3, 0.4])
    assert np.count_nonzero(x) == 2 * 96          # 2 ms at 48 kHz = 96 samples per pulse
    assert set(np.unique(x)) == {0.0, 0.8}
    assert x[int(0.3 * FS)] == 0.8 and x[int(0.3 * FS) - 1] == 0.0


def test_hard_clip():
    assert np.array_equal(physics.hard_clip(np.array([-3.0, 0.5, 2.0])), [-1.0, 0.5, 1.0])
