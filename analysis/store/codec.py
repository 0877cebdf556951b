"""How the store encodes what it keeps, and decodes it again: the one place that knows the stored forms.

- Arrays are compact bytes: band levels, scores, T² and SPE as little-endian float32 with their shape in integer
  columns; slice times and band centres as little-endian float64 (axes: few values, and they must compare
  exactly).
- Numbers: a finite float or NULL (NaN and infinity are stored as NULL on every backend).
- Text: as given, except what no backend can hold: a lone surrogate (a byte of a file name that was not UTF-8)
  and NUL are written as escapes (\\udcff, \\x00), so a bad name never stops a write.
- Reference models: the JSON text and npz bytes of analysis.monitor's model documents, verbatim.
- Monitoring results: one trajectories row and its flag rows per scored event (``ScoredEvent``).
"""

from __future__ import annotations

import math

import numpy as np

from analysis.monitor import ReferenceModel

from .types import ScoredEvent

__all__ = ["f32", "f64", "num", "text", "from_f32", "from_f64", "event_arrays", "resonances_blob",
           "resonances_from_blob", "model_to_blobs", "model_from_blobs",
           "scored_events", "missing_event"]


def f32(a) -> bytes:
    """An array as little-endian float32 bytes (the store's compact form)."""
    return np.ascontiguousarray(a, dtype="<f4").tobytes()


def f64(a) -> bytes:
    """An array as little-endian float64 bytes (for axes)."""
    return np.ascontiguousarray(a, dtype="<f8").tobytes()


def num(x):
    """A finite float or None (NaN and infinity are stored as NULL on every backend)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def text(value):
    """Text as it may be stored on SQLite and PostgreSQL alike (None stays None); see the module docstring."""
    if value is None:
        return None
    value = str(value)
    if value.isascii() and "\x00" not in value:
        return value
    out = []
    for c in value:
        cp = ord(c)
        if 0xD800 <= cp <= 0xDFFF:
            out.append(f"\\u{cp:04x}")
        elif cp == 0:
            out.append("\\x00")
        else:
            out.append(c)
    return "".join(out)


def from_f32(blob, shape=None) -> np.ndarray | None:
    """Float32 bytes back as an array of ``shape`` (None for a NULL column)."""
    if blob is None:
        return None
    a = np.frombuffer(blob, dtype="<f4")
    return a.reshape(shape) if shape is not None else a


def from_f64(blob) -> np.ndarray | None:
    """Float64 bytes back as a 1-D array (None for a NULL column)."""
    return None if blob is None else np.frombuffer(blob, dtype="<f8")


def resonances_blob(found) -> bytes | None:
    """An event's resonances (analysis.signal.resonance.Resonance) as float64 bytes, (n, 6): low_hz, high_hz,
    frequency_hz, level_db, bandwidth_hz, decay_per_s; None when there are none."""
    if not found:
        return None
    return f64(np.array([[r.low_hz, r.high_hz, r.frequency_hz, r.level_db, r.bandwidth_hz, r.decay_per_s]
                         for r in found], dtype=float).ravel())


def resonances_from_blob(blob) -> tuple:
    """The Resonance tuple stored by resonances_blob (empty for a NULL column)."""
    from analysis.signal.resonance import Resonance

    if blob is None:
        return ()
    a = from_f64(blob).reshape(-1, 6)
    return tuple(Resonance(*(float(v) for v in row)) for row in a)


def event_arrays(row) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """(levels (n_slices, n_bands) float32, slice_times_s, band_centres_hz) of an events row with the columns
    levels_f32, n_slices, n_bands, slice_times_f64 and band_centres_f64; None when it holds no band levels."""
    if row.levels_f32 is None:
        return None
    return (from_f32(row.levels_f32, (row.n_slices, row.n_bands)), from_f64(row.slice_times_f64),
            from_f64(row.band_centres_f64))


def model_to_blobs(model: ReferenceModel, meta: dict) -> tuple[str, bytes]:
    """The model as (JSON text, npz bytes): the same documents its files hold (analysis.modelfile)."""
    return model.to_documents(metadata=meta)


def model_from_blobs(model_json: str, model_npz: bytes, *, where: str) -> ReferenceModel:
    """A ReferenceModel from its stored JSON text and npz bytes (format and checksum checked)."""
    return ReferenceModel.from_documents(model_json, bytes(model_npz), source=where)


def scored_events(m) -> list[ScoredEvent]:
    """One ScoredEvent per actuation of a ``MonitoringResult`` (analysis.monitor): the trajectories row with the
    per-slice arrays and summary statistics, and one flag row per statistic raised."""
    out = []
    for i in range(m.t2.shape[0]):
        traj = dict(
            n_slices=int(m.t2.shape[1]), n_components=int(m.scores.shape[2]),
            scores_f32=f32(m.scores[i]), t2_f32=f32(m.t2[i]), spe_f32=f32(m.spe[i]),
            t2_max=num(m.t2_max[i]), spe_max=num(m.spe_max[i]), t2_ratio=num(m.t2_ratio[i]),
            spe_ratio=num(m.spe_ratio[i]), trajectory_distance=num(m.trajectory_distance[i]),
            event_spe_ratio=num(m.event_spe_ratio[i]) if m.event_spe_ratio is not None else None,
            resonance_t2=num(m.resonance_t2[i]) if m.resonance_t2 is not None else None,
            residual_f32=f32(m.event_residual[i]) if m.event_residual is not None else None,
            slices_outside=int(m.slices_outside[i]), flagged=bool(m.flagged[i]),
        )
        flags = tuple(dict(statistic=stat, value=num(v), limit_value=num(lim), reason=why)
                      for stat, v, lim, why in m.raised(i))
        comps = () if m.resonance_whitened is None else tuple(float(v) for v in m.resonance_whitened[i])
        out.append(ScoredEvent(traj, flags, comps))
    return out


def missing_event(reason: str) -> ScoredEvent:
    """The ScoredEvent of an event that has no band levels to score: flagged as missing, with the reason."""
    traj = dict(n_slices=None, n_components=None, scores_f32=None, t2_f32=None, spe_f32=None, t2_max=None,
                spe_max=None, t2_ratio=None, spe_ratio=None, trajectory_distance=None, event_spe_ratio=None,
                resonance_t2=None, residual_f32=None,
                slices_outside=None, flagged=True)
    return ScoredEvent(traj, (dict(statistic="event_missing", value=None, limit_value=None, reason=reason),))
