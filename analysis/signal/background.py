"""The rig's background: band levels of the quiet stretch before the first event of a recording.

What a rig sounds like when nothing is being fired (mains hum and its harmonics, drive noise, a whine) is its
acoustic fingerprint. The quiet stretch is the one the SNR check uses: it ends ``guard_s`` before the first
event and starts at most ``background_max_s`` earlier (or at the recording's start). Its power spectrum is the
Hann-windowed periodogram of the whole stretch (one window: the finest frequency resolution the stretch allows),
summed into one-third-octave bands (analysis.signal.bands; each bin to the band its frequency falls in); bands
narrower than two frequency bins are left out,
so every band level rests on at least two bins. Levels are dB re full scale (a full-scale sine reads -3.01 dB in
its band).

``background_distance`` compares one recording's levels with a reference set of them (a rig's own reference
period): the mean over bands of the squared robust z-score (median, 1.4826 x MAD), so a departure of a few dB in
a few bands, or of one dB in many, both count.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from analysis.errors import ParameterError
from analysis.signal._common import LEVEL_FLOOR_DBFS, as_signal, number
from analysis.signal.bands import third_octave_bands
from analysis.signal.spectra import rfft_freqs, stft_power

__all__ = ["BackgroundLevels", "background_levels", "background_distance", "BACKGROUND_FMIN_HZ"]

#: Lowest band considered: below it a stretch of a few hundred ms has too few bins per band (and mains hum at
#: 50/60 Hz sits in the 50 and 63 Hz bands).
BACKGROUND_FMIN_HZ = 40.0


@dataclass(frozen=True, eq=False)
class BackgroundLevels:
    """Band levels (dB re full scale, shape (n_bands,)) at band_centres_hz (Hz) of a quiet stretch of
    duration_s seconds starting start_s after the recording start; level_dbfs: its overall RMS level."""

    levels_db: np.ndarray
    band_centres_hz: np.ndarray
    start_s: float
    duration_s: float
    level_dbfs: float


def background_levels(x, *, sample_rate_hz: float, first_event_s: float, background_max_s: float = 0.25,
                      guard_s: float = 0.005, min_background_s: float = 0.05, fmax_hz: float = 16000.0
                      ) -> BackgroundLevels | None:
    """Band levels of the quiet stretch before ``first_event_s`` (s); None when the stretch is shorter than
    ``min_background_s`` or holds non-finite samples."""
    x = as_signal("x", x)
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    bg_max = number("background_max_s", background_max_s, low=0.0, low_open=True)
    guard = number("guard_s", guard_s, low=0.0)
    bg_min = number("min_background_s", min_background_s, low=0.0, low_open=True)
    fmax = number("fmax_hz", fmax_hz, low=0.0, low_open=True)
    try:
        t0 = float(first_event_s)
    except (TypeError, ValueError):
        raise ParameterError(f"first_event_s must be a number; got {first_event_s!r}") from None
    if not math.isfinite(t0):
        return None
    stop = int(round((t0 - guard) * fs))
    start = max(0, stop - int(round(bg_max * fs)))
    stop = min(stop, x.size)
    n = stop - start
    if n < max(8, int(round(bg_min * fs))):
        return None
    seg = np.asarray(x[start:stop], dtype=np.float64)
    if not np.all(np.isfinite(seg)):
        return None
    # The Hann periodogram (scipy.signal.periodogram's density scaling) as one frame of stft_power: the same
    # numbers without scipy's general-purpose set-up, which costs ten times the transform here.
    freqs = rfft_freqs(n, fs)
    psd = stft_power(seg - seg.mean(), sample_rate_hz=fs, starts=np.zeros(1, dtype=np.int64), n_window=n,
                     scaling="density")[0]
    df = fs / n
    top = min(fmax, 0.45 * fs)
    layout = third_octave_bands(fmin_hz=BACKGROUND_FMIN_HZ, fmax_hz=max(top, BACKGROUND_FMIN_HZ * 1.3))
    keep = (layout.upper_hz - layout.lower_hz) >= 2.0 * df
    if not keep.any():
        return None
    # Each bin goes to the band its frequency falls in (bands are at least two bins wide: see `keep`).
    band_of = np.searchsorted(layout.upper_hz, freqs, side="right")
    inside = (freqs >= layout.lower_hz[0]) & (band_of < layout.n_bands)
    power = np.bincount(band_of[inside], weights=(psd * df)[inside], minlength=layout.n_bands)
    with np.errstate(divide="ignore"):
        levels = np.where(power > 0, 10.0 * np.log10(np.maximum(power, 1e-300)), LEVEL_FLOOR_DBFS)
    ms = float(np.mean(np.square(seg)))
    overall = 10.0 * math.log10(ms) if ms > 0 else LEVEL_FLOOR_DBFS
    return BackgroundLevels(levels_db=levels[keep], band_centres_hz=layout.centres_hz[keep], start_s=start / fs,
                            duration_s=n / fs, level_dbfs=overall)


def background_distance(levels, reference) -> np.ndarray:
    """Mean squared robust z-score over bands of each row of ``levels`` (n, n_bands) against ``reference``
    (m, n_bands) band levels in dB; a band with no spread in the reference gets a floor of 0.1 dB."""
    lv = np.atleast_2d(np.asarray(levels, dtype=float))
    ref = np.atleast_2d(np.asarray(reference, dtype=float))
    if ref.shape[0] < 3 or lv.shape[1] != ref.shape[1]:
        raise ParameterError(f"background distance needs >= 3 reference rows of {lv.shape[1]} bands; got "
                             f"{ref.shape}")
    med = np.median(ref, axis=0)
    scale = np.maximum(1.4826 * np.median(np.abs(ref - med), axis=0), 0.1)
    return np.mean(((lv - med) / scale) ** 2, axis=1)
