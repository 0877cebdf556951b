"""Event timing: marker edges, onset detection by spectral flux, event end by energy hysteresis.

Signals are 1-D arrays in full-scale units; times are in s from the recording start. Non-finite samples (which the
audio reader rejects before this point) are treated as silence (0) so that nothing crashes or hangs on them.

Onsets: spectral flux SF(n) = Σ_k H(|X_k(n)| - |X_k(n-1)|), H(x) = (x + |x|)/2, peaks picked above an adaptive
threshold δ + λ·median over ±M frames (Bello et al. 2005, IEEE Trans. Speech Audio Process. 13(5); Dixon 2006,
Proc. DAFx). The search may cover the whole recording (onset_candidates) or one search window, normalised by a
stated background stretch (window_onsets). Each flux peak is then placed on the sample where the signal changes,
by the AIC change-point picker (Maeda 1985, Zisin 38; Akaike 1974), so the reported onset is the start of the rise
rather than a frame time.

Event end: energy hysteresis on frame levels (start at noise floor + 10 dB, end when the level falls below
floor + 6 dB and stays there; noise floor = 10th percentile of frame levels). Common practice, no source.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.fft
import scipy.ndimage
import scipy.signal
from numpy.lib.stride_tricks import sliding_window_view

from analysis.errors import ParameterError
from analysis.signal._common import LEVEL_FLOOR_DBFS, as_signal, mean_square_db, number, runs
from analysis.signal.spectra import window_values

__all__ = [
    "EventTiming",
    "EVENT_METHODS",
    "marker_edges",
    "spectral_flux",
    "detect_onsets",
    "noise_floor_db",
    "event_end",
    "find_event",
    "onset_candidates",
    "window_onsets",
    "window_search_frames",
    "DETECTORS",
]

EVENT_METHODS = ("marker", "onset", "missing")
# A marker channel counts as pulsed only when its two levels are this many robust standard deviations apart.
_MIN_LEVEL_SEPARATION = 5.0
# Width (samples) of the median filter that removes isolated spikes from a marker channel; pulses must be longer.
_MARKER_MEDIAN_SAMPLES = 5
# Samples kept on each side of an AIC split so that neither variance rests on a couple of samples.
_AIC_MARGIN_SAMPLES = 8
_FLOOR_PERCENTILE = 10.0


@dataclass(frozen=True)
class EventTiming:
    """Where one named event of an actuation sits in the recording.

    onset_s, end_s: s from the recording start; duration_s = end_s - onset_s; peak_dbfs: 20·log10 of the largest
    |sample| between onset and end; latency_s: onset_s - marker time (NaN without a marker). All NaN when not found.
    method: "marker" (searched in a window placed by a marker), "onset" (audio only) or "missing".
    reason: why the event is missing, in plain words ("" when found).
    """

    name: str
    found: bool
    onset_s: float
    end_s: float
    duration_s: float
    peak_dbfs: float
    latency_s: float
    method: str
    reason: str


def _clean(x) -> np.ndarray:
    """The signal as float64 with non-finite samples set to 0."""
    a = as_signal("x", x).astype(np.float64, copy=False)
    finite = np.isfinite(a)
    return a if finite.all() else np.where(finite, a, 0.0)


def _samples(name: str, seconds: float, fs: float, *, minimum: int) -> int:
    n = int(round(seconds * fs))
    if n < minimum:
        raise ParameterError(f"{name} must span at least {minimum} samples at {fs:g} Hz; "
                             f"got {seconds:g} s ({n} samples)")
    return n


# ---------------------------------------------------------------- markers

def _median_filtered(m: np.ndarray) -> np.ndarray:
    """scipy.ndimage.median_filter(m, size=5, mode="nearest"), computed only where the 5 samples are not all equal.

    A marker channel is mostly flat: away from its edges every window holds one value, which is its own median."""
    half = _MARKER_MEDIAN_SAMPLES // 2
    change = np.flatnonzero(m[1:] != m[:-1])  # between sample j and j + 1
    if m.size <= _MARKER_MEDIAN_SAMPLES or change.size > m.size // 16:  # a noisy channel: filter all of it
        return scipy.ndimage.median_filter(m, size=_MARKER_MEDIAN_SAMPLES, mode="nearest")
    # The window around i holds a change j in [i - half, i + half - 1], i.e. i in [j - half + 1, j + half].
    where = np.unique((change[:, None] + np.arange(1 - half, half + 1)).ravel())
    where = where[(where >= 0) & (where < m.size)]
    windows = m[np.clip(where[:, None] + np.arange(-half, half + 1), 0, m.size - 1)]  # "nearest" at the ends
    y = m.copy()
    y[where] = np.sort(windows, axis=1)[:, half]
    return y


def _median(a: np.ndarray, likely: float) -> float:
    """np.median(a), without its sort when at least half of a (and two more) equals likely: a block of equal
    values that long covers the middle of the sorted array, so likely is the median. A clean marker channel sits
    on its two levels, and its deviations from them are mostly 0."""
    if np.count_nonzero(a == likely) >= a.size // 2 + 2:
        return float(likely)
    return float(np.median(a))


def marker_edges(marker, *, sample_rate_hz: float, threshold: float | None = None,
                 min_gap_s: float = 0.005) -> np.ndarray:
    """Rising-edge times (s) of a pulse (marker) channel, float64 shape (n_edges,).

    The channel is first median-filtered over 5 samples, which removes isolated spikes but keeps every step edge
    on its sample (pulses must last at least 3 samples). The default threshold is halfway between the low and
    high levels, found by iterating threshold = mean of the two class medians (Ridler & Calvard 1978, IEEE Trans.
    SMC 8(8), with medians for robustness), so it does not depend on the duty cycle. A channel with one level
    (constant, or noise whose two "levels" lie fewer than 5 robust standard deviations apart) returns an empty
    array. An edge is the first sample at or above the threshold after one below it (a channel that starts high
    has no edge at 0); edges closer than min_gap_s to the previous kept edge are dropped as bounce.
    Non-finite samples take the channel's median value.
    """
    m = as_signal("marker", marker).astype(np.float64, copy=False)
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    gap = number("min_gap_s", min_gap_s, low=0.0)
    if threshold is not None:
        threshold = number("threshold", threshold)
    finite = np.isfinite(m)
    if not finite.any():
        return np.empty(0)
    if not finite.all():
        m = np.where(finite, m, np.median(m[finite]))
    y = _median_filtered(m)

    if threshold is None:
        lo, hi = float(y.min()), float(y.max())
        if not hi > lo:
            return np.empty(0)
        t = 0.5 * (lo + hi)
        n_high = -1
        for _ in range(50):  # iterations, not samples: converges in a few steps
            high = y >= t
            count = int(np.count_nonzero(high))
            if count in (0, y.size):
                return np.empty(0)
            if count == n_high:  # thresholds split nested sets: the same classes as the last step, same medians
                break
            n_high = count
            low_level, high_level = _median(y[~high], lo), _median(y[high], hi)
            t_new = 0.5 * (low_level + high_level)
            if t_new == t:
                break
            t = t_new
        else:  # no convergence: the classes of the last threshold
            high = y >= t
            if not high.any() or high.all():
                return np.empty(0)
            low_level, high_level = _median(y[~high], lo), _median(y[high], hi)
        spread = 1.4826 * _median(np.abs(y - np.where(high, high_level, low_level)), 0.0)
        if not high_level - low_level > _MIN_LEVEL_SEPARATION * spread:
            return np.empty(0)
        threshold = t

    high = y >= threshold
    rising = np.flatnonzero(high[1:] & ~high[:-1]) + 1
    gap_samples = gap * fs
    kept: list[int] = []
    for e in rising:  # loop over edge candidates (few), not samples
        if not kept or e - kept[-1] >= gap_samples:
            kept.append(int(e))
    return np.asarray(kept, dtype=np.float64) / fs


# ---------------------------------------------------------------- onsets

def spectral_flux(x, *, sample_rate_hz: float, frame_s: float = 0.005, hop_s: float = 0.001,
                  log_gamma: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Spectral flux SF(n) = Σ_k H(|X_k(n)| - |X_k(n-1)|), H(x) = (x + |x|)/2 (Bello et al. 2005; Dixon 2006).

    Frame n holds samples [n·hop, n·hop + N) with N = round(frame_s·fs), hop = round(hop_s·fs), times a periodic
    Hann window; X_k(n) is its rfft. With log_gamma the magnitudes are compressed to log(1 + γ|X_k|) first.
    The first frame has no predecessor: SF(0) = 0. A signal shorter than one frame gives empty arrays.
    Returns (times_s, flux): times_s is the centre of each frame, (n·hop + N/2)/fs, float64 shape (n_frames,).
    """
    x = _clean(x)
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    n_frame = _samples("frame_s", number("frame_s", frame_s, low=0.0, low_open=True), fs, minimum=4)
    hop = _samples("hop_s", number("hop_s", hop_s, low=0.0, low_open=True), fs, minimum=1)
    gamma = None if log_gamma is None else number("log_gamma", log_gamma, low=0.0, low_open=True)
    return _flux(x, fs, n_frame, hop, gamma)


def _flux(x: np.ndarray, fs: float, n_frame: int, hop: int, gamma: float | None, dtype=np.float64):
    # dtype float32 (a decoded recording) halves the cost; onset picking does not need float64 precision.
    if x.size < n_frame:
        return np.empty(0), np.empty(0)
    frames = sliding_window_view(x, n_frame)[::hop]
    window = window_values("hann", n_frame).astype(dtype, copy=False)  # periodic Hann
    spec = scipy.fft.rfft(frames.astype(dtype, copy=False) * window, axis=1)
    mag = np.abs(spec)
    if gamma is not None:
        mag *= gamma
        mag += 1.0
        np.log(mag, out=mag)  # log(1 + γ|X|); np.log1p is several times slower here
    rise = np.diff(mag, axis=0)
    np.maximum(rise, 0.0, out=rise)  # H(x) = (x + |x|)/2
    flux = np.concatenate(([0.0], rise.sum(axis=1, dtype=np.float64)))
    times = (np.arange(frames.shape[0]) * hop + 0.5 * n_frame) / fs
    return times, flux


def _aic_split(y: np.ndarray) -> int:
    """Index of the first sample after the change point of y, by the AIC picker (Maeda 1985):
    AIC(k) = k·log(var(y[:k])) + (n - k - 1)·log(var(y[k:])), minimised over k. Vectorised with cumulative sums."""
    n = y.size
    k = np.arange(1, n)
    c1, c2 = np.cumsum(y), np.cumsum(y * y)
    s1, s2 = c1[:-1], c2[:-1]
    var1 = s2 / k - (s1 / k) ** 2
    m = n - k
    var2 = (c2[-1] - s2) / m - ((c1[-1] - s1) / m) ** 2
    tiny = max(float(np.max(y * y)), 1e-300) * 1e-24  # keeps log finite on digital silence
    aic = k * np.log(np.maximum(var1, tiny)) + (m - 1) * np.log(np.maximum(var2, tiny))
    lo, hi = _AIC_MARGIN_SAMPLES - 1, n - 1 - _AIC_MARGIN_SAMPLES
    if hi <= lo:
        return n // 2
    return int(k[lo + int(np.argmin(aic[lo:hi]))])


def _robust_scale(flux: np.ndarray) -> tuple[float, float] | None:
    """(centre, scale) of a flux: median and 1.4826·MAD; None when it has no spread (e.g. digital silence)."""
    centre = float(np.median(flux))
    dev = np.abs(flux - centre)
    scale = 1.4826 * float(np.median(dev))
    if not scale > 1e-12 * float(np.max(dev)):
        # Mostly exact silence (flux 0 in most frames): fall back to the mean absolute deviation.
        scale = float(np.mean(dev))
    return (centre, scale) if scale > 0 else None


def _picked(x: np.ndarray, offset: int, n_samples: int, flux: np.ndarray, first_frame: int, centre: float,
            scale: float, n_frame: int, hop: int, delta: float, lam: float, median_frames: int,
            gap_frames: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(onset samples, strengths, peak frames) of the flux of frames first_frame.. of a recording of n_samples,
    sorted by onset; x holds its samples from sample offset on (at least to 2N past the last frame's start)."""
    z = (flux - centre) / scale
    local = scipy.ndimage.median_filter(z, size=2 * median_frames + 1, mode="nearest")
    peaks, _ = scipy.signal.find_peaks(z, height=delta + lam * local, distance=max(1, gap_frames))
    if peaks.size == 0:
        return np.empty(0, dtype=np.int64), np.empty(0), np.empty(0, dtype=np.int64)
    # The flux of frame p peaks while the start of the sound sits inside frame p (Hann: mostly in its right
    # half), so look for the change point in [p·hop - N, p·hop + 2N): a frame or more of signal on each side.
    frames = peaks + first_frame
    starts = frames * hop
    lo = np.maximum(starts - n_frame, 0)
    hi = np.minimum(starts + 2 * n_frame, n_samples)
    onset = np.array([lo_i + _aic_split(x[lo_i - offset:hi_i - offset]) for lo_i, hi_i in zip(lo, hi)])
    order = np.argsort(onset, kind="stable")
    return onset[order], z[peaks][order], frames[order]


def _onsets(x: np.ndarray, fs: float, n_frame: int, hop: int, delta: float, lam: float, median_frames: int,
            gap_frames: int, gamma: float | None, dtype=np.float64) -> tuple[np.ndarray, np.ndarray]:
    """Onset times (s) and their strengths (flux peak in robust standard deviations), sorted by time."""
    _, flux = _flux(x, fs, n_frame, hop, gamma, dtype)
    if flux.size < 3:
        return np.empty(0), np.empty(0)
    norm = _robust_scale(flux)
    if norm is None:
        return np.empty(0), np.empty(0)
    onset, strength, _ = _picked(x, 0, x.size, flux, 0, *norm, n_frame, hop, delta, lam, median_frames, gap_frames)
    return onset / fs, strength


def _onset_options(fs, frame_s, hop_s, delta, lambda_, median_s, min_gap_s, log_gamma):
    n_frame = _samples("frame_s", number("frame_s", frame_s, low=0.0, low_open=True), fs, minimum=4)
    hop = _samples("hop_s", number("hop_s", hop_s, low=0.0, low_open=True), fs, minimum=1)
    d = number("delta", delta)
    lam = number("lambda_", lambda_, low=0.0)
    med = max(1, int(round(number("median_s", median_s, low=0.0, low_open=True) * fs / hop)))
    gap = int(round(number("min_gap_s", min_gap_s, low=0.0) * fs / hop))
    gamma = None if log_gamma is None else number("log_gamma", log_gamma, low=0.0, low_open=True)
    return n_frame, hop, d, lam, med, gap, gamma


def detect_onsets(x, *, sample_rate_hz: float, frame_s: float = 0.005, hop_s: float = 0.001, delta: float = 6.0,
                  lambda_: float = 1.0, median_s: float = 0.05, min_gap_s: float = 0.02,
                  log_gamma: float | None = None) -> np.ndarray:
    """Onset times (s, float64 shape (n_onsets,), ascending) of a signal.

    The spectral flux (see spectral_flux) is put in robust units z = (SF - median)/(1.4826·MAD), the scale of its
    frame-to-frame noise (Dixon 2006 normalises the detection function likewise, with mean and standard
    deviation). A peak is an onset when z exceeds δ + λ·median of z over ±median_s (Bello et al. 2005) and no
    higher peak lies within min_gap_s. Each onset is then moved to the change point of the signal near its frame
    (AIC picker, Maeda 1985), i.e. the first sample of the rise.
    """
    x = _clean(x)
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    opts = _onset_options(fs, frame_s, hop_s, delta, lambda_, median_s, min_gap_s, log_gamma)
    return _onsets(x, fs, *opts)[0]


# ---------------------------------------------------------------- event end

def _frame_mean_squares(x: np.ndarray, start: int, stop: int, n_frame: int) -> tuple[np.ndarray, np.ndarray]:
    """Start samples and mean squares of consecutive frames of n_frame over x[start:stop] (last one may be short)."""
    starts = np.arange(start, stop, n_frame)
    if starts.size == 0:
        return starts, np.empty(0)
    lengths = np.diff(np.append(starts, stop))
    sums = np.add.reduceat(x[start:stop] ** 2, starts - start)
    return starts, sums / lengths


def noise_floor_db(x, *, sample_rate_hz: float, frame_s: float = 0.005) -> float:
    """Noise floor in dBFS: 10th percentile of the RMS levels of consecutive frame_s frames over the recording.

    All-zero frames read LEVEL_FLOOR_DBFS (-300 dBFS); an empty signal gives LEVEL_FLOOR_DBFS.
    """
    x = _clean(x)
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    n_frame = _samples("frame_s", number("frame_s", frame_s, low=0.0, low_open=True), fs, minimum=1)
    return _noise_floor(x, n_frame)


def _noise_floor(x: np.ndarray, n_frame: int) -> float:
    if x.size == 0:
        return LEVEL_FLOOR_DBFS
    n_frame = min(n_frame, x.size)
    _, ms = _frame_mean_squares(x, 0, x.size - x.size % n_frame, n_frame)  # whole frames only
    return float(np.percentile(mean_square_db(ms), _FLOOR_PERCENTILE))


def event_end(x, *, sample_rate_hz: float, onset_s: float, max_length_s: float, frame_s: float = 0.005,
              floor_db: float | None = None, start_above_db: float = 10.0, end_below_db: float = 6.0,
              min_duration_s: float = 0.005, merge_gap_s: float = 0.01) -> float:
    """End time (s) of the event that starts at onset_s, by energy hysteresis on frame levels.

    Consecutive frames of frame_s start at the onset; the level of each is its RMS level in dBFS. The event is
    on from the first frame at or above floor + start_above_db and ends at the start of the first run of frames
    below floor + end_below_db that lasts at least merge_gap_s (shorter dips are merged into the event) or runs
    to the end of the search. Frames that start before onset_s + min_duration_s never end it. floor_db defaults
    to noise_floor_db(x). The search stops at onset_s + max_length_s (or the recording end), which is returned
    when the level never falls. Resolution: one frame.
    Returns NaN when no frame within max_length_s reaches floor + start_above_db (no event above the noise).
    """
    x = _clean(x)
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    n_frame = _samples("frame_s", number("frame_s", frame_s, low=0.0, low_open=True), fs, minimum=1)
    onset = number("onset_s", onset_s, low=0.0)
    length = number("max_length_s", max_length_s, low=0.0, low_open=True)
    floor = None if floor_db is None else number("floor_db", floor_db)
    start_db = number("start_above_db", start_above_db)
    end_db = number("end_below_db", end_below_db)
    min_dur = number("min_duration_s", min_duration_s, low=0.0)
    merge = number("merge_gap_s", merge_gap_s, low=0.0)
    i0 = int(round(onset * fs))
    if i0 >= x.size:
        raise ParameterError(f"onset_s must lie inside the recording (0–{x.size / fs:.6g} s); got {onset_s!r}")
    if floor is None:
        floor = _noise_floor(x, n_frame)
    return _event_end(x, fs, i0, int(round(length * fs)), n_frame, floor, start_db, end_db,
                      int(round(min_dur * fs)), int(round(merge * fs)))


def _event_end(x, fs, i0, n_length, n_frame, floor, start_db, end_db, n_min_dur, n_merge) -> float:
    i1 = min(x.size, i0 + max(1, n_length))
    starts, ms = _frame_mean_squares(x, i0, i1, n_frame)
    level = mean_square_db(ms)
    on = np.flatnonzero(level >= floor + start_db)
    if on.size == 0:
        return math.nan
    idx = np.arange(level.size)
    below = (level < floor + end_db) & (idx > on[0]) & (starts >= i0 + n_min_dur)
    run_starts, run_lengths = runs(below)
    run_stops = run_starts + run_lengths  # frame index after the run
    stop_samples = np.append(starts, i1)[run_stops]
    span = stop_samples - starts[run_starts]
    ends = (span >= n_merge) | (run_stops == level.size)
    if ends.any():
        return float(starts[run_starts[np.argmax(ends)]]) / fs
    return i1 / fs


# ---------------------------------------------------------------- one named event

DETECTORS = ("flux", "energy")


#: Frame and hop of the onset search (s): a 5 ms frame resolves a click, a 1 ms hop is the timing goal.
ONSET_FRAME_S = 0.005
ONSET_HOP_S = 0.001


def onset_candidates(x, *, sample_rate_hz: float, frame_s: float = ONSET_FRAME_S, hop_s: float = ONSET_HOP_S,
                     delta: float = 6.0, lambda_: float = 1.0, median_s: float = 0.05, min_gap_s: float = 0.02,
                     log_gamma: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(onset times in s, strengths in robust SDs) of the whole signal, for find_event(..., onsets=...).

    A float32 signal has its spectra computed in float32 (faster); anything else in float64.
    """
    dtype = np.float32 if np.asarray(x).dtype == np.float32 else np.float64
    x = _clean(x)
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    opts = _onset_options(fs, frame_s, hop_s, delta, lambda_, median_s, min_gap_s, log_gamma)
    return _onsets(x, fs, *opts, dtype=dtype)


# Fewer frames than this in the background stretch (a window at the very start of a recording): the normalisation
# is taken over the frames of the search itself instead.
_MIN_BACKGROUND_FRAMES = 20


def _flux_frames(x: np.ndarray, first: int, stop: int, n_frame: int, hop: int, gamma: float | None,
                 dtype) -> np.ndarray:
    """Flux of frames first..stop-1 of the recording's frame grid (frame n = samples [n·hop, n·hop + N)), each
    against its predecessor: the numbers _flux(x, ...)[1][first:stop] holds, from the samples they need only."""
    lead = 1 if first > 0 else 0
    seg = _clean(x[(first - lead) * hop:(stop - 1) * hop + n_frame])
    return _flux(seg, 1.0, n_frame, hop, gamma, dtype)[1][lead:]


def _window_plan(n_samples, fs, lo_s, hi_s, b0_s, b1_s, n_frame, hop, med, gap):
    """Frame ranges [start, stop) of a windowed onset search: (core, span, background), or None when the window
    holds no frame. core: the frames whose peaks can put an onset in the window; span: core with the context
    the threshold and the min-gap rule need; background: the frames wholly inside the background stretch."""
    n_total = (n_samples - n_frame) // hop + 1 if n_samples >= n_frame else 0
    if n_total < 3 or not hi_s > lo_s:
        return None
    # A peak at frame p puts its onset in [p·hop - N, p·hop + 2N) (see _picked).
    core0 = max(0, math.floor((lo_s * fs - 2 * n_frame) / hop))
    core1 = min(n_total, math.floor((hi_s * fs + n_frame) / hop) + 1)
    if core1 <= core0:
        return None
    context = med + 2 * max(1, gap) + 1
    span0, span1 = max(0, core0 - context), min(n_total, core1 + context)
    bg0 = max(0, math.ceil(round(b0_s * fs) / hop))
    bg1 = min(n_total, math.floor((round(b1_s * fs) - n_frame) / hop) + 1)
    return core0, core1, span0, span1, bg0, bg1


def window_search_frames(*, n_samples: int, sample_rate_hz: float, search_start_s: float, search_stop_s: float,
                         background_start_s: float, background_stop_s: float, frame_s: float = ONSET_FRAME_S,
                         hop_s: float = ONSET_HOP_S, median_s: float = 0.05,
                         min_gap_s: float = 0.02) -> np.ndarray:
    """Start samples of the frames whose spectra window_onsets computes for this window and stretch (each
    flux frame and the one before it), ascending, int64; for a benchmark's floor of the same work."""
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    n_frame, hop, _, _, med, gap, _ = _onset_options(fs, frame_s, hop_s, 0.0, 1.0, median_s, min_gap_s, None)
    plan = _window_plan(int(n_samples), fs, float(search_start_s), float(search_stop_s), float(background_start_s),
                        float(background_stop_s), n_frame, hop, med, gap)
    if plan is None:
        return np.empty(0, dtype=np.int64)
    _, _, span0, span1, bg0, bg1 = plan
    pieces = [(span0, span1)]
    if bg1 - bg0 >= _MIN_BACKGROUND_FRAMES:
        pieces = [(bg0, bg1), (span0, span1)] if bg1 < span0 or bg0 > span1 else [(min(span0, bg0), max(span1, bg1))]
    frames = np.concatenate([np.arange(max(0, a - 1), b) for a, b in pieces])
    return np.unique(frames).astype(np.int64) * hop


def window_onsets(x, *, sample_rate_hz: float, search_start_s: float, search_stop_s: float,
                  background_start_s: float, background_stop_s: float, frame_s: float = ONSET_FRAME_S,
                  hop_s: float = ONSET_HOP_S, delta: float = 6.0, lambda_: float = 1.0, median_s: float = 0.05,
                  min_gap_s: float = 0.02, log_gamma: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(onset times in s, strengths in robust SDs) of the onsets in [search_start_s, search_stop_s], for
    find_event(..., onsets=...), from the spectral flux of only the frames that window needs.

    The frames are those of onset_candidates (same grid, same flux per frame): the frames whose change point can
    fall in the window, with median_s + 2·min_gap_s of frames on each side so that the adaptive threshold and the
    min_gap_s rule see what they would see over the whole recording. Normalisation (see detect_onsets) comes from
    a stated background stretch instead of the whole recording: z = (SF - median)/(1.4826·MAD) with median and MAD
    of the flux of the frames lying wholly in [background_start_s, background_stop_s) (s from the recording
    start; the quiet stretch before the first event). When that stretch holds fewer than 20 frames (it lies
    before the recording start, or is empty) they come from the window's own frames instead. Peaks and
    their order do not depend on the normalisation; with lambda_ = 1 the threshold depends on the scale only.
    A float32 signal has its spectra computed in float32, as in onset_candidates.
    """
    dtype = np.float32 if np.asarray(x).dtype == np.float32 else np.float64
    x = as_signal("x", x)
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    n_frame, hop, d, lam, med, gap, gamma = _onset_options(fs, frame_s, hop_s, delta, lambda_, median_s,
                                                           min_gap_s, log_gamma)
    lo_s, hi_s = number("search_start_s", search_start_s), number("search_stop_s", search_stop_s)
    b0_s, b1_s = number("background_start_s", background_start_s), number("background_stop_s", background_stop_s)
    empty = np.empty(0), np.empty(0)
    plan = _window_plan(x.size, fs, lo_s, hi_s, b0_s, b1_s, n_frame, hop, med, gap)
    if plan is None:
        return empty
    core0, core1, span0, span1, bg0, bg1 = plan
    if bg1 - bg0 < _MIN_BACKGROUND_FRAMES:  # no usable stretch: normalise over the window's own frames
        flux = _flux_frames(x, span0, span1, n_frame, hop, gamma, dtype)
        background = flux
    elif bg1 < span0 or bg0 > span1:  # apart: two pieces
        background = _flux_frames(x, bg0, bg1, n_frame, hop, gamma, dtype)
        flux = _flux_frames(x, span0, span1, n_frame, hop, gamma, dtype)
    else:  # overlapping or touching: one piece holds both
        first = min(span0, bg0)
        both = _flux_frames(x, first, max(span1, bg1), n_frame, hop, gamma, dtype)
        background = both[bg0 - first:bg1 - first]
        flux = both[span0 - first:span1 - first]
    norm = _robust_scale(background)
    if norm is None:
        return empty
    a, b = span0 * hop, min(x.size, (span1 - 1) * hop + 3 * n_frame)  # the samples the change points need
    onset, strength, frames = _picked(_clean(x[a:b]), a, x.size, flux, span0, *norm, n_frame, hop, d, lam, med, gap)
    times = onset / fs
    keep = (frames >= core0) & (frames < core1) & (times >= lo_s) & (times <= hi_s)
    return times[keep], strength[keep]


def _energy_onset(x, fs, lo_s, hi_s, n_frame, hop, floor_db, start_db) -> float:
    """First frame in [lo_s, hi_s] at floor + start_db, refined to the change point around it; NaN if none."""
    i_lo, i_hi = max(0, int(round(lo_s * fs))), min(x.size, int(round(hi_s * fs)))
    if i_hi - i_lo < n_frame:
        return math.nan
    frames_ms = np.mean(sliding_window_view(x[i_lo:i_hi], n_frame)[::hop] ** 2, axis=1)
    hot = np.flatnonzero(mean_square_db(frames_ms) >= floor_db + start_db)
    if hot.size == 0:
        return math.nan
    s = i_lo + int(hot[0]) * hop
    a0, a1 = max(0, s - 2 * n_frame), min(x.size, s + 2 * n_frame)
    if a1 - a0 <= 2 * _AIC_MARGIN_SAMPLES + 2:
        return s / fs
    return (a0 + _aic_split(x[a0:a1])) / fs


def _missing(name: str, reason: str) -> EventTiming:
    nan = math.nan
    return EventTiming(name, False, nan, nan, nan, nan, nan, "missing", reason)


def find_event(x, *, sample_rate_hz: float, name: str, search_start_s: float, search_stop_s: float,
               max_length_s: float, marker_s: float | None = None, frame_s: float = 0.005, hop_s: float = 0.001,
               delta: float = 6.0, lambda_: float = 1.0, median_s: float = 0.05, min_gap_s: float = 0.02,
               log_gamma: float | None = None, level_frame_s: float = 0.005, floor_db: float | None = None,
               start_above_db: float = 10.0, end_below_db: float = 6.0, min_duration_s: float = 0.005,
               merge_gap_s: float = 0.01, detector: str = "flux", onsets=None) -> EventTiming:
    """Find one named event: the strongest onset in [search_start_s, search_stop_s] (s from the recording start).

    Onsets come from detect_onsets over the whole recording (frame_s, hop_s, delta, lambda_, median_s, min_gap_s,
    log_gamma) unless given (onsets); the strongest one (highest flux peak) whose onset time lies in the window is
    taken. Its end comes from event_end (level_frame_s, floor_db, start_above_db, end_below_db, min_duration_s,
    merge_gap_s) searched up to max_length_s after the onset. peak_dbfs is 20·log10 of the largest |sample|
    between onset and end.
    With marker_s (the caller has already placed the window relative to the marker) method is "marker" and
    latency_s = onset_s - marker_s; without it method is "onset" and latency_s is NaN.
    detector="energy" is for events whose sound swells instead of striking (an inhalation): the onset is the
    first hop_s frame (level_frame_s long) in the window at start_above_db over the noise floor, moved to the
    change point of the signal around it (AIC picker, Maeda 1985). onsets: (times_s, strengths) from an
    onset_candidates() call on the same signal and options (several events share one flux pass), or from
    window_onsets() for this window (the flux of the window only, as the pipeline does).
    A window that is undefined (NaN), empty or outside the recording, a NaN marker_s, no onset in the window, or
    an onset that does not rise start_above_db over the noise floor gives found=False, method="missing" and a
    reason; this holds with a marker too (a marker with no sound after it is a missing event, not a found one).
    """
    x = _clean(x)
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    if not isinstance(name, str) or not name:
        raise ParameterError(f"name must be a non-empty string; got {name!r}")
    opts = _onset_options(fs, frame_s, hop_s, delta, lambda_, median_s, min_gap_s, log_gamma)
    length = number("max_length_s", max_length_s, low=0.0, low_open=True)
    level_frame = _samples("level_frame_s", number("level_frame_s", level_frame_s, low=0.0, low_open=True), fs,
                           minimum=1)
    floor = None if floor_db is None else number("floor_db", floor_db)
    start_db = number("start_above_db", start_above_db)
    end_db = number("end_below_db", end_below_db)
    n_min_dur = int(round(number("min_duration_s", min_duration_s, low=0.0) * fs))
    n_merge = int(round(number("merge_gap_s", merge_gap_s, low=0.0) * fs))
    try:
        marker = None if marker_s is None else float(marker_s)
    except (TypeError, ValueError):
        raise ParameterError(f"marker_s must be a time in s or None; got {marker_s!r}") from None
    try:
        lo, hi = float(search_start_s), float(search_stop_s)
    except (TypeError, ValueError):
        raise ParameterError(f"search_start_s and search_stop_s must be numbers; "
                             f"got {search_start_s!r} and {search_stop_s!r}") from None

    duration = x.size / fs
    window = f"{lo:.3f}–{hi:.3f} s"
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return _missing(name, f"the search window is undefined ({window})")
    if not hi > lo:
        return _missing(name, f"the search window {window} is empty")
    if lo >= duration or hi <= 0:
        return _missing(name, f"the search window {window} lies outside the recording (0–{duration:.3f} s)")
    if marker is not None and not math.isfinite(marker):
        return _missing(name, f"the marker time is undefined ({marker} s)")

    if detector not in DETECTORS:
        raise ParameterError(f"detector must be one of {', '.join(map(repr, DETECTORS))}; got {detector!r}")
    if floor is None:
        floor = _noise_floor(x, level_frame)
    if detector == "energy":
        onset = _energy_onset(x, fs, lo, hi, level_frame, opts[1], floor, start_db)
        if math.isnan(onset):
            return _missing(name, f"no sound {start_db:g} dB above the noise floor ({floor:.1f} dBFS) in "
                                  f"{max(lo, 0.0):.3f}–{min(hi, duration):.3f} s")
    else:
        times, strength = _onsets(x, fs, *opts) if onsets is None else onsets
        inside = (times >= lo) & (times <= hi)
        if not inside.any():
            return _missing(name, f"no onset above threshold in {max(lo, 0.0):.3f}–{min(hi, duration):.3f} s")
        pick = np.flatnonzero(inside)[int(np.argmax(strength[inside]))]
        onset = float(times[pick])
    i0 = int(round(onset * fs))
    end = _event_end(x, fs, i0, int(round(length * fs)), level_frame, floor, start_db, end_db, n_min_dur, n_merge)
    if math.isnan(end):
        return _missing(name, f"the onset at {onset:.3f} s does not rise {start_db:g} dB above the noise floor "
                              f"({floor:.1f} dBFS) within {length * 1e3:.0f} ms")
    i_end = max(i0 + 1, int(round(end * fs)))
    peak = float(np.max(np.abs(x[i0:i_end])))
    peak_dbfs = float(mean_square_db(peak * peak))
    latency = onset - marker if marker is not None else math.nan
    return EventTiming(name, True, onset, end, end - onset, peak_dbfs, latency,
                       "marker" if marker is not None else "onset", "")
