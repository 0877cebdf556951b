"""Reference models on a results store: build them from stored lots, score actuations, re-score history.

A service beside the worker: it uses the store (which only stores and reads) and the pure core (which fits and
scores). Scores and flags are kept per model version, so an older version's results stay readable after a new
one is made active. Band levels are scored as stored (float32), at ingest and on re-scoring alike, so both give
the same statistics for the same recording.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .monitor import ReferenceModel
from .monitor.levels import group_limits_from_model
from .profiles import find_profile
from .scoring import FeatureSet, current_user, fit_event_model, resonance_problem, scoring_block
from .signal.resonance import block_names, block_values
from .store import Store, StoreError
from .store.codec import missing_event, scored_events
from .store.types import ScoredEvent

__all__ = ["build_reference", "rescore", "score_levels", "score_result", "ModelInfo", "RESCORE_CHUNK"]

#: Actuations scored and written per transaction when re-scoring history (keeps memory flat).
RESCORE_CHUNK = 500


def score_levels(model: ReferenceModel, X: np.ndarray, resonance: np.ndarray | None = None) -> list[ScoredEvent]:
    """Score actuations X (n, n_slices, n_bands) with ``model``, as stored (float32), and their resonance block
    (n, p) when the model has one: one ScoredEvent each."""
    block = resonance if model.has_resonance else None
    return scored_events(model.score(np.asarray(X, dtype=np.float32).astype(float), resonance=block))


def score_result(result, models: dict) -> dict:
    """{event: (model_id, ScoredEvent)} for one RecordingResult under the active models {event: (id, model)}."""
    scored = {}
    for event, (model_id, model) in models.items():
        feats = result.features.get(event)
        if feats is None or feats.levels_db.shape != (model.n_slices_, model.n_bands_):
            scored[event] = (model_id, missing_event(_missing_reason(result, event, feats, model)))
            continue
        problem = resonance_problem(model, feats.resonances)
        if problem:
            scored[event] = (model_id, missing_event(f"event {event!r} not scored: {problem}"))
            continue
        scored[event] = (model_id, score_levels(model, feats.levels_db[None], scoring_block(model, feats))[0])
    return scored


def _missing_reason(result, event, feats, model) -> str:
    if feats is not None:
        return (f"event {event!r} not scored: the model expects {model.n_slices_} slices x {model.n_bands_} bands, "
                f"the recording has {feats.levels_db.shape[0]} x {feats.levels_db.shape[1]}")
    try:
        why = result.event(event).reason or "no band features"
    except KeyError:
        why = "the profile has no such event"
    return f"event {event!r} not analysed: {why}"


@dataclass(frozen=True)
class ModelInfo:
    """One model build_reference stored: its id and version, how many actuations it was fitted on (and how many
    of the reference lots' actuations were left out), its components, and how many actuations it scored."""

    model_id: int
    profile: str
    event: str
    version: int
    n_recordings: int
    n_components: int
    excluded: int
    scored: int


def build_reference(
    store: Store, profile: str, events: Sequence[str] | None, lots: Iterable[str], *, created_by: str | None = None,
    profile_dirs: Iterable[str | Path] = (), n_components: int | None = None, scaling: str = "unit",
    alpha: float = 0.01, log: Callable[[str], None] = lambda msg: None, activate: bool = True,
) -> list[ModelInfo]:
    """Fit one reference model per event from the band levels stored for ``lots``, store each as the new active
    version (or, with ``activate`` False, as a version pending a signed approval; audited), and score every stored
    actuation of the profile with it. ``events`` None or empty means every event of the profile."""
    prof = find_profile(profile, search_dirs=profile_dirs)  # a name, never a path (the dashboard calls this)
    names = list(events or prof.event_names)
    for e in names:
        prof.event(e)  # unknown event -> ProfileError naming the events there are
    lots = [str(x).strip() for x in lots if str(x).strip()]
    if not lots:
        raise StoreError("reference build needs at least one lot (--lots L1,L2,...)")
    who = created_by or current_user()
    made = []
    for event in names:
        fs, units = _feature_set(store, prof.name, event, lots)
        # an actuation flags when any event does: split alpha over the events built (as `harken model fit`)
        model, meta = fit_event_model(fs, profile=prof, n_components=n_components, scaling=scaling,
                                      alpha=alpha / len(names))
        meta["created_by"] = who
        # A unit's mean of each statistic gets limits from the held-out reference values (analysis.monitor.levels);
        # the unit level keeps the same false-alarm budget per unit as the actuation level per actuation.
        meta["unit_limits"] = {k: v.to_dict() for k, v in group_limits_from_model(
            model, units=np.asarray(units), lots=np.asarray(fs.lots), alpha=alpha / len(names)).items()}
        model.metadata_ = meta
        model_id, version = store.insert_model(profile=prof.name, event=event, model=model, meta=meta,
                                               created_by=who, activate=activate)
        log(f"{prof.name}/{event}: version {version} (model {model_id}) from {len(fs.paths)} actuations of lots "
            f"{', '.join(sorted(set(fs.lots)))}, {model.n_components_} components, {len(fs.excluded)} left out")
        n = rescore(store, prof.name, events=[event], model_id=model_id)
        log(f"{prof.name}/{event}: scored {n} stored actuations with version {version}")
        made.append(ModelInfo(model_id=model_id, profile=prof.name, event=event, version=version,
                              n_recordings=len(fs.paths), n_components=int(model.n_components_),
                              excluded=len(fs.excluded), scored=n))
    return made


def _feature_set(store, profile, event, lots) -> FeatureSet:
    df = store.band_levels(profile, event, lots=lots, passed_qc_only=False)
    known = set(df["lot"])
    absent = [lot for lot in lots if lot not in known]
    if absent:
        have = store.lot_names(profile)
        raise StoreError(f"{store.url}: no stored actuations of profile {profile!r} in lot(s) {', '.join(absent)} "
                         f"(lots in the store: {', '.join(have) or 'none'})")
    rows, paths, lot_of, unit_of, excluded, blocks = [], [], [], [], [], []
    times = centres = ranges = None
    for r in df.itertuples(index=False):
        if not r.passed_qc:
            excluded.append((r.file, "failed quality checks"))
            continue
        if r.levels is None:
            excluded.append((r.file, f"event {event!r} not found or not analysed"))
            continue
        if rows and r.levels.shape != rows[0].shape:
            excluded.append((r.file, f"feature shape {r.levels.shape} differs from {rows[0].shape}"))
            continue
        here = tuple((x.low_hz, x.high_hz) for x in r.resonances)
        if times is None:
            times, centres, ranges = r.slice_times_s, r.band_centres_hz, here
        elif here != ranges:
            excluded.append((r.file, f"resonance ranges {list(here)} differ from {list(ranges)}"))
            continue
        rows.append(r.levels)
        blocks.append(block_values(r.resonances))
        paths.append(r.file)
        lot_of.append(r.lot)
        unit_of.append(r.unit)
    if not rows:
        raise StoreError(f"{store.url}: no usable actuations of {profile}/{event} in lots {', '.join(lots)} "
                         f"({len(excluded)} left out)")
    return FeatureSet(event=event, X=np.stack(rows).astype(float), paths=tuple(paths), lots=tuple(lot_of),
                      slice_times_s=times, band_centres_hz=centres, excluded=tuple(excluded),
                      resonance=np.stack(blocks) if ranges else None,
                      resonance_names=block_names(ranges) if ranges else ()), unit_of


def rescore(store, profile: str, *, events: Sequence[str] | None = None, model_id: int | None = None,
            chunk: int = RESCORE_CHUNK) -> int:
    """Score every stored actuation of ``profile`` that has no scores yet under the active model of each event
    (or under ``model_id``); returns how many event scorings were written. Chunked: memory stays flat."""
    if model_id is not None:
        model = store.load_model(model_id)
        targets = {model.metadata_["event"]: (model_id, model)}
    else:
        targets = store.active_models(profile)
        if events:
            missing = [e for e in events if e not in targets]
            if missing:
                raise StoreError(f"{store.url}: no active reference model for {profile}/{', '.join(missing)}")
            targets = {e: targets[e] for e in events}
        if not targets:
            raise StoreError(f"{store.url}: no active reference model for profile {profile!r}; "
                             "build one with `harken reference build`")
    total = 0
    shape_of = {event: (model.n_slices_, model.n_bands_) for event, (_, model) in targets.items()}
    for event, (mid, model) in targets.items():
        shape = shape_of[event]
        while True:
            todo = store.unscored(profile, event, mid, limit=chunk)
            if not todo:
                break
            items, ok_ids, ok_x, ok_r = [], [], [], []
            for r in todo:
                if r["levels"] is None:
                    why = r["reason"] or ("no band features" if r["found"] else "not found")
                    items.append((r["actuation_id"], missing_event(f"event {event!r} not analysed: {why}")))
                elif r["levels"].shape != shape:
                    items.append((r["actuation_id"], missing_event(
                        f"event {event!r} not scored: the model expects {shape[0]} slices x {shape[1]} bands, "
                        f"the recording has {r['n_slices']} x {r['n_bands']}")))
                elif (problem := resonance_problem(model, r["resonances"])) is not None:
                    items.append((r["actuation_id"], missing_event(f"event {event!r} not scored: {problem}")))
                else:
                    ok_ids.append(r["actuation_id"])
                    ok_x.append(r["levels"])
                    ok_r.append(block_values(r["resonances"]))
            if ok_x:
                items += list(zip(ok_ids, score_levels(model, np.stack(ok_x), np.stack(ok_r))))
            store.insert_scores(mid, event, items, refresh_profile=profile)
            total += len(items)
    if not total:  # nothing new to score: the signals are still brought up to date (e.g. after an upgrade)
        store.refresh_signals(profile)
    return total
