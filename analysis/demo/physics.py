"""Small sound models for the demo generator: arrays in, arrays out, no I/O.

Each function models one piece of an actuation's sound and names where its formula comes from. Where a mapping is
invented for the demo (it is physically motivated but not taken from a measurement), the docstring says so.

Units: times in s, frequencies in Hz, lengths in m, temperatures in °C, signals in full-scale units (±1.0).
Random parts take a ``numpy.random.Generator`` so a caller controls the seed.
"""

from __future__ import annotations

import numpy as np
from scipy import signal as _sig

__all__ = [
    "speed_of_sound_m_s",
    "helmholtz_frequency_hz",
    "FLOW_NOISE_EXPONENT",
    "flow_noise_level_db",
    "flow_path_gain",
    "shaped_noise",
    "flow_envelope",
    "flow_noise",
    "resonator",
    "impact_ring_hz",
    "impact_times_s",
    "impact_train",
    "damped_sinusoids",
    "mains_hum",
    "drive_noise",
    "squeal_tone",
    "pink_noise",
    "marker_pulses",
    "hard_clip",
]

# Sound power of a compact surface dipole grows as U^6 (Curle 1955, Proc. R. Soc. A 231), so the level rises by
# 60*log10(2) = +18.06 dB per doubling of flow velocity.
FLOW_NOISE_EXPONENT = 6.0


def speed_of_sound_m_s(temperature_c):
    """Speed of sound in dry air, c = 331.3*sqrt(1 + T/273.15) m/s (343.21 m/s at 20 °C).

    Ideal-gas dependence c ∝ sqrt(T_abs) from 331.3 m/s at 0 °C (Kinsler et al. 2000, Fundamentals of Acoustics,
    4th ed.).
    """
    t = np.asarray(temperature_c, dtype=float)
    return 331.3 * np.sqrt(1.0 + t / 273.15)


def helmholtz_frequency_hz(*, volume_m3, neck_radius_m, neck_length_m, temperature_c=20.0):
    """Helmholtz resonance f = (c/2π)·sqrt(A/(V·L_eff)) with A = π·a², L_eff = L + 1.7·a (both ends flanged).

    Kinsler et al. 2000, Fundamentals of Acoustics, 4th ed.; the 1.7·a end correction (0.85·a per
    flanged end) is quoted from memory. V = 2 cm³, a = 2 mm, L = 10 mm at 20 °C gives 1182.8 Hz.
    """
    v = np.asarray(volume_m3, dtype=float)
    a = np.asarray(neck_radius_m, dtype=float)
    length = np.asarray(neck_length_m, dtype=float)
    area = np.pi * a**2
    l_eff = length + 1.7 * a
    return speed_of_sound_m_s(temperature_c) / (2.0 * np.pi) * np.sqrt(area / (v * l_eff))


def flow_noise_level_db(velocity_m_s, *, reference_velocity_m_s, exponent=FLOW_NOISE_EXPONENT):
    """Level of flow noise relative to its level at ``reference_velocity_m_s``: 10·n·log10(U/U_ref) dB.

    n = 6 for a surface dipole (Curle 1955): +18.06 dB per doubling of velocity. n = 8 would be a free-jet
    quadrupole (Lighthill 1952).
    """
    u = np.asarray(velocity_m_s, dtype=float)
    return 10.0 * exponent * np.log10(u / reference_velocity_m_s)


def flow_path_gain(freqs_hz, *, low_hz, high_hz):
    """Magnitude response that shapes white noise into the flow path's broadband hump.

    A first-order high-pass at ``low_hz`` (large eddies are cut off by the narrow channel) times a second-order
    low-pass at ``high_hz`` (small eddies carry little energy). An invented but typical shape for duct flow noise.
    """
    f = np.asarray(freqs_hz, dtype=float)
    hp = (f / low_hz) / np.sqrt(1.0 + (f / low_hz) ** 2)
    lp = 1.0 / (1.0 + (f / high_hz) ** 2)
    return hp * lp


def shaped_noise(rng, *, n_samples, sample_rate_hz, low_hz, high_hz):
    """Gaussian noise of unit RMS shaped by :func:`flow_path_gain` in the frequency domain. Shape (n_samples,)."""
    spec = np.fft.rfft(rng.standard_normal(n_samples))
    spec *= flow_path_gain(np.fft.rfftfreq(n_samples, 1.0 / sample_rate_hz), low_hz=low_hz, high_hz=high_hz)
    x = np.fft.irfft(spec, n_samples)
    return x / np.sqrt(np.mean(x**2))


def flow_envelope(t_s, *, start_s, rise_s, hold_s, fall_s):
    """Relative flow velocity 0..1 over time: raised-cosine rise, plateau, raised-cosine fall. Same shape as t_s."""
    t = np.asarray(t_s, dtype=float) - start_s
    out = ((t >= rise_s) & (t <= rise_s + hold_s)).astype(float)
    up = (t > 0.0) & (t < rise_s)
    out[up] = 0.5 - 0.5 * np.cos(np.pi * t[up] / rise_s)
    down = (t > rise_s + hold_s) & (t < rise_s + hold_s + fall_s)
    out[down] = 0.5 + 0.5 * np.cos(np.pi * (t[down] - rise_s - hold_s) / fall_s)
    return out


def flow_noise(rng, *, relative_velocity, sample_rate_hz, rms_at_reference, low_hz, high_hz,
               exponent=FLOW_NOISE_EXPONENT):
    """Turbulent flow noise whose amplitude follows (U/U_ref)^(n/2), so its power follows U^n (Curle 1955).

    ``relative_velocity`` is U/U_ref per sample (shape (n,)); at 1.0 the noise has RMS ``rms_at_reference``.
    """
    u = np.asarray(relative_velocity, dtype=float)
    noise = shaped_noise(rng, n_samples=u.size, sample_rate_hz=sample_rate_hz, low_hz=low_hz, high_hz=high_hz)
    return rms_at_reference * np.abs(u) ** (exponent / 2.0) * noise


def resonator(x, *, centre_hz, q, sample_rate_hz):
    """Two-pole resonant band-pass (scipy.signal.iirpeak, unity gain at ``centre_hz``, -3 dB bandwidth centre/q)."""
    b, a = _sig.iirpeak(centre_hz, q, fs=sample_rate_hz)
    return _sig.lfilter(b, a, np.asarray(x, dtype=float))


def impact_ring_hz(diameter_um, *, reference_diameter_um, reference_ring_hz):
    """Ring frequency of one particle impact, f = f_ref·(d_ref/d): inversely proportional to particle diameter.

    Invented for the demo but physically motivated: the Hertzian contact time of a sphere striking a wall at a
    given speed scales with its radius (Johnson, Contact Mechanics, 1985), so the impact's spectral centre scales
    with 1/d. A 15 % coarser carrier lowers the centre by 13 %.
    """
    d = np.asarray(diameter_um, dtype=float)
    return reference_ring_hz * reference_diameter_um / d


def impact_times_s(rng, *, onset_s, expected_count, decay_s, window_s):
    """Poisson arrival times with rate λ(t) = λ0·exp(-(t - onset)/decay) over ``window_s`` after ``onset_s``.

    λ0 is chosen so that an untruncated release would average ``expected_count`` impacts. Arrival count is Poisson
    with mean Λ(window) = expected_count·(1 - exp(-window/decay)); given the count, times are i.i.d. from the
    normalised rate (inverse-CDF sampling). Sorted, shape (k,).
    """
    frac = 1.0 - np.exp(-window_s / decay_s)
    k = rng.poisson(expected_count * frac)
    u = rng.random(k)
    return np.sort(onset_s - decay_s * np.log1p(-u * frac))


def impact_train(times_s, *, amplitudes, ring_hz, q, n_samples, sample_rate_hz, length_tau=6.0):
    """Sum of damped sinusoids A_i·e^(-t/τ_i)·sin(2π f_i t), one per impact starting at ``times_s[i]``.

    τ_i = q/(π f_i) (Q = πfτ). Vectorised over impacts: a (k, L) kernel table added with ``np.bincount``.
    """
    times = np.asarray(times_s, dtype=float)
    out = np.zeros(n_samples)
    if times.size == 0:
        return out
    f = np.asarray(ring_hz, dtype=float) * np.ones_like(times)
    amp = np.asarray(amplitudes, dtype=float) * np.ones_like(times)
    tau = q / (np.pi * f)
    length = int(np.ceil(length_tau * tau.max() * sample_rate_hz)) + 1
    start = np.round(times * sample_rate_hz).astype(np.int64)
    # Sub-sample offset keeps each impact's phase exact even though it is placed on the sample grid.
    t = (np.arange(length)[None, :] + (start[:, None] - times[:, None] * sample_rate_hz)) / sample_rate_hz
    t = np.maximum(t, 0.0)
    kernels = amp[:, None] * np.exp(-t / tau[:, None]) * np.sin(2.0 * np.pi * f[:, None] * t)
    idx = start[:, None] + np.arange(length)[None, :]
    keep = (idx >= 0) & (idx < n_samples)
    out += np.bincount(idx[keep], weights=kernels[keep], minlength=n_samples)[:n_samples]
    return out


def damped_sinusoids(t_s, *, onset_s, amplitudes, freqs_hz, q):
    """Sum over modes of A·e^(-t'/τ)·sin(2πf t'), t' = t - onset, τ = Q/(πf) (Q = πfτ); zero before the onset.

    Models the metering click: a few lightly damped structural modes struck at once. ``t_s`` is 1-D and
    increasing; samples later than 16·τ_max after the onset (below 1e-7 of the amplitude) are left at zero.
    """
    t = np.asarray(t_s, dtype=float)
    amp = np.asarray(amplitudes, dtype=float)
    f = np.asarray(freqs_hz, dtype=float)
    tau = np.asarray(q, dtype=float) / (np.pi * f)
    out = np.zeros(t.shape)
    lo, hi = np.searchsorted(t, [onset_s, onset_s + 16.0 * tau.max()])
    tp = t[lo:hi, None] - onset_s
    out[lo:hi] = (amp * np.exp(-tp / tau) * np.sin(2.0 * np.pi * f * tp)).sum(axis=1)
    return out


def _harmonics(t_s, fundamental_hz, amplitudes, phases_rad):
    """Σ_k A_k·sin(2π·k·f·t + φ_k), k = 1..K, from one complex exponential raised to powers (cheaper than K sines)."""
    # Phase reduced to [0, 2π) in float64, then cos/sin in float32 (4x faster; error < 1e-6 of full scale).
    cycles = fundamental_hz * np.asarray(t_s, dtype=float)
    theta = (2.0 * np.pi * (cycles - np.floor(cycles))).astype(np.float32)
    base = np.empty(theta.shape, dtype=complex)
    base.real, base.imag = np.cos(theta), np.sin(theta)
    power = base.copy()
    out = np.zeros(theta.shape)
    for k, (a, ph) in enumerate(zip(amplitudes, phases_rad)):
        if k:
            power *= base
        # Im(z·e^(iφ)) = Im(z)·cos φ + Re(z)·sin φ
        out += (a * np.cos(ph)) * power.imag + (a * np.sin(ph)) * power.real
    return out


def mains_hum(t_s, *, mains_hz, amplitudes, phases_rad):
    """Mains hum: Σ_k A_k·sin(2π·k·f_mains·t + φ_k), k = 1..len(amplitudes) (fundamental and harmonics)."""
    return _harmonics(t_s, mains_hz, np.asarray(amplitudes, dtype=float), np.asarray(phases_rad, dtype=float))


def drive_noise(rng, *, t_s, sample_rate_hz, drive_hz, tone_rms, noise_rms, cutoff_hz=800.0):
    """Robot drive: a motor tone at ``drive_hz`` with two harmonics, plus low-passed mechanical noise that swells
    slowly (a 2–4 Hz modulation, the servo hunting). Invented shape. Shape as ``t_s``."""
    t = np.asarray(t_s, dtype=float)
    phases = rng.uniform(0.0, 2.0 * np.pi, 3)
    harm = np.array([1.0, 0.5, 0.25])
    tone = _harmonics(t, drive_hz, harm, phases)
    tone *= tone_rms / np.sqrt(0.5 * np.sum(harm**2))
    b, a = _sig.butter(2, cutoff_hz, fs=sample_rate_hz)
    noise = _sig.lfilter(b, a, rng.standard_normal(t.size))
    noise *= noise_rms / np.sqrt(np.mean(noise**2))
    swell = 1.0 + 0.3 * np.sin(2.0 * np.pi * rng.uniform(2.0, 4.0) * t + rng.uniform(0.0, 2.0 * np.pi))
    return tone + swell * noise


def squeal_tone(rng, *, t_s, freq_hz, rms, wander_hz=25.0):
    """Drive squeal: a tone near ``freq_hz`` whose frequency wanders slowly by about ±``wander_hz`` (stick-slip
    friction in a dry bearing) and whose amplitude flutters by ±20 %. Invented shape; RMS ≈ ``rms``."""
    t = np.asarray(t_s, dtype=float)
    rate = rng.uniform(1.0, 3.0)
    inst_hz = freq_hz + wander_hz * np.sin(2.0 * np.pi * rate * t + rng.uniform(0.0, 2.0 * np.pi))
    dt = np.diff(t, prepend=t[0] - (t[1] - t[0]) if t.size > 1 else 0.0)
    phase = 2.0 * np.pi * np.cumsum(inst_hz * dt) + rng.uniform(0.0, 2.0 * np.pi)
    flutter = 1.0 + 0.2 * np.sin(2.0 * np.pi * rng.uniform(5.0, 9.0) * t)
    return rms * np.sqrt(2.0) * flutter * np.sin(phase)


def pink_noise(rng, *, n_samples, sample_rate_hz, rms, fmin_hz=20.0):
    """Room noise: Gaussian noise with power ∝ 1/f above ``fmin_hz`` (flat below), RMS ``rms``. Shape (n_samples,)."""
    spec = np.fft.rfft(rng.standard_normal(n_samples))
    f = np.fft.rfftfreq(n_samples, 1.0 / sample_rate_hz)
    spec /= np.sqrt(np.maximum(f, fmin_hz))
    x = np.fft.irfft(spec, n_samples)
    return rms * x / np.sqrt(np.mean(x**2))


def marker_pulses(n_samples, *, sample_rate_hz, times_s, width_s=0.002, level=0.8):
    """Marker channel: 0 everywhere, rectangular pulses of ``level`` lasting ``width_s`` from each marker time."""
    t = np.arange(n_samples) / sample_rate_hz
    times = np.asarray(times_s, dtype=float).reshape(-1, 1)
    on = ((t >= times) & (t < times + width_s)).any(axis=0) if times.size else np.zeros(n_samples, bool)
    return np.where(on, level, 0.0)


def hard_clip(x, *, limit=1.0):
    """Hard clipping at ±limit, as an overdriven recorder input does."""
    return np.clip(np.asarray(x, dtype=float), -limit, limit)
