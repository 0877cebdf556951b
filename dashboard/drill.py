"""The drill-down's heavy arithmetic: waveform envelope, spectrogram and markers, and the archived audio as WAV
(whole actuation or one event). Array functions are pure; ``load_actuation`` and ``wav_bytes`` read the archived
original (``load_actuation`` keeps its result in a diskcache keyed by the recording's content hash, so a cached
result can never belong to another file).
"""

from __future__ import annotations

import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import soundfile as sf

from analysis.io import read_audio
from analysis.signal.events import marker_edges
from analysis.signal.spectra import rfft_freqs, stft_power

__all__ = ["waveform_envelope", "spectrogram_db", "marker_times", "load_actuation",
           "ActuationAudio", "wav_bytes", "EVENT_PAD_S"]

#: Audio of one event is cut with this much before its onset and after its end (s), so its start is heard.
EVENT_PAD_S = 0.05


def waveform_envelope(x, *, sample_rate_hz: float, n_buckets: int = 1500):
    """Min/max envelope of a signal in ``n_buckets`` equal time buckets: (t (s, bucket starts), lo, hi), each
    (min(n_buckets, len(x)),). Keeps every peak that a plot of the full signal would show at that width."""
    x = np.asarray(x, dtype=np.float32)
    n = x.size
    if n == 0:
        return np.zeros(0), np.zeros(0), np.zeros(0)
    k = int(min(n_buckets, n))
    edges = np.linspace(0, n, k + 1).astype(np.int64)
    lo = np.minimum.reduceat(x, edges[:-1])
    hi = np.maximum.reduceat(x, edges[:-1])
    return edges[:-1] / float(sample_rate_hz), lo.astype(float), hi.astype(float)


def spectrogram_db(x, *, sample_rate_hz: float, window_s: float = 0.01, hop_s: float = 0.0025,
                   max_frames: int = 480, max_bins: int = 257):
    """Short-time power spectrum in dB re full scale² (mean-square scaling, Hann window):
    (times (s, frame centres) (F,), freqs (Hz) (K,), level_db (F, K)). Hop widened so at most ``max_frames``
    frames are made; bins above ``max_bins`` are merged by taking their maximum (what is drawn)."""
    x = np.asarray(x, dtype=np.float64)
    fs = float(sample_rate_hz)
    n_win = max(16, int(round(window_s * fs)))
    if x.size < n_win:
        x = np.pad(x, (0, n_win - x.size))
    hop = max(1, int(round(hop_s * fs)), int(math.ceil((x.size - n_win) / max(1, max_frames - 1))))
    starts = np.arange(0, x.size - n_win + 1, hop)
    power = stft_power(x, sample_rate_hz=fs, starts=starts, n_window=n_win, scaling="mean_square")
    freqs = rfft_freqs(n_win, fs)
    if freqs.size > max_bins:
        groups = np.linspace(0, freqs.size, max_bins + 1).astype(int)
        power = np.maximum.reduceat(power, groups[:-1], axis=1)
        freqs = freqs[groups[:-1]]
    level = 10.0 * np.log10(np.maximum(power, 1e-20))
    return (starts + n_win / 2) / fs, freqs, level


def marker_times(samples, *, sample_rate_hz: float, sidecar: dict) -> tuple[float, ...]:
    """Marker times (s): the sidecar's markers_s, else the rising edges of the marker channel it names."""
    if sidecar.get("markers_s"):
        return tuple(float(m) for m in sidecar["markers_s"])
    ch = (sidecar.get("channels") or {}).get("marker")
    if ch is None or ch >= samples.shape[1]:
        return ()
    return tuple(float(t) for t in marker_edges(samples[:, ch], sample_rate_hz=sample_rate_hz))


def _mic(samples, sidecar: dict):
    ch = (sidecar.get("channels") or {}).get("mic", 0)
    return samples[:, ch if ch < samples.shape[1] else 0]


@dataclass(frozen=True)
class ActuationAudio:
    """What the drill-down draws from the archived recording."""

    wave_t: np.ndarray
    wave_lo: np.ndarray
    wave_hi: np.ndarray
    spec_t: np.ndarray
    spec_f: np.ndarray
    spec_db: np.ndarray
    markers_s: tuple
    sample_rate_hz: int
    duration_s: float


def load_actuation(path, *, sidecar: dict, cache=None, key: str | None = None) -> ActuationAudio:
    """Read the archived recording once and reduce it to what is drawn (cached under ``key`` when given)."""
    ck = ("actuation-audio", key)
    if cache is not None and key:
        hit = cache.get(ck)
        if hit is not None:
            return hit
    audio = read_audio(Path(path))
    fs = audio.sample_rate_hz
    mic = _mic(audio.samples, sidecar)
    t, lo, hi = waveform_envelope(mic, sample_rate_hz=fs)
    st, sfreq, sdb = spectrogram_db(mic, sample_rate_hz=fs)
    out = ActuationAudio(t, lo, hi, st, sfreq, sdb.astype(np.float32),
                         marker_times(audio.samples, sample_rate_hz=fs, sidecar=sidecar), fs, audio.n_frames / fs)
    if cache is not None and key:
        cache.set(ck, out, expire=7 * 24 * 3600)
    return out


def wav_bytes(path, *, sidecar: dict, start_s: float | None = None, stop_s: float | None = None) -> bytes:
    """The microphone channel (or the span start_s..stop_s of it) as a 16-bit PCM WAV file, at its recorded
    level (no gain: a loud impact stays loud, so the players start at a low volume)."""
    audio = read_audio(Path(path), start_s=start_s, stop_s=stop_s)
    mic = np.clip(_mic(audio.samples, sidecar), -1.0, 1.0)
    buf = io.BytesIO()
    sf.write(buf, mic, audio.sample_rate_hz, format="WAV", subtype="PCM_16")
    return buf.getvalue()
