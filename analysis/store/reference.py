"""Reference models in the store: build from stored band levels, score actuations, re-score history.

Scores and flags are kept per model version, so an older version's results stay readable after a new one
is made active. Band levels are scored as stored (float32), at ingest and on re-scoring alike, so both give the
same statistics for the same recording.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterable, Sequence

import numpy as np
from sqlalchemy import and_, exists, select

from analysis.monitor import ReferenceModel
from analysis.profiles import load_profile
from analysis.scoring import FeatureSet, current_user, fit_event_model

from . import writes
from .errors import StoreError
from .schema import actuations, trajectories
from .schema import events as events_t

__all__ = ["build_reference", "rescore", "score_rows", "score_result", "missing_event_rows", "model_to_blobs",
           "model_from_blobs", "ModelInfo", "RESCORE_CHUNK"]

#: Actuations scored and written per transaction when re-scoring history (keeps memory flat).
RESCORE_CHUNK = 500


def model_to_blobs(model: ReferenceModel, meta: dict) -> tuple[str, bytes]:
    """The model as (JSON text, npz bytes), the same documents its files hold (analysis.modelfile)."""
    return model.to_documents(metadata=meta)


def model_from_blobs(model_json: str, model_npz: bytes, *, where: str) -> ReferenceModel:
    """A ReferenceModel from its stored JSON text and npz bytes (format and checksum checked)."""
    return ReferenceModel.from_documents(model_json, model_npz, source=where)


def missing_event_rows(reason: str):
    """(trajectory row, flag rows) of an event that has no band levels to score."""
    traj = dict(n_slices=None, n_components=None, scores_f32=None, t2_f32=None, spe_f32=None, t2_max=None,
                spe_max=None, t2_ratio=None, spe_ratio=None, trajectory_distance=None, event_spe_ratio=None,
                slices_outside=None, flagged=True)
    return traj, [dict(statistic="event_missing", value=None, limit_value=None, reason=reason)]


def score_rows(model: ReferenceModel, X: np.ndarray) -> list:
    """Score actuations X (n, n_slices, n_bands) with ``model``; one (trajectory row, flag rows) per actuation."""
    x = np.asarray(X, dtype=np.float32).astype(float)  # as stored
    m = model.score(x)
    num = writes.num
    out = []
    for i in range(x.shape[0]):
        traj = dict(
            n_slices=int(m.t2.shape[1]), n_components=int(m.scores.shape[2]),
            scores_f32=writes.f32(m.scores[i]), t2_f32=writes.f32(m.t2[i]), spe_f32=writes.f32(m.spe[i]),
            t2_max=num(m.t2_max[i]), spe_max=num(m.spe_max[i]), t2_ratio=num(m.t2_ratio[i]),
            spe_ratio=num(m.spe_ratio[i]), trajectory_distance=num(m.trajectory_distance[i]),
            event_spe_ratio=num(m.event_spe_ratio[i]) if m.event_spe_ratio is not None else None,
            slices_outside=int(m.slices_outside[i]), flagged=bool(m.flagged[i]),
        )
        fl = [dict(statistic=stat, value=num(v), limit_value=num(lim), reason=why)
              for stat, v, lim, why in m.raised(i)]
        out.append((traj, fl))
    return out


def score_result(result, models: dict) -> dict:
    """{event: (model_id, (trajectory row, flag rows))} for one RecordingResult under the active models."""
    scored = {}
    for event, (model_id, model) in models.items():
        feats = result.features.get(event)
        if feats is None or feats.levels_db.shape != (model.n_slices_, model.n_bands_):
            scored[event] = (model_id, missing_event_rows(_missing_reason(result, event, feats, model)))
            continue
        scored[event] = (model_id, score_rows(model, feats.levels_db[None])[0])
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
    store, profile: str, events: Sequence[str] | None, lots: Iterable[str], *, created_by: str | None = None,
    profile_dirs: Iterable[str | Path] = (), n_components: int | None = None, scaling: str = "unit",
    alpha: float = 0.01, log: Callable[[str], None] = lambda msg: None,
) -> list[ModelInfo]:
    """Fit one reference model per event from the band levels stored for ``lots``, store each as the new active
    version (audited), and score every stored actuation of the profile with it. ``events`` None or empty means
    every event of the profile."""
    prof = load_profile(profile, search_dirs=profile_dirs)
    names = list(events or prof.event_names)
    for e in names:
        prof.event(e)  # unknown event -> ProfileError naming the events there are
    lots = [str(x).strip() for x in lots if str(x).strip()]
    if not lots:
        raise StoreError("reference build needs at least one lot (--lots L1,L2,...)")
    who = created_by or current_user()
    made = []
    for event in names:
        fs = _feature_set(store, prof.name, event, lots)
        # an actuation flags when any event does: split alpha over the events built (as `harken model fit`)
        model, meta = fit_event_model(fs, profile=prof, n_components=n_components, scaling=scaling,
                                      alpha=alpha / len(names))
        meta["created_by"] = who
        model.metadata_ = meta
        text, blob = model_to_blobs(model, meta)
        with store.write() as conn:
            model_id, version = writes.insert_model(conn, profile=prof.name, event=event, model_json=text,
                                                    model_npz=blob, meta=meta, model=model, created_by=who)
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
        with store.read() as conn:
            from . import queries

            have = queries.lot_names(conn, profile)
        raise StoreError(f"{store.url}: no stored actuations of profile {profile!r} in lot(s) {', '.join(absent)} "
                         f"(lots in the store: {', '.join(have) or 'none'})")
    rows, paths, lot_of, excluded = [], [], [], []
    times = centres = None
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
        if times is None:
            times, centres = r.slice_times_s, r.band_centres_hz
        rows.append(r.levels)
        paths.append(r.file)
        lot_of.append(r.lot)
    if not rows:
        raise StoreError(f"{store.url}: no usable actuations of {profile}/{event} in lots {', '.join(lots)} "
                         f"({len(excluded)} left out)")
    return FeatureSet(event=event, X=np.stack(rows).astype(float), paths=tuple(paths), lots=tuple(lot_of),
                      slice_times_s=times, band_centres_hz=centres, excluded=tuple(excluded))


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
    for event, (mid, model) in targets.items():
        while True:
            with store.read() as conn:
                todo = conn.execute(
                    select(actuations.c.id, events_t.c.levels_f32, events_t.c.n_slices, events_t.c.n_bands,
                           events_t.c.found, events_t.c.reason)
                    .select_from(actuations.outerjoin(events_t, and_(events_t.c.actuation_id == actuations.c.id,
                                                                   events_t.c.name == event)))
                    .where(actuations.c.profile == profile)
                    .where(~exists().where(and_(trajectories.c.actuation_id == actuations.c.id,
                                                trajectories.c.event == event, trajectories.c.model_id == mid)))
                    .order_by(actuations.c.id).limit(chunk)
                ).all()
            if not todo:
                break
            items, ok_ids, ok_x = [], [], []
            shape = (model.n_slices_, model.n_bands_)
            for r in todo:
                if r.levels_f32 is None:
                    why = r.reason or ("no band features" if r.found else "not found")
                    items.append((r.id, missing_event_rows(f"event {event!r} not analysed: {why}")))
                elif (r.n_slices, r.n_bands) != shape:
                    items.append((r.id, missing_event_rows(
                        f"event {event!r} not scored: the model expects {shape[0]} slices x {shape[1]} bands, "
                        f"the recording has {r.n_slices} x {r.n_bands}")))
                else:
                    ok_ids.append(r.id)
                    ok_x.append(np.frombuffer(r.levels_f32, dtype="<f4").reshape(shape))
            if ok_x:
                items += list(zip(ok_ids, score_rows(model, np.stack(ok_x))))
            with store.write() as conn:
                writes.insert_scores(conn, mid, event, items)
            total += len(items)
    return total
