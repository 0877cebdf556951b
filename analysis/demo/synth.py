"""One actuation's sound from its planned parameters: pure (arrays out, no I/O).

Levels are set at the reference microphone distance (0.10 m) and 0 dB rig gain, then scaled by the rig:

==========================  ============================================  =====================================
piece                       level at the reference (RMS unless noted)     variation
==========================  ============================================  =====================================
flow noise (plateau)        -27 dBFS at nominal flow                      flow: unit sd 2 %, rig-day sd 0.5 %,
                                                                          actuation sd 1 % (U⁶ -> 0.5/0.13/0.26 dB)
cavity resonance            +12 dB at the peak over the flow spectrum     Q 12 (unit sd 1); f from geometry and
                            (resonator output ×3 added to the flow)       temperature (see below)
powder-release burst        ≈ -27 dBFS over its first 100 ms; +10 dB      impacts ≈ 220 per release (lot sd 5 %,
                            over the flow noise at 6.3 kHz                Poisson), decay 70 ms (actuation sd 5 %)
metering click              peak ≈ -12 dBFS, modes 2.3/5.2/9.1 kHz        unit sd 1.5 % in frequency, 1 dB level
mains hum, drive, room      per rig (scenario), ≈ -50 to -62 dBFS         day sd 1 dB (hum), rig-day 0.5 dB (room)
==========================  ============================================  =====================================

Normal peaks (all pieces together, default scenario): median -9 dBFS, loudest about -6 dBFS; never clipped.
Cavity: V = 2.0 cm³ (unit sd 0.8 %), neck radius 2.0 mm (unit sd 0.5 %), neck length 10.0 mm (unit sd 1 %) ->
1183 Hz at 20 °C, unit-to-unit sd ≈ 0.6 %; temperature: site mean, day sd 1 °C, actuation sd 0.2 °C (0.17 %/°C).
Carrier: median particle diameter 60 µm (lot sd 2 %, particle-to-particle geometric sd 1.25) -> impact ring centre
6.5 kHz ∝ 1/d. Timing: marker 1 at 0.30 s ± 10 ms, click 1–5 ms later, marker 2 at click + 80 ms ± 5 ms, flow rise
30 ms, plateau 0.6 s ± 20 ms, fall 40 ms, burst 10–40 ms after marker 2.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analysis.demo import physics

__all__ = ["ActuationParams", "Rendered", "render_actuation", "REFERENCE_DISTANCE_M"]

REFERENCE_DISTANCE_M = 0.10
FLOW_RMS_DBFS = -27.0
FLOW_LOW_HZ, FLOW_HIGH_HZ = 300.0, 4000.0
RESONANCE_COUPLING = 3.0          # resonator output added ×3: +12 dB at the peak
BURST_IMPACT_AMP = 0.125          # mean peak amplitude of one impact at the reference
IMPACT_COUNT = 220.0
IMPACT_DECAY_S = 0.07
IMPACT_WINDOW_S = 0.25
IMPACT_Q = 5.0
CARRIER_REFERENCE_UM = 60.0
IMPACT_REFERENCE_HZ = 6500.0
CLICK_FREQS_HZ = (2300.0, 5200.0, 9100.0)
CLICK_AMPS = (0.2, 0.12, 0.07)
CLICK_Q = (20.0, 30.0, 25.0)
HUM_HARMONICS = (1.0, 0.3, 0.5, 0.15, 0.25)   # relative amplitudes of f, 2f, 3f, 4f, 5f (odd ones stronger)
MARKER_LEVEL = 0.8
MARKER_WIDTH_S = 0.002


def _db(x_db: float) -> float:
    return 10.0 ** (x_db / 20.0)


@dataclass(frozen=True)
class ActuationParams:
    """Everything above the actuation level, fixed by the plan (lot, unit, rig, day, fault)."""

    sample_rate_hz: int
    duration_s: float
    mains_hz: float
    markers: str                    # "channel" or "sidecar"
    site_temperature_c: float       # site mean + that day's offset
    flow_factor: float              # unit × rig-day flow relative to nominal
    volume_m3: float
    neck_radius_m: float
    neck_length_m: float
    resonance_q: float
    d50_um: float
    powder_factor: float
    click_freq_factor: float
    click_level_db: float
    distance_factor: float          # reference distance / microphone distance (device sounds fall as 1/r)
    rig_gain: float                 # rig's recorder gain, linear (applies to everything the microphone hears)
    hum_rms: float
    drive_hz: float
    drive_rms: float
    room_rms: float
    squeal_db_re_flow: float | None = None
    squeal_hz: float = 3400.0
    clip_gain_range: tuple[float, float] | None = None
    dropout_ms: tuple[float, float] | None = None
    drop_marker_2: bool = False


@dataclass(frozen=True)
class Rendered:
    """Samples (frames, channels) in ±1.0, markers as logged, and the realised actuation-level values."""

    samples: np.ndarray
    markers_s: tuple[float, ...]
    truth: dict


def render_actuation(p: ActuationParams, rng: np.random.Generator) -> Rendered:
    """Synthesise one actuation. Channel 0 = microphone; channel 1 = marker pulses when ``p.markers == "channel"``."""
    fs = p.sample_rate_hz
    n = int(round(p.duration_s * fs))
    t = np.arange(n) / fs

    # Timeline (all jitter is actuation-to-actuation).
    marker_1 = 0.30 + rng.uniform(-0.010, 0.010)
    click_onset = marker_1 + rng.uniform(0.001, 0.005)
    marker_2 = click_onset + 0.08 + rng.uniform(-0.005, 0.005)
    hold_s = 0.6 + rng.uniform(-0.02, 0.02)
    burst_onset = marker_2 + rng.uniform(0.010, 0.040)

    temperature_c = p.site_temperature_c + 0.2 * rng.standard_normal()
    flow = p.flow_factor * (1.0 + 0.01 * rng.standard_normal())
    helmholtz_hz = float(physics.helmholtz_frequency_hz(
        volume_m3=p.volume_m3, neck_radius_m=p.neck_radius_m, neck_length_m=p.neck_length_m,
        temperature_c=temperature_c))

    # Device sounds at the reference distance.
    velocity = flow * physics.flow_envelope(t, start_s=marker_2, rise_s=0.03, hold_s=hold_s, fall_s=0.04)
    flow_rms = _db(FLOW_RMS_DBFS)
    air = physics.flow_noise(rng, relative_velocity=velocity, sample_rate_hz=fs, rms_at_reference=flow_rms,
                             low_hz=FLOW_LOW_HZ, high_hz=FLOW_HIGH_HZ)
    cavity = RESONANCE_COUPLING * physics.resonator(air, centre_hz=helmholtz_hz, q=p.resonance_q, sample_rate_hz=fs)

    decay_s = IMPACT_DECAY_S * (1.0 + 0.05 * rng.standard_normal())
    times = physics.impact_times_s(rng, onset_s=burst_onset, expected_count=IMPACT_COUNT * p.powder_factor,
                                   decay_s=decay_s, window_s=IMPACT_WINDOW_S)
    diam = p.d50_um * np.exp(np.log(1.25) * rng.standard_normal(times.size))
    ring = np.minimum(physics.impact_ring_hz(diam, reference_diameter_um=CARRIER_REFERENCE_UM,
                                             reference_ring_hz=IMPACT_REFERENCE_HZ), 0.4 * fs)
    amps = BURST_IMPACT_AMP * rng.lognormal(-0.06, 0.35, times.size) * rng.choice([-1.0, 1.0], times.size)
    burst = physics.impact_train(times, amplitudes=amps, ring_hz=ring, q=IMPACT_Q, n_samples=n, sample_rate_hz=fs)

    click_f = np.array(CLICK_FREQS_HZ) * p.click_freq_factor * (1.0 + 0.003 * rng.standard_normal(3))
    click_a = np.array(CLICK_AMPS) * _db(p.click_level_db + 0.5 * rng.standard_normal())
    click = physics.damped_sinusoids(t, onset_s=click_onset, amplitudes=click_a, freqs_hz=click_f, q=CLICK_Q)

    device = air + cavity + burst + click

    # Rig sounds, as heard at this rig's microphone position (their levels are per rig in the scenario).
    hum_amps = p.hum_rms * np.array(HUM_HARMONICS) / np.sqrt(0.5 * np.sum(np.square(HUM_HARMONICS)))
    hum = physics.mains_hum(t, mains_hz=p.mains_hz * (1.0 + 2e-4 * rng.standard_normal()), amplitudes=hum_amps,
                            phases_rad=rng.uniform(0.0, 2.0 * np.pi, len(HUM_HARMONICS)))
    drive = physics.drive_noise(rng, t_s=t, sample_rate_hz=fs, drive_hz=p.drive_hz, tone_rms=0.5 * p.drive_rms,
                                noise_rms=0.85 * p.drive_rms)
    room = physics.pink_noise(rng, n_samples=n, sample_rate_hz=fs, rms=p.room_rms)
    rig = hum + drive + room
    if p.squeal_db_re_flow is not None:
        rig = rig + physics.squeal_tone(rng, t_s=t, freq_hz=p.squeal_hz,
                                        rms=flow_rms * _db(p.squeal_db_re_flow))

    mic = p.rig_gain * (p.distance_factor * device + rig)
    truth = {
        "temperature_c": temperature_c,
        "flow_rel": flow,
        "helmholtz_hz": helmholtz_hz,
        "marker_1_s": marker_1,
        "click_onset_s": click_onset,
        "marker_2_s": marker_2,
        "burst_onset_s": burst_onset,
        "impacts": int(times.size),
        "clip_gain": None,
        "dropout_start_s": None,
        "dropout_s": None,
    }
    if p.clip_gain_range is not None:
        gain = rng.uniform(*p.clip_gain_range)
        mic = physics.hard_clip(gain * mic)
        truth["clip_gain"] = gain
    if p.dropout_ms is not None:
        length_s = rng.uniform(*p.dropout_ms) / 1000.0
        start = rng.uniform(burst_onset, burst_onset + 0.3 - length_s)
        i0, i1 = int(round(start * fs)), int(round((start + length_s) * fs))
        mic[i0:i1] = 0.0
        truth["dropout_start_s"], truth["dropout_s"] = i0 / fs, (i1 - i0) / fs
    truth["peak_dbfs"] = float(20.0 * np.log10(max(np.max(np.abs(mic)), 1e-12)))

    markers = (marker_1,) if p.drop_marker_2 else (marker_1, marker_2)
    if p.markers == "channel":
        pulses = physics.marker_pulses(n, sample_rate_hz=fs, times_s=markers, width_s=MARKER_WIDTH_S,
                                       level=MARKER_LEVEL)
        samples = np.stack([mic, pulses], axis=1)
    else:
        samples = mic[:, None]
    return Rendered(samples=samples, markers_s=tuple(round(m, 4) for m in markers), truth=truth)
