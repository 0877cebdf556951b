"""Small types shared by the store's writes, reads and callers (no SQL here, so every store module can import it).

- ``Claim``: what registering a recording found.
- ``Analysed``: one analysed recording ready to be written.
- ``ScoredEvent``: one event of one actuation scored under one model, as rows the store writes.
- ``Trajectory``: one event's stored statistics under one model version.
- ``Statistic``, ``STATISTICS``, ``statistic``: the per-actuation statistics the read API can aggregate.
- ``Filters``: what the aggregate queries filter on.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date

import numpy as np

from analysis.errors import ParameterError

__all__ = ["Claim", "Analysed", "ScoredEvent", "Trajectory", "Statistic", "STATISTICS", "statistic", "Filters",
           "VERDICTS", "REVIEW_VERDICTS", "APPROVAL_MEANINGS"]

#: What a person may say of a flag.
VERDICTS = ("confirmed", "false alarm", "recording", "rig", "lot", "unit", "other")
#: The meanings a signed approval of a reference model can carry.
APPROVAL_MEANINGS = ("approved for routine monitoring", "approved for investigation only")
#: A review of a signal: what the person found, and the words shown for it. "no fault found" needs a comment.
REVIEW_VERDICTS = {"unit": "confirmed - device or unit", "lot": "confirmed - lot", "rig": "confirmed - rig",
                   "recording": "recording problem", "no fault found": "no fault found"}


@dataclass(frozen=True)
class Claim:
    """What registering a recording found: kind is "new", "retry" (a stale claim taken over), "duplicate"
    (already analysed or quarantined: nothing to do) or "busy" (another worker holds a fresh claim)."""

    kind: str
    recording_id: int | None
    status: str | None = None
    original_name: str | None = None


@dataclass(frozen=True)
class ScoredEvent:
    """One event of one actuation scored under one model: the trajectories row and the flag rows to write
    (made by ``analysis.store.codec.scored_events`` or ``missing_event``)."""

    trajectory: dict
    flags: tuple[dict, ...]
    resonance_components: tuple[float, ...] = ()  # whitened resonance block (resonance_components rows)

    @property
    def flagged(self) -> bool:
        return bool(self.flags)


@dataclass(frozen=True)
class Analysed:
    """One analysed recording ready to be written: its claim, its ``RecordingResult``, where its original is
    archived, and its scores ({event: (model_id, ScoredEvent)})."""

    recording_id: int
    result: object
    archive_path: str
    scored: dict


@dataclass(frozen=True)
class Trajectory:
    """One event's statistics under one model version. scores (n_slices, A); t2, spe (n_slices,); limits are
    the model's per-slice limits."""

    actuation_id: int
    event: str
    model_id: int
    model_version: int
    scores: np.ndarray | None
    t2: np.ndarray | None
    spe: np.ndarray | None
    t2_limit: float | None
    spe_limit: float | None
    flagged: bool


@dataclass(frozen=True)
class Statistic:
    """A per-actuation statistic the aggregate queries can summarise: where it is stored, its label and unit,
    and whether it is a positive ratio best summarised (and given limits) on a log scale."""

    key: str
    label: str
    unit: str
    table: str  # "trajectories" (under the active model) or "events"
    column: str
    log: bool = False


STATISTICS = {s.key: s for s in (
    Statistic("t2_ratio", "Hotelling T² (largest slice, × its limit)", "× limit", "trajectories", "t2_ratio", True),
    Statistic("spe_ratio", "SPE (largest slice, × its limit)", "× limit", "trajectories", "spe_ratio", True),
    Statistic("trajectory_distance", "Trajectory distance from the envelope centre", "", "trajectories",
              "trajectory_distance", True),
    Statistic("event_spe_ratio", "Event residual (× reference median)", "× median", "trajectories",
              "event_spe_ratio", True),
    Statistic("resonance_t2", "Resonances (T² of the resonance block)", "", "trajectories", "resonance_t2", True),
    Statistic("slices_outside", "Slices outside the reference envelope", "slices", "trajectories", "slices_outside"),
    Statistic("onset_s", "Event onset", "s", "events", "onset_s"),
    Statistic("latency_s", "Event latency after its marker", "s", "events", "latency_s"),
    Statistic("duration_s", "Event duration", "s", "events", "duration_s"),
    Statistic("peak_dbfs", "Event peak level", "dBFS", "events", "peak_dbfs"),
    Statistic("band_energy_db", "Event band level (all bands)", "dB", "events", "band_energy_db"),
    Statistic("dominant_hz", "Dominant frequency", "Hz", "events", "dominant_hz"),
    Statistic("centroid_hz", "Spectral centroid", "Hz", "events", "centroid_hz"),
)}


def statistic(key: str) -> Statistic:
    """The Statistic called ``key``; ParameterError naming the allowed keys otherwise."""
    try:
        return STATISTICS[key]
    except (KeyError, TypeError):
        raise ParameterError(f"statistic must be one of {', '.join(STATISTICS)}; got {key!r}") from None


@dataclass(frozen=True)
class Filters:
    """What the aggregate queries filter on (None or empty = everything). Dates are UTC calendar days, both ends
    included."""

    profile: str | None = None
    sites: tuple[str, ...] = ()
    rigs: tuple[str, ...] = ()
    lots: tuple[str, ...] = ()
    date_from: date | None = None
    date_to: date | None = None
