"""Short-time power spectra of an event on a fixed slice grid.

Scalings follow Heinzel et al. (2002), "Spectrum and spectral density estimation by the DFT":
with S1 = Σw and S2 = Σw², the one-sided power spectrum is 2|X_k|²/S1² and the power spectral density is
2|X_k|²/(fs·S2); the DC bin (and the Nyquist bin of an even-length frame) is not doubled.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
import scipy.fft
import scipy.signal

from analysis.errors import ParameterError

__all__ = ["SliceGrid", "slice_grid", "frames", "window_values", "stft_power", "rfft_freqs", "SCALINGS"]

SCALINGS = ("density", "spectrum", "mean_square")
# Slack on the slice count so that a length that is a whole number of hops (in decimal seconds) is not short by one.
_COUNT_SLACK = 1e-9


def _finite(name: str, value, *, positive: bool) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a number; got {value!r}") from None
    if not np.isfinite(v) or (positive and v <= 0):
        raise ParameterError(f"{name} must be a finite number{' > 0' if positive else ''}; got {value!r}")
    return v


@dataclass(frozen=True, eq=False)
class SliceGrid:
    """Where the slices of one event sit in a recording.

    starts: first sample of each frame, int64 shape (n_slices,) (may lie before 0 or past the end).
    n_window: frame length in samples. sample_rate_hz: Hz. times_s: centre of each frame relative to the
    onset, in s, the same for every actuation (slice k always means the same instant of the event).
    padded: bool (n_slices,), True where the frame runs outside the recording and was zero-padded.
    """

    starts: np.ndarray
    n_window: int
    sample_rate_hz: float
    times_s: np.ndarray
    padded: np.ndarray

    @property
    def n_slices(self) -> int:
        return int(self.starts.size)

    @property
    def n_padded(self) -> int:
        return int(np.count_nonzero(self.padded))


def slice_grid(*, onset_s, length_s: float, slice_window_s: float, slice_hop_s: float, sample_rate_hz: float,
               n_samples: int) -> SliceGrid:
    """The fixed slice grid of an event starting at onset_s (s) and lasting length_s (s).

    n_slices = floor((length_s - slice_window_s)/slice_hop_s + 1e-9) + 1; frame k starts at sample
    round((onset_s + k·slice_hop_s)·fs) and is round(slice_window_s·fs) samples long. n_samples is the length of
    the recording, used only to mark frames that need zero padding.
    onset_s may also be a 1-D array of onsets (several actuations of one event): starts and padded then have shape
    (n_events, n_slices).
    """
    fs = _finite("sample_rate_hz", sample_rate_hz, positive=True)
    length = _finite("length_s", length_s, positive=True)
    window = _finite("slice_window_s", slice_window_s, positive=True)
    hop = _finite("slice_hop_s", slice_hop_s, positive=True)
    onsets = np.asarray(onset_s, dtype=np.float64)
    if onsets.ndim > 1 or not np.all(np.isfinite(onsets)):
        raise ParameterError(f"onset_s must be a finite time in s or a 1-D array of them; got {onset_s!r}")
    if window > length:
        raise ParameterError(
            f"slice_window_s must be <= length_s ({length:g} s) so the event holds at least one slice; "
            f"got {window:g} s"
        )
    n_window = int(round(window * fs))
    if n_window < 2:
        raise ParameterError(
            f"slice_window_s must span at least 2 samples at {fs:g} Hz; got {window:g} s ({n_window} samples)"
        )
    if isinstance(n_samples, bool) or not isinstance(n_samples, (int, np.integer)) or n_samples < 0:
        raise ParameterError(f"n_samples must be an integer >= 0; got {n_samples!r}")
    n_slices = int(np.floor((length - window) / hop + _COUNT_SLACK)) + 1
    k = np.arange(n_slices)
    starts = np.rint((onsets[..., None] + k * hop) * fs).astype(np.int64)
    padded = (starts < 0) | (starts + n_window > n_samples)
    times = k * hop + 0.5 * n_window / fs
    return SliceGrid(starts=starts, n_window=n_window, sample_rate_hz=fs, times_s=times, padded=padded)


def frames(x, starts, n_window: int) -> np.ndarray:
    """Frames of the 1-D signal x starting at the given samples, shape starts.shape + (n_window,).

    Samples outside the signal read as zero, so frames before the start or past the end never fail.
    """
    x = np.asarray(x)
    if x.ndim != 1:
        raise ParameterError(f"x must be a 1-D signal; got shape {x.shape}")
    n = int(n_window)
    # A frame wholly outside the signal is all zeros wherever it starts, so clipping the starts bounds the padding
    # to one frame on each side.
    starts = np.clip(np.asarray(starts, dtype=np.int64), -n, x.size)
    # Only the stretch the frames cover is copied (as float64, zero-padded where it runs outside the signal).
    lo, hi = int(starts.min(initial=0)), int(starts.max(initial=0)) + n
    if lo >= 0 and hi <= x.size and x.dtype == np.float64:
        span = x[lo:hi]
    else:
        span = np.zeros(hi - lo, dtype=np.float64)
        a, b = max(lo, 0), min(hi, x.size)
        if b > a:
            span[a - lo:b - lo] = x[a:b]
    # A strided view of every possible frame; fancy indexing copies only the frames asked for.
    return np.lib.stride_tricks.sliding_window_view(span, n)[starts - lo]


def window_values(window, n_window: int) -> np.ndarray:
    """The periodic (DFT-even) window of length n_window, as scipy.signal.get_window gives it (read-only)."""
    try:
        return _window(window, int(n_window))
    except (ValueError, TypeError) as exc:
        raise ParameterError(f"window must be a window name scipy.signal.get_window accepts; got {window!r} "
                             f"({exc})") from None


# Every recording asks for the same few windows; making one costs as much as transforming an event's slices.
@functools.lru_cache(maxsize=64)
def _window(window, n_window: int) -> np.ndarray:
    w = scipy.signal.get_window(window, n_window, fftbins=True).astype(np.float64)
    w.setflags(write=False)
    return w


def rfft_freqs(n_window: int, sample_rate_hz: float) -> np.ndarray:
    """Bin frequencies in Hz of a one-sided spectrum of an n_window-sample frame, shape (n_window // 2 + 1,)."""
    fs = _finite("sample_rate_hz", sample_rate_hz, positive=True)
    if isinstance(n_window, bool) or not isinstance(n_window, (int, np.integer)) or n_window < 1:
        raise ParameterError(f"n_window must be an integer >= 1; got {n_window!r}")
    return np.fft.rfftfreq(int(n_window), d=1.0 / fs)


def stft_power(x, *, sample_rate_hz: float, starts, n_window: int, window="hann", scaling: str = "density",
               n_fft: int | None = None, workers: int | None = None) -> np.ndarray:
    """One-sided short-time power of x, shape starts.shape + (n_fft // 2 + 1,).

    n_fft: transform length, >= n_window (default n_window); longer frames are zero-padded, which samples the
    same spectrum on a finer grid (rfft_freqs(n_fft, ...)).

    scaling:
      "density"     2|X_k|²/(fs·S2), units²/Hz (the PSD; matches scipy.signal.welch scaling='density').
      "spectrum"    2|X_k|²/S1², units² (a sine of amplitude A on a bin reads A²/2 in that bin).
      "mean_square" density × bin width = 2|X_k|²/(n_fft·S2), units²; by Parseval the sum over all bins equals the
                    window-weighted mean square Σ(x·w)²/S2 of the frame, so a band's sum is its mean square.
    DC and Nyquist bins are not doubled (Heinzel et al. 2002). All frames go through one rfft call.
    """
    fs = _finite("sample_rate_hz", sample_rate_hz, positive=True)
    if isinstance(n_window, bool) or not isinstance(n_window, (int, np.integer)) or n_window < 2:
        raise ParameterError(f"n_window must be an integer >= 2; got {n_window!r}")
    if scaling not in SCALINGS:
        raise ParameterError(f"scaling must be one of {SCALINGS}; got {scaling!r}")
    n = int(n_window)
    if n_fft is None:
        m = n
    elif isinstance(n_fft, bool) or not isinstance(n_fft, (int, np.integer)) or n_fft < n:
        raise ParameterError(f"n_fft must be an integer >= n_window ({n}); got {n_fft!r}")
    else:
        m = int(n_fft)
    w = window_values(window, n)
    spectrum = scipy.fft.rfft(frames(x, starts, n) * w, n=m, axis=-1, workers=workers)
    power = spectrum.real**2 + spectrum.imag**2
    # One-sided: double every bin except DC and (for even m) Nyquist, whose negative-frequency twin is itself.
    power[..., 1:(m + 1) // 2] *= 2.0
    if scaling == "density":
        return power / (fs * np.sum(w**2))
    if scaling == "spectrum":
        return power / np.sum(w) ** 2
    return power / (m * np.sum(w**2))
