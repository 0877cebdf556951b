"""Pure DSP for recordings: quality checks, events, short-time spectra, bands, weightings and band features.

Arrays in, frozen dataclasses out; no I/O, no globals (see analysis/README.md).
"""

from .bands import BandLayout, band_matrix, fractional_octave_bands, linear_bands, third_octave_bands
from .events import EventTiming, detect_onsets, event_end, find_event, marker_edges, spectral_flux
from .features import EventFeatures, calibration_offset_db, event_features, events_features
from .quality import (
    QCResult,
    check_clipping,
    check_dc_offset,
    check_dropouts,
    check_duration,
    check_markers,
    check_sample_rate,
    check_silence,
    check_snr,
    run_quality_checks,
)
from .spectra import SliceGrid, rfft_freqs, slice_grid, stft_power
from .weighting import a_weighting_db, c_weighting_db, weighting_db

__all__ = [
    "BandLayout", "third_octave_bands", "fractional_octave_bands", "linear_bands", "band_matrix",
    "EventTiming", "marker_edges", "spectral_flux", "detect_onsets", "event_end", "find_event",
    "EventFeatures", "event_features", "events_features", "calibration_offset_db",
    "QCResult", "check_clipping", "check_dropouts", "check_dc_offset", "check_duration", "check_silence",
    "check_sample_rate", "check_snr", "check_markers", "run_quality_checks",
    "SliceGrid", "slice_grid", "stft_power", "rfft_freqs",
    "a_weighting_db", "c_weighting_db", "weighting_db",
]
