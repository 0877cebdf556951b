"""Band-level features of events: one band-level matrix (slices x bands) per event, plus summary numbers.

Levels are 10·log10(band mean square) in dB re full scale (a full-scale sine, amplitude 1.0, reads -3.01 dBFS), or
in dB re 20 µPa once a calibration offset is added.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analysis.errors import ParameterError
from analysis.signal.bands import BandLayout, band_matrix
from analysis.signal.spectra import rfft_freqs, slice_grid, stft_power
from analysis.signal.weighting import WEIGHTINGS, weighting_db

__all__ = ["EventFeatures", "event_features", "events_features", "calibration_offset_db"]

# Mean-square floor (-200 dB re full scale) so that silent bands give a finite level.
_FLOOR_MS = 1e-20
# Below this RMS (-180 dBFS) a calibration recording holds no calibrator tone.
_SILENT_RMS = 1e-9
_DBFS = "dBFS"
_DB_SPL = "dB re 20 µPa"


@dataclass(frozen=True, eq=False)
class EventFeatures:
    """Band levels of one event.

    levels_db: (n_slices, n_bands) band levels in `reference` units. slice_times_s: (n_slices,) centre of each
    slice relative to the event onset, s. band_centres_hz / band_nominal_hz: (n_bands,); band_edges_hz:
    (n_bands, 2). dominant_hz: frequency of the largest bin of the event's mean (weighted) power spectrum inside
    the band range. centroid_hz: power-weighted mean frequency inside the band range (NaN for a silent event).
    band_energy_db: level of the whole event over all bands (mean over slices of the summed band mean squares).
    padded_slices: how many slices ran outside the recording and were zero-padded. resonances: the resonance
    features of the event (analysis.signal.resonance), one per range asked for, else empty.
    """

    name: str
    levels_db: np.ndarray
    slice_times_s: np.ndarray
    band_centres_hz: np.ndarray
    band_edges_hz: np.ndarray
    reference: str
    dominant_hz: float
    centroid_hz: float
    band_energy_db: float
    padded_slices: int
    weighting: str = "none"
    band_nominal_hz: np.ndarray | None = None
    resonances: tuple = ()  # analysis.signal.resonance.Resonance, one per range the profile names

    @property
    def n_slices(self) -> int:
        return int(self.levels_db.shape[0])

    @property
    def n_bands(self) -> int:
        return int(self.levels_db.shape[1])


def events_features(x, *, sample_rate_hz: float, onsets_s, length_s: float, slice_window_s: float,
                    slice_hop_s: float, bands: BandLayout, weighting: str = "none", offset_db: float = 0.0,
                    names=None, window="hann", workers: int | None = None) -> tuple[EventFeatures, ...]:
    """Features of several actuations of one event in one recording, in one vectorised pass.

    x: 1-D signal in full-scale units (|x| <= 1). onsets_s: 1-D onsets in s; every event has the same length_s,
    slice grid and bands, so all frames of all events share one FFT call. offset_db is added to every level
    (0 gives dBFS; any other offset, e.g. from calibration_offset_db, gives dB re 20 µPa, and `reference` says
    which). workers is passed to scipy.fft.rfft.
    Returns one EventFeatures per onset, in order.
    """
    onsets = np.asarray(onsets_s, dtype=np.float64)
    if onsets.ndim != 1 or onsets.size == 0 or not np.all(np.isfinite(onsets)):
        raise ParameterError(f"onsets_s must be a non-empty 1-D array of finite times in s; got {onsets_s!r}")
    if names is None:
        names = [f"event {i}" for i in range(onsets.size)]
    names = [str(n) for n in names]
    if len(names) != onsets.size:
        raise ParameterError(f"names must hold one name per onset ({onsets.size}); got {len(names)}")
    if not isinstance(bands, BandLayout):
        raise ParameterError(f"bands must be a BandLayout; got {type(bands).__name__}")
    if weighting not in WEIGHTINGS:
        raise ParameterError(f"weighting must be one of {WEIGHTINGS}; got {weighting!r}")
    offset = float(offset_db)
    if not np.isfinite(offset):
        raise ParameterError(f"offset_db must be a finite number of dB; got {offset_db!r}")
    signal = np.asarray(x)
    if signal.ndim != 1:
        raise ParameterError(f"x must be a 1-D signal; got shape {signal.shape}")

    grid = slice_grid(onset_s=onsets, length_s=length_s, slice_window_s=slice_window_s, slice_hop_s=slice_hop_s,
                      sample_rate_hz=sample_rate_hz, n_samples=signal.size)
    fs = grid.sample_rate_hz
    nyquist = 0.5 * fs
    if np.any(bands.centres_hz >= nyquist):
        raise ParameterError(
            f"bands must have their centres below the Nyquist frequency {nyquist:g} Hz at sample_rate_hz={fs:g}; "
            f"the highest centre is {bands.centres_hz.max():g} Hz"
        )
    freqs = rfft_freqs(grid.n_window, fs)
    matrix = band_matrix(freqs, fs / grid.n_window, bands, weighting_db=weighting_db(weighting, freqs),
                         nyquist_hz=nyquist)
    # (n_events, n_slices, n_bins): each bin holds its share of the frame's mean square.
    power = stft_power(signal, sample_rate_hz=fs, starts=grid.starts, n_window=grid.n_window, window=window,
                       scaling="mean_square", workers=workers)
    # A 2-D product: numpy's stacked matmul does not reach BLAS and is ~15x slower here.
    band_ms = (power.reshape(-1, power.shape[-1]) @ matrix).reshape(power.shape[:-1] + (bands.n_bands,))
    levels = 10.0 * np.log10(band_ms + _FLOOR_MS) + offset
    energy_db = 10.0 * np.log10(band_ms.sum(axis=-1).mean(axis=-1) + _FLOOR_MS) + offset

    # Power per bin as it enters the bands (weighted, partial-bin coverage): the basis of dominant and centroid.
    in_bands = power.mean(axis=1) * matrix.sum(axis=1)
    total = in_bands.sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        centroid = np.where(total > 0, (in_bands @ freqs) / total, np.nan)
    dominant = np.where(total > 0, freqs[np.argmax(in_bands, axis=-1)], np.nan)
    padded = grid.padded.sum(axis=-1)

    reference = _DBFS if offset == 0.0 else _DB_SPL
    edges = bands.edges_hz()
    times = grid.times_s.copy()
    # The events share these arrays: read-only so that changing one result cannot change another.
    for shared in (levels, edges, times):
        shared.setflags(write=False)
    return tuple(
        EventFeatures(
            name=names[i],
            levels_db=levels[i],
            slice_times_s=times,
            band_centres_hz=bands.centres_hz,
            band_edges_hz=edges,
            reference=reference,
            dominant_hz=float(dominant[i]),
            centroid_hz=float(centroid[i]),
            band_energy_db=float(energy_db[i]),
            padded_slices=int(padded[i]),
            weighting=weighting,
            band_nominal_hz=bands.nominal_hz,
        )
        for i in range(onsets.size)
    )


def event_features(x, *, sample_rate_hz: float, onset_s: float, length_s: float, slice_window_s: float,
                   slice_hop_s: float, bands: BandLayout, weighting: str = "none", offset_db: float = 0.0,
                   name: str = "event", window="hann", workers: int | None = None) -> EventFeatures:
    """Band levels (slices x bands) and summary numbers of one event starting at onset_s (s) in x.

    Level = 10·log10(band mean square + 1e-20) + offset_db. A sine of amplitude A in the middle of a band reads
    20·log10(A/√2) dBFS there. Slices running past the end of x are zero-padded and counted in padded_slices.
    """
    onset = np.asarray(onset_s, dtype=np.float64)
    if onset.ndim != 0 or not np.isfinite(onset):
        raise ParameterError(f"onset_s must be a finite time in s; got {onset_s!r}")
    return events_features(x, sample_rate_hz=sample_rate_hz, onsets_s=onset[None], length_s=length_s,
                           slice_window_s=slice_window_s, slice_hop_s=slice_hop_s, bands=bands,
                           weighting=weighting, offset_db=offset_db, names=[name], window=window,
                           workers=workers)[0]


def calibration_offset_db(cal_signal, *, sample_rate_hz: float, level_db: float = 94.0) -> float:
    """dB to add to dBFS levels so that they read dB re 20 µPa, from a recorded calibrator tone.

    offset = level_db - 20·log10(rms), the RMS (full-scale units) taken over the middle 80 % of cal_signal after
    removing its mean (an interface's DC offset is not sound). 94 dB re 20 µPa is 1 Pa RMS (IEC 60942 calibrators
    give 94 or 114 dB).
    """
    fs = float(sample_rate_hz)
    if not np.isfinite(fs) or fs <= 0:
        raise ParameterError(f"sample_rate_hz must be a finite number > 0; got {sample_rate_hz!r}")
    level = float(level_db)
    if not np.isfinite(level):
        raise ParameterError(f"level_db must be a finite level in dB re 20 µPa; got {level_db!r}")
    cal = np.asarray(cal_signal, dtype=np.float64)
    if cal.ndim != 1:
        raise ParameterError(f"cal_signal must be a 1-D signal; got shape {cal.shape}")
    trim = cal.size // 10
    middle = cal[trim:cal.size - trim]
    if middle.size < 2:
        raise ParameterError(f"cal_signal must hold at least a few samples; got {cal.size}")
    if not np.all(np.isfinite(middle)):
        raise ParameterError("cal_signal holds NaN or infinite samples")
    rms = float(np.sqrt(np.mean((middle - middle.mean()) ** 2)))
    if rms < _SILENT_RMS:
        raise ParameterError(
            f"cal_signal is silent (RMS {rms:.3g} full scale over its middle 80 %); record the calibrator tone"
        )
    return level - 20.0 * np.log10(rms)
