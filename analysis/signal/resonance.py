"""Resonance features of one event: sub-bin peak frequencies, half-power bandwidths and decay rates.

A resonance that moves by a few per cent stays inside one third-octave band; its peak frequency does not. Each
range (f_lo, f_hi) in Hz names where one resonance of the device lives; in it the strongest peak of the event's
mean power spectrum (periodic-Hann slices on the event's slice grid, zero-padded by ``zero_pad``) is located by
fitting a parabola through the log power of the peak bin and its two neighbours (the Gaussian, or log-quadratic,
interpolation: exact for a Gaussian window, whose transform's log is a parabola). The decay rate is the amplitude
decay 1/τ of x(t) ∝ exp(-t/τ) from the least-squares slope of the peak's level over the slices, from the loudest
slice to where it has fallen ``decay_range_db``; a sustained resonance reads about 0.

An event whose profile names resonance ranges carries these features (analysis.pipeline); the peak frequencies
and bandwidths (``block_values``) are the reference model's resonance block (analysis.monitor.model).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from analysis.errors import ParameterError
from analysis.signal._common import mean_square_db
from analysis.signal.spectra import frames, rfft_freqs, slice_grid, window_values

__all__ = ["Resonance", "interpolate_peak", "resonances", "zoom_power", "BLOCK_FIELDS", "block_values", "block_names"]


@dataclass(frozen=True)
class Resonance:
    """One resonance: frequency_hz of the peak, level_db the interpolated top of the mean power spectrum
    (dB re full scale, one-sided: a sine of amplitude A reads 20·log10(A) - 3.01), bandwidth_hz between the
    half-power points (the window's own width included), decay_per_s the amplitude decay rate 1/τ in s⁻¹ (NaN
    when fewer than 3 slices fit)."""

    low_hz: float
    high_hz: float
    frequency_hz: float
    level_db: float
    bandwidth_hz: float
    decay_per_s: float


def interpolate_peak(log_power, k: int) -> tuple[float, float]:
    """(offset, value) of the parabola through log_power[k-1], [k], [k+1]: offset in bins from k (|offset| <=
    0.5 at a local maximum), value the parabola's top."""
    a, b, c = (float(v) for v in log_power[k - 1:k + 2])
    den = a - 2.0 * b + c
    if den >= 0.0:  # flat or not a maximum: the bin itself
        return 0.0, b
    delta = 0.5 * (a - c) / den
    return delta, b - 0.25 * (a - c) * delta


def zoom_power(x, *, first_bin: int, n_bins: int, n_fft: int) -> np.ndarray:
    """|X_k|² for k = first_bin .. first_bin + n_bins - 1 of the n_fft-point DFT of the rows of x (..., n), n <=
    n_fft (zero-padded): the chirp z-transform on the unit circle (scipy.signal.czt), whose cost follows n +
    n_bins, not n_fft."""
    x = np.asarray(x)
    spec = _zoom(x.shape[-1], int(n_bins), int(n_fft), int(first_bin))(x, axis=-1)
    return spec.real**2 + spec.imag**2


# The transform's chirps cost more to make than to apply to an event's slices, and every recording of a profile
# asks for the same one.
@functools.lru_cache(maxsize=32)
def _zoom(n: int, n_bins: int, n_fft: int, first_bin: int):
    from scipy.signal import CZT

    return CZT(n, m=n_bins, w=np.exp(-2j * np.pi / n_fft), a=np.exp(2j * np.pi * first_bin / n_fft))


def _half_power_width(db, k, top_db, bin_hz):
    """Width in Hz where the spectrum db (dB) around bin k falls 3.01 dB below top_db, by linear interpolation."""
    half = top_db - 10.0 * math.log10(2.0)
    edges = []
    for step in (-1, 1):
        i = k
        while 0 < i < db.size - 1 and db[i + step] > half:
            i += step
        j = i + step
        if not 0 <= j < db.size:
            return float("nan")
        frac = (db[i] - half) / (db[i] - db[j]) if db[i] != db[j] else 0.0
        edges.append(i + step * frac)
    return (edges[1] - edges[0]) * bin_hz


def resonances(x, *, sample_rate_hz: float, onset_s: float, length_s: float, slice_window_s: float,
               slice_hop_s: float, ranges_hz, zero_pad: int = 8, decay_range_db: float = 20.0,
               window: str = "hann") -> tuple[Resonance, ...]:
    """Resonance features of the event at onset_s (s) lasting length_s (s) in signal x (full-scale units).

    ranges_hz: sequence of (low, high) in Hz, each below Nyquist; one Resonance per range, in order."""
    sig = np.asarray(x)
    if not (isinstance(zero_pad, int) and not isinstance(zero_pad, bool) and 1 <= zero_pad <= 64):
        raise ParameterError(f"zero_pad must be an integer from 1 to 64; got {zero_pad!r}")
    grid = slice_grid(onset_s=onset_s, length_s=length_s, slice_window_s=slice_window_s, slice_hop_s=slice_hop_s,
                      sample_rate_hz=sample_rate_hz, n_samples=sig.size if sig.ndim == 1 else 0)
    fs = grid.sample_rate_hz
    bands = [(float(lo), float(hi)) for lo, hi in ranges_hz]
    for lo, hi in bands:
        if not (0.0 < lo < hi < fs / 2):
            raise ParameterError(f"a resonance range must be 0 < low < high < Nyquist ({fs / 2:g} Hz); "
                                 f"got ({lo:g}, {hi:g}) Hz")
    n_fft = zero_pad * grid.n_window
    bin_hz = float(rfft_freqs(n_fft, fs)[1])
    last = n_fft // 2 - 1  # the highest bin below Nyquist
    # windowed frames once; slices past the recording read zeros, as the band features do
    w = window_values(window, grid.n_window)
    fw = frames(sig, grid.starts, grid.n_window) * w
    scale = 2.0 / np.sum(w) ** 2  # one-sided "spectrum" scaling: a sine of amplitude A reads A²/2
    times = grid.times_s
    out = []
    for lo, hi in bands:
        k_lo, k_hi = max(1, int(math.ceil(lo / bin_hz))), min(last - 1, int(math.floor(hi / bin_hz)))
        if k_hi < k_lo:
            raise ParameterError(f"resonance range ({lo:g}, {hi:g}) Hz holds no bin of {bin_hz:g} Hz")
        # Only the range and a margin of half its width on each side (where the half-power points are sought)
        # are computed, by the chirp z-transform: the same bins as the zero-padded transform at a fraction of its
        # cost.
        margin = (k_hi - k_lo) // 2 + 2
        base, top_k = max(1, k_lo - margin), min(last, k_hi + margin)
        power = zoom_power(fw, first_bin=base, n_bins=top_k - base + 1, n_fft=n_fft) * scale
        mean_db = mean_square_db(power.mean(axis=0))
        k = k_lo - base + int(np.argmax(mean_db[k_lo - base:k_hi - base + 1]))
        delta, top = interpolate_peak(mean_db, k)
        width = _half_power_width(mean_db, k, top, bin_hz)
        out.append(Resonance(lo, hi, (base + k + delta) * bin_hz, top, width,
                             _decay_rate(power[:, k], times, decay_range_db)))
    return tuple(out)


def _decay_rate(track, times, range_db):
    """Amplitude decay rate 1/τ (s⁻¹) from the level track (power per slice) after its loudest slice."""
    db = mean_square_db(track)
    i0 = int(np.argmax(db))
    stop = i0 + 1
    while stop < db.size and db[stop] > db[i0] - range_db:
        stop += 1
    if stop - i0 < 3:
        return float("nan")
    slope = np.polyfit(times[i0:stop], db[i0:stop], 1)[0]  # dB per s of power = 20·log10 of amplitude
    return float(-slope * math.log(10.0) / 20.0)


#: The features of each resonance that enter a reference model's resonance block, in this order.
BLOCK_FIELDS = ("frequency_hz", "bandwidth_hz")


def block_values(found) -> np.ndarray:
    """The resonance block of one event: (len(found)·2,) the peak frequency and half-power bandwidth (Hz) of
    each Resonance in order (NaN where one was not found)."""
    return np.array([getattr(r, f) for r in found for f in BLOCK_FIELDS], dtype=float)


def block_names(ranges_hz) -> tuple[str, ...]:
    """Names of the block's features, for messages: 'peak frequency in 900-1600 Hz', 'bandwidth in ...'."""
    return tuple(f"{what} in {lo:g}-{hi:g} Hz" for lo, hi in ranges_hz for what in ("peak frequency", "bandwidth"))
