"""Reference models from recordings, and monitoring of analysed recordings against them.

The composition of analysis.pipeline (recording -> band features) with analysis.monitor (features -> statistics).
A model folder holds one model per event, ``<event>.json`` + ``<event>.npz`` (read and written by
analysis.modelfile; the documents are ReferenceModel's own).
"""

from __future__ import annotations

import getpass
import os
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from .errors import AnalysisError, ModelError
from .io import is_recording
from .modelfile import load_model, save_model
from .monitor import ReferenceModel
from .pipeline import RecordingResult, analyse_file, json_number
from .profiles import DeviceProfile, load_profile
from .signal.resonance import block_names, block_values

__all__ = [
    "FeatureSet",
    "find_recordings",
    "analyse_many",
    "feature_set",
    "fit_event_model",
    "fit_models_from_paths",
    "load_models",
    "monitor_result",
    "model_metadata_problem",
    "scoring_block",
    "resonance_problem",
]

def find_recordings(paths: Iterable[str | Path]) -> list[Path]:
    """Recordings named directly, or found in folders (recursively, analysis.io.is_recording: the worker's rule),
    sorted; a missing path is an error."""
    out: list[Path] = []
    for p in map(Path, paths):
        if p.is_dir():
            out.extend(sorted(q for q in p.rglob("*") if is_recording(q)))
        elif p.is_file():
            out.append(p)
        else:
            raise AnalysisError(f"{p}: no such file or folder")
    return out


def _analyse_one(args):
    path, profile = args
    try:
        return str(path), analyse_file(path, profile=profile), None
    except AnalysisError as exc:
        return str(path), None, str(exc)


def analyse_many(
    paths: Sequence[Path], *, profile: DeviceProfile | None = None, jobs: int | None = None
) -> list[tuple[str, RecordingResult | None, str | None]]:
    """Analyse recordings in a process pool; returns (path, result or None, error or None) in input order."""
    jobs = jobs or os.cpu_count() or 1
    work = [(p, profile) for p in paths]
    if jobs <= 1 or len(work) < 4:
        return [_analyse_one(w) for w in work]
    with ProcessPoolExecutor(max_workers=jobs) as pool:
        return list(pool.map(_analyse_one, work, chunksize=max(1, len(work) // (jobs * 8))))


@dataclass(frozen=True, eq=False)
class FeatureSet:
    """Band features of one event over many recordings: X (n, n_slices, n_bands), with who each row is."""

    event: str
    X: np.ndarray
    paths: tuple[str, ...]
    lots: tuple[str, ...]
    slice_times_s: np.ndarray
    band_centres_hz: np.ndarray
    excluded: tuple[tuple[str, str], ...]  # (path, why) of recordings left out
    resonance: np.ndarray | None = None  # (n, p) resonance block (analysis.signal.resonance.block_values) or None
    resonance_names: tuple[str, ...] = ()


def feature_set(results: Iterable[tuple[str, RecordingResult | None, str | None]], event: str) -> FeatureSet:
    """Stack one event's band features; recordings that failed QC, lack the event or were unreadable are left out."""
    rows, paths, lots, excluded, blocks = [], [], [], [], []
    times = centres = None
    ranges = None
    for path, res, err in results:
        if res is None:
            excluded.append((path, err or "not analysed"))
            continue
        if not res.passed_qc:
            excluded.append((path, "failed quality checks: " + ", ".join(res.failed_checks)))
            continue
        feats = res.features.get(event)
        if feats is None:
            excluded.append((path, f"event {event!r} not found or not analysed"))
            continue
        here = tuple((r.low_hz, r.high_hz) for r in feats.resonances)
        if times is None:
            times, centres, ranges = feats.slice_times_s, feats.band_centres_hz, here
        elif feats.levels_db.shape != rows[0].shape:
            excluded.append((path, f"feature shape {feats.levels_db.shape} differs from {rows[0].shape}"))
            continue
        elif here != ranges:
            excluded.append((path, f"resonance ranges {list(here)} differ from {list(ranges)}"))
            continue
        rows.append(feats.levels_db)
        blocks.append(block_values(feats.resonances))
        paths.append(path)
        lots.append(res.sidecar.lot if res.sidecar is not None else "")
    if not rows:
        raise AnalysisError(f"no usable recordings for event {event!r} ({len(excluded)} left out)")
    return FeatureSet(
        event=event, X=np.stack(rows), paths=tuple(paths), lots=tuple(lots), slice_times_s=np.asarray(times),
        band_centres_hz=np.asarray(centres), excluded=tuple(excluded),
        resonance=np.stack(blocks) if ranges else None, resonance_names=block_names(ranges) if ranges else (),
    )


def fit_event_model(
    fs: FeatureSet, *, profile: DeviceProfile, n_components: int | None = None, scaling: str = "unit",
    alpha: float = 0.01,
) -> tuple[ReferenceModel, dict]:
    """Fit one event's reference model; returns it with the metadata to store beside it.

    alpha is this event's actuation-level false-alarm rate (callers modelling several events split theirs).
    """
    distinct = sorted(set(fs.lots))
    model = ReferenceModel(n_components=n_components, scaling=scaling, actuation_alpha=alpha)
    model.fit(
        fs.X,
        lots=np.asarray(fs.lots) if len(distinct) >= 3 else None,
        slice_times_s=fs.slice_times_s,
        band_centres_hz=fs.band_centres_hz,
        resonance=fs.resonance,
        resonance_names=fs.resonance_names or None,
    )
    spec = profile.event(fs.event)
    meta = {
        "profile": profile.name,
        "profile_version": profile.version,
        "profile_sha256": profile.sha256,
        "event": fs.event,
        "reference_lots": distinct,
        "n_recordings": len(fs.paths),
        "slice_window_s": spec.slice_window_s,
        "slice_hop_s": spec.slice_hop_s,
        "length_s": spec.length_s,
        "bands": {"kind": spec.bands.kind, "fmin_hz": spec.bands.fmin_hz, "fmax_hz": spec.bands.fmax_hz,
                  "n_bands": int(fs.X.shape[2]), "weighting": spec.bands.weighting,
                  **({"fraction": spec.bands.fraction} if spec.bands.fraction else {})},
        "created_at": datetime.now(UTC).isoformat(timespec="seconds"),
        "created_by": current_user(),
        "actuation_alpha": alpha,
        "resonances_hz": [list(r) for r in spec.resonances_hz],
    }
    model.metadata_ = meta  # what save() will store; load() restores it
    return model, meta


def current_user() -> str:
    """The login name of whoever runs this, for 'created by' fields ("unknown" when there is none)."""
    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return "unknown"


def fit_models_from_paths(
    paths: Iterable[str | Path],
    *,
    profile: str | DeviceProfile,
    profile_dirs: Iterable[str | Path] = (),
    events: Sequence[str] | None = None,
    out: str | Path,
    n_components: int | None = None,
    scaling: str = "unit",
    alpha: float = 0.01,
    jobs: int | None = None,
    log: Callable[[str], None] = lambda msg: None,
) -> list[tuple[str, Path, ReferenceModel]]:
    """Analyse the reference recordings and write one model per event into the folder ``out``.

    ``out`` ending in .json writes that one file (and its .npz) for a single event. ``alpha`` is the actuation's
    false-alarm rate, split evenly over the events fitted.
    """
    if not (isinstance(alpha, (int, float)) and 0.0 < alpha < 1.0):
        raise AnalysisError(f"--alpha must be a number between 0 and 1 (a false-alarm rate), got {alpha!r}")
    if not isinstance(profile, DeviceProfile):
        profile = load_profile(profile, search_dirs=profile_dirs)
    events = list(events or profile.event_names)
    for e in events:
        profile.event(e)  # unknown event -> ProfileError naming the events there are
    files = find_recordings(paths)
    if not files:
        raise AnalysisError("no recordings found in " + ", ".join(map(str, paths)))
    log(f"analysing {len(files)} reference recordings ...")
    results = analyse_many(files, profile=profile, jobs=jobs)
    out = Path(out)
    target = None
    if out.suffix.lower() == ".json":
        if len(events) != 1:
            raise AnalysisError(f"{out}: a single model file holds one event; give one --event or a folder")
        target = out
        out.parent.mkdir(parents=True, exist_ok=True)
    else:
        out.mkdir(parents=True, exist_ok=True)
    written = []
    for event in events:
        fs = feature_set(results, event)
        if fs.excluded:
            log(f"{event}: {len(fs.excluded)} recording(s) left out of the reference, e.g. {fs.excluded[0][0]}: "
                f"{fs.excluded[0][1]}")
        # An actuation is flagged when any of its event models flags: split alpha across the events (Bonferroni)
        # so the actuation as a whole keeps the nominal false-alarm rate.
        model, meta = fit_event_model(fs, profile=profile, n_components=n_components, scaling=scaling,
                                      alpha=alpha / len(events))
        json_path, _ = save_model(model, target if target is not None else out / event, metadata=meta)
        written.append((event, json_path, model))
    return written


def load_models(paths: Iterable[str | Path]) -> dict[str, ReferenceModel]:
    """Models by event name, from model files (``X.json``) or folders of them."""
    models: dict[str, ReferenceModel] = {}
    for p in map(Path, paths):
        files = sorted(p.glob("*.json")) if p.is_dir() else [p]
        if p.is_dir() and not files:
            raise ModelError(f"{p}: folder holds no reference model (*.json)")
        for f in files:
            model = load_model(f)
            event = (getattr(model, "metadata_", None) or {}).get("event")
            if not event:
                raise ModelError(f"{f}: model metadata names no event")
            if event in models:
                raise ModelError(f"{f}: a second model for event {event!r}")
            models[event] = model
    return models


def resonance_problem(model: ReferenceModel, found) -> str | None:
    """Why an event's resonances (analysis.signal.resonance.Resonance, as analysed or stored) cannot be scored by
    ``model``'s resonance block, or None (also for a model without one)."""
    if not model.has_resonance:
        return None
    want = [list(r) for r in (getattr(model, "metadata_", None) or {}).get("resonances_hz", ())]
    have = [[r.low_hz, r.high_hz] for r in found]
    if not have:
        return ("the model has a resonance block and the event has no resonance features (analysed before its "
                "profile named resonance ranges: re-analyse it)")
    if want and have != want:
        return f"the model's resonance ranges {want} differ from the event's {have}"
    return None


def scoring_block(model: ReferenceModel, feats) -> np.ndarray | None:
    """The (1, p) resonance block to score one event's features with, or None when the model has no block."""
    if not model.has_resonance:
        return None
    return block_values(feats.resonances)[None, :]


def model_metadata_problem(model: ReferenceModel, result: RecordingResult, event: str) -> str | None:
    """Why this model cannot score this recording's event, or None."""
    meta = getattr(model, "metadata_", None) or {}
    if meta.get("profile") not in (None, result.profile):
        return f"the model is for profile {meta.get('profile')!r}, the recording uses {result.profile!r}"
    feats = result.features.get(event)
    if feats is not None and (problem := resonance_problem(model, feats.resonances)):
        return problem
    if feats is not None and feats.levels_db.shape != (model.n_slices_, model.n_bands_):
        return (f"the model expects {model.n_slices_} slices x {model.n_bands_} bands, the recording has "
                f"{feats.levels_db.shape[0]} x {feats.levels_db.shape[1]}")
    return None



def monitor_result(result: RecordingResult, models: dict[str, ReferenceModel]) -> dict:
    """JSON-ready monitoring per modelled event: statistics, limits, flag and plain-language reasons."""
    out = {}
    qc_reasons = [f"recording failed its {r.check} check: {r.detail}" for r in result.qc if not r.passed]
    for event, model in models.items():
        problem = model_metadata_problem(model, result, event)
        if problem:
            raise ModelError(f"{result.path}: {problem}")
        feats = result.features.get(event)
        entry = {
            "t2_max": None, "t2_limit": json_number(model.t2_limit_), "spe_max": None,
            "spe_limit": json_number(model.spe_limit_),
            "slices_outside": None, "trajectory_distance": None, "flagged": True, "reasons": [],
        }
        if feats is None:
            try:
                why = result.event(event).reason or "no band features"
            except KeyError:
                why = "the profile has no such event"
            entry["reasons"] = [f"event {event!r} not analysed: {why}"] + qc_reasons
            out[event] = entry
            continue
        m = model.score(feats.levels_db[None, :, :], resonance=scoring_block(model, feats))
        entry.update(
            t2_max=json_number(m.t2_max[0]), spe_max=json_number(m.spe_max[0]), slices_outside=int(m.slices_outside[0]),
            trajectory_distance=json_number(m.trajectory_distance[0]),
            t2_ratio=json_number(m.t2_ratio[0]), spe_ratio=json_number(m.spe_ratio[0]),
            t2_ratio_threshold=json_number(m.t2_ratio_threshold),
            spe_ratio_threshold=json_number(m.spe_ratio_threshold),
            distance_threshold=json_number(m.distance_threshold),
            event_spe_ratio=json_number(m.event_spe_ratio[0]), event_spe_threshold=json_number(m.event_spe_threshold),
        )
        if m.resonance_t2 is not None:
            entry.update(resonance_t2=json_number(m.resonance_t2[0]),
                         resonance_threshold=json_number(m.resonance_threshold))
        reasons = list(m.reasons(0)) + qc_reasons
        entry["flagged"] = bool(m.flagged[0]) or bool(qc_reasons)
        entry["reasons"] = reasons
        out[event] = entry
    return out
