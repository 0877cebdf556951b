"""One recording in, one result out: quality checks, events, short-time spectra and band features.

``analyse_signals`` is the pure composition of analysis.signal (arrays in, a ``RecordingResult`` out).
``analyse_file`` is the edge around it: it reads the recording and its sidecar with analysis.io and resolves the
device profile, then calls ``analyse_signals``.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from . import io
from .errors import AudioError, ProfileError
from .profiles import BandSpec, DeviceProfile, EventSpec, find_profile, load_profile
from .signal import background as _background
from .signal import bands as _bands
from .signal import events as _events
from .signal import features as _features
from .signal import quality as _quality
from .signal import resonance as _resonance

__all__ = ["RecordingResult", "analyse_signals", "analyse_file", "band_layout", "markers_for", "search_window",
           "json_number", "ONSET_LOG_GAMMA"]

#: Spectral flux on log(1 + γ|X|) magnitudes (full-scale units): a sound's rise counts by its ratio over what was
#: before, not by its absolute size, so a click is not drowned by the flux of loud airflow noise elsewhere in the
#: recording. γ = 1000 puts the knee of the compression near the background level of a typical rig
#: (|X| of 1e-3 in a 5 ms frame); chosen on the demo scenario, common practice, no source.
ONSET_LOG_GAMMA = 1000.0


@dataclass(frozen=True, eq=False)
class RecordingResult:
    """Everything the analysis found in one recording (times in s from the recording start)."""

    path: str
    profile: str
    sample_rate_hz: int
    n_channels: int
    duration_s: float
    qc: tuple  # of signal.quality.QCResult
    events: tuple  # of signal.events.EventTiming, one per profile event, in profile order
    features: dict  # event name -> signal.features.EventFeatures (found events only)
    markers_s: tuple[float, ...]
    marker_source: str
    notes: tuple[str, ...] = ()
    sidecar: io.Sidecar | None = field(default=None, repr=False)
    profile_version: int = 1
    profile_sha256: str = ""  # of the profile file the analysis used
    background: object = None  # signal.background.BackgroundLevels of the quiet stretch, or None

    @property
    def passed_qc(self) -> bool:
        return all(r.passed for r in self.qc)

    @property
    def failed_checks(self) -> tuple[str, ...]:
        return tuple(r.check for r in self.qc if not r.passed)

    def event(self, name: str):
        for ev in self.events:
            if ev.name == name:
                return ev
        raise KeyError(name)

    def to_json(self) -> dict:
        """The result as JSON-ready data (the `harken analyse --json` object, without monitoring)."""
        return {
            "recording": {
                "path": self.path,
                "profile": self.profile,
                "profile_version": self.profile_version,
                "profile_sha256": self.profile_sha256,
                "sample_rate_hz": self.sample_rate_hz,
                "channels": self.n_channels,
                "duration_s": json_number(self.duration_s),
                "markers_s": [json_number(m) for m in self.markers_s],
                "marker_source": self.marker_source,
                "passed_qc": self.passed_qc,
                "notes": list(self.notes),
                "metadata": self.sidecar.to_json() if self.sidecar is not None else None,
            },
            "qc": [
                {"check": r.check, "value": json_number(r.value), "limit": json_number(r.limit),
                 "passed": bool(r.passed), "detail": r.detail}
                for r in self.qc
            ],
            "events": [
                {
                    "name": ev.name,
                    "found": bool(ev.found),
                    "onset_s": json_number(ev.onset_s),
                    "end_s": json_number(ev.end_s),
                    "duration_s": json_number(ev.duration_s),
                    "peak_dbfs": json_number(ev.peak_dbfs),
                    "latency_s": json_number(ev.latency_s),
                    "method": ev.method,
                    "reason": ev.reason,
                }
                for ev in self.events
            ],
            "features": {
                name: {
                    "slices": int(f.levels_db.shape[0]),
                    "bands": int(f.levels_db.shape[1]),
                    "band_centres_hz": [round(float(c), 3) for c in f.band_centres_hz],
                    "slice_times_s": [round(float(t), 6) for t in f.slice_times_s],
                    "reference": f.reference,
                    "dominant_hz": json_number(f.dominant_hz),
                    "centroid_hz": json_number(f.centroid_hz),
                    "band_energy_db": json_number(f.band_energy_db),
                    "padded_slices": int(f.padded_slices),
                    "resonances": [
                        {"low_hz": r.low_hz, "high_hz": r.high_hz, "frequency_hz": json_number(r.frequency_hz),
                         "level_db": json_number(r.level_db), "bandwidth_hz": json_number(r.bandwidth_hz),
                         "decay_per_s": json_number(r.decay_per_s)}
                        for r in f.resonances],
                }
                for name, f in self.features.items()
            },
        }


def json_number(x):
    """JSON has no NaN or infinity: those become null."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def band_layout(spec: BandSpec):
    """The band layout a profile's band spec describes."""
    if spec.kind == "third_octave":
        return _bands.third_octave_bands(fmin_hz=spec.fmin_hz, fmax_hz=spec.fmax_hz)
    if spec.kind == "fractional_octave":
        return _bands.fractional_octave_bands(fraction=spec.fraction, fmin_hz=spec.fmin_hz, fmax_hz=spec.fmax_hz)
    return _bands.linear_bands(fmin_hz=spec.fmin_hz, fmax_hz=spec.fmax_hz, n_bands=spec.n_bands)


def markers_for(
    n_channels: int, profile: DeviceProfile, sidecar: io.Sidecar | None
) -> tuple[int, int | None, str]:
    """(mic channel, marker channel or None, where markers come from) for a file of ``n_channels``.

    The sidecar's ``markers_s`` win over a marker channel; the sidecar's channel map wins over the profile's.
    """
    channels = dict(profile.channels)
    if sidecar is not None and sidecar.channels is not None:
        channels = dict(sidecar.channels)
    mic = channels.get("mic", 0)
    if sidecar is not None and sidecar.markers_s is not None:
        return mic, None, "sidecar markers_s"
    marker = channels.get("marker")
    if marker is None:
        return mic, None, "none"
    if marker >= n_channels:
        return mic, None, f"marker channel {marker} (absent from a {n_channels}-channel file)"
    return mic, marker, f"marker channel {marker}"


def analyse_signals(
    mic: np.ndarray,
    *,
    sample_rate_hz: int,
    profile: DeviceProfile,
    marker: np.ndarray | None = None,
    markers_s: Iterable[float] | None = None,
    marker_source: str = "none",
    offset_db: float = 0.0,
    n_channels: int = 1,
    path: str = "<signal>",
    sidecar: io.Sidecar | None = None,
) -> RecordingResult:
    """Analyse one recording's microphone signal (full-scale units) against a device profile.

    Markers come from ``markers_s`` (s) if given, else from the rising edges of ``marker``.
    ``offset_db`` is added to band levels (a calibration: dBFS -> dB re 20 µPa).
    """
    fs = int(sample_rate_hz)
    q = profile.quality
    mic = np.asarray(mic)
    notes: list[str] = []

    rate_ok = profile.sample_rate_min_hz <= fs <= profile.sample_rate_max_hz
    qc = list(_quality.run_quality_checks(
        mic, sample_rate_hz=fs, sample_rate_min_hz=profile.sample_rate_min_hz,
        sample_rate_max_hz=profile.sample_rate_max_hz, min_duration_s=profile.min_duration_s,
        clip_level=q.clip_level, clip_min_run=q.clip_min_run, max_clipped_fraction=q.max_clipped_fraction,
        clip_peak_tolerance=q.clip_peak_tolerance, clip_bin_width=q.clip_bin_width,
        clip_pileup_ratio=q.clip_pileup_ratio,
        max_dropout_s=q.max_dropout_s, max_dc_offset=q.max_dc_offset, min_rms_dbfs=q.min_rms_dbfs,
    ))

    # Markers
    if markers_s is not None:
        markers = tuple(float(m) for m in markers_s)
    elif marker is not None:
        markers = tuple(float(t) for t in _events.marker_edges(np.asarray(marker), sample_rate_hz=fs))
    else:
        markers = ()
    expected = profile.n_markers
    if expected:
        qc.append(_quality.check_markers(len(markers), expected, source=marker_source))

    # Events, in profile order (an event may search relative to an earlier one). The onset search of each event
    # looks at its own window only, its flux normalised by the quiet stretch before the recording's first window:
    # background_max_s long, as for the SNR check (a shorter stretch gives a noisier scale: 0.1 s, 100 heavily
    # overlapping frames, moved the threshold by 20 % on a noisy test recording).
    timings: dict[str, object] = {}
    # Everything after the quality checks works in float64: converted once here rather than by each step (the same
    # numbers; the onset flux keeps the recording's own precision, see _find).
    mic64 = mic.astype(np.float64) if mic.dtype != np.float64 else mic
    floor = _events.noise_floor_db(mic64, sample_rate_hz=fs) if mic.size else None  # shared by every event
    background_s = None
    for spec in profile.events:
        window = search_window(spec, markers, timings)
        if isinstance(window, _events.EventTiming):
            timings[spec.name] = window
            continue
        start, stop, marker_s = window
        if background_s is None and math.isfinite(start):
            background_s = (start - q.background_max_s, start)
        timings[spec.name] = _find(mic, mic64, fs, spec, start, stop, marker_s, background_s, floor)
    events = tuple(timings[s.name] for s in profile.events)

    found = [ev for ev in events if ev.found]
    background = None
    if found:
        first = min(ev.onset_s for ev in found)
        qc.append(
            _quality.check_snr(
                mic64, sample_rate_hz=fs, first_event_s=first, background_max_s=q.background_max_s,
                min_snr_db=q.min_snr_db,
            )
        )
        # the rig's fingerprint: the same quiet stretch, in bands
        background = _background.background_levels(mic64, sample_rate_hz=fs, first_event_s=first,
                                                   background_max_s=q.background_max_s,
                                                   fmax_hz=profile.bands.fmax_hz)
    else:
        qc.append(_quality.QCResult("snr", float("nan"), q.min_snr_db, False, "no event found, so no event level"))

    features = {}
    if not rate_ok:
        notes.append(f"no band features: sample rate {fs} Hz is outside the profile's range")
    else:
        for spec, ev in zip(profile.events, events):
            if not ev.found:
                continue
            if spec.bands.fmax_hz >= fs / 2:
                notes.append(f"{spec.name}: no band features, fmax {spec.bands.fmax_hz:g} Hz >= Nyquist {fs / 2:g} Hz")
                continue
            features[spec.name] = _features.event_features(
                mic64,
                sample_rate_hz=fs,
                onset_s=ev.onset_s,
                length_s=spec.length_s,
                slice_window_s=spec.slice_window_s,
                slice_hop_s=spec.slice_hop_s,
                bands=band_layout(spec.bands),
                weighting=spec.bands.weighting,
                offset_db=offset_db,
                name=spec.name,
            )
            if spec.resonances_hz:
                found_res = _resonance.resonances(
                    mic64, sample_rate_hz=fs, onset_s=ev.onset_s, length_s=spec.length_s,
                    slice_window_s=spec.slice_window_s, slice_hop_s=spec.slice_hop_s, ranges_hz=spec.resonances_hz)
                features[spec.name] = replace(features[spec.name], resonances=found_res)

    return RecordingResult(
        path=path,
        profile=profile.name,
        sample_rate_hz=fs,
        n_channels=n_channels,
        duration_s=mic.shape[0] / fs if fs else float("nan"),
        qc=tuple(qc),
        events=events,
        features=features,
        markers_s=markers,
        marker_source=marker_source,
        notes=tuple(notes),
        sidecar=sidecar,
        profile_version=profile.version,
        profile_sha256=profile.sha256,
        background=background if rate_ok else None,
    )


def search_window(spec: EventSpec, markers, timings):
    """(start_s, stop_s, marker_s or None) of one event's search window: its marker's if present, else its onset
    window (absolute or after an earlier event, from timings: name -> EventTiming); a missing EventTiming when the
    earlier event was not found."""
    if spec.find == "marker" and spec.marker is not None and len(markers) >= spec.marker:
        m = markers[spec.marker - 1]
        return m + spec.window_s[0], m + spec.window_s[1], m
    start, stop = spec.search_s
    if spec.after is not None:
        base = timings.get(spec.after)
        if base is None or not base.found:
            return _events.EventTiming(
                name=spec.name, found=False, onset_s=math.nan, end_s=math.nan, duration_s=math.nan,
                peak_dbfs=math.nan, latency_s=math.nan, method="missing",
                reason=f"its search window is relative to {spec.after!r}, which was not found",
            )
        start, stop = base.onset_s + start, base.onset_s + stop
    return start, stop, None


def _find(mic, mic64, fs, spec: EventSpec, start, stop, marker_s, background_s, floor_db):
    """One event found in its window; a flux search computes the flux of that window only (window_onsets), in
    the precision of the recording (mic); the rest works on mic64, the same samples in float64."""
    onsets = None
    if spec.detector == "flux":
        onsets = (np.empty(0), np.empty(0))  # an undefined or empty window is reported missing by find_event
        if mic.size and math.isfinite(start) and math.isfinite(stop) and stop > start:
            onsets = _events.window_onsets(mic, sample_rate_hz=fs, search_start_s=start, search_stop_s=stop,
                                           background_start_s=background_s[0], background_stop_s=background_s[1],
                                           log_gamma=ONSET_LOG_GAMMA)
    return _events.find_event(
        mic64, sample_rate_hz=fs, name=spec.name, search_start_s=start, search_stop_s=stop, marker_s=marker_s,
        max_length_s=spec.length_s, detector=spec.detector, onsets=onsets, log_gamma=ONSET_LOG_GAMMA,
        floor_db=floor_db,
    )


#: Below this the onset search and the slice grid have no samples to work on: such a file is not analysed at all
#: (a rate between this and a profile's accepted range is analysed, and its sample_rate check fails).
MIN_ANALYSABLE_RATE_HZ = 1000


def analyse_file(
    path,
    *,
    profile: DeviceProfile | str | None = None,
    profile_dirs: Iterable[str | Path] = (),
    offset_db: float = 0.0,
    require_sidecar: bool = True,
) -> RecordingResult:
    """Read a recording and its sidecar and analyse it. The profile is the sidecar's unless one is given: the
    sidecar names it, and only a name is taken (looked up in ``profile_dirs``, then the shipped profiles); a
    ``profile`` given by the caller may also be a path to a .toml file (the command line's own user).

    Raises AudioError / SidecarError / ProfileError (all AnalysisError) naming the file and the reason.
    """
    path = Path(path)
    audio = io.read_audio(path)  # a non-audio file fails before we look for its sidecar
    info = audio.info
    if info.sample_rate_hz < MIN_ANALYSABLE_RATE_HZ:
        raise AudioError(path, f"its sample rate of {info.sample_rate_hz} Hz is too low to analyse (at least "
                               f"{MIN_ANALYSABLE_RATE_HZ} Hz; a device profile says which rates it accepts)")
    sidecar = None
    if require_sidecar or io.sidecar_path(path).exists():
        sidecar = io.read_sidecar(io.sidecar_path(path))
    if profile is None:
        if sidecar is None:
            raise AudioError(path, "no device profile given and no sidecar to name one")
        try:
            profile = find_profile(sidecar.profile, search_dirs=profile_dirs)
        except ProfileError as exc:
            raise ProfileError(sidecar.path, f"its profile cannot be used: {exc.reason}") from None
    elif not isinstance(profile, DeviceProfile):
        profile = load_profile(profile, search_dirs=profile_dirs)
    mic_index, marker_index, source = markers_for(audio.n_channels, profile, sidecar)
    return analyse_signals(
        audio.channel(mic_index),
        sample_rate_hz=info.sample_rate_hz,
        profile=profile,
        marker=audio.channel(marker_index) if marker_index is not None else None,
        markers_s=sidecar.markers_s if sidecar is not None else None,
        marker_source=source,
        offset_db=offset_db,
        n_channels=audio.n_channels,
        path=str(path),
        sidecar=sidecar,
    )
