"""Reads of single records: recordings, actuations, their QC results, events, band levels, scores and flags.

Each function takes an open connection (``Store.read()``) and returns a DataFrame, a dataclass or a dict.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
from sqlalchemy import and_, exists, func, select

from .. import schema as db
from ..codec import event_arrays, from_f32, resonances_from_blob, text
from ..errors import StoreError
from ..types import Trajectory
from ._base import active_model_ids, counted_flag, df, model_flag, placed_full, text_by_id
from .signals import actuation_causes, actuation_verdicts

__all__ = [
    "schema_version", "recordings", "quarantine", "recent_quarantine", "actuations", "export_actuations",
    "flags", "actuation_detail", "band_levels", "event_levels", "trajectory", "trajectories", "unscored",
    "latest_per_rig", "lot_actuations", "lot_names", "audit_log", "check_integrity", "EVENT_COLUMNS",
    "STAT_COLUMNS", "today_changes",
]

#: Per-event columns of the export (besides the statistics).
EVENT_COLUMNS = ("found", "onset_s", "end_s", "duration_s", "peak_dbfs", "latency_s", "dominant_hz", "centroid_hz",
                 "band_energy_db")
#: Per-event statistics of the export, under the active model.
STAT_COLUMNS = ("model_version", "t2_max", "t2_ratio", "spe_max", "spe_ratio", "trajectory_distance",
                "event_spe_ratio", "slices_outside", "flagged")

def schema_version(conn) -> int:
    """The schema version recorded in the store."""
    return int(conn.execute(select(db.store_info.c.value).where(db.store_info.c.key == "schema_version")).scalar_one())


def recordings(conn, *, status: str | None = None) -> pd.DataFrame:
    """Every recording (without its sidecar text), by id; optionally of one status."""
    cols = [c for c in db.recordings.c if c.name != "sidecar_json"]
    stmt = select(*cols).order_by(db.recordings.c.id)
    if status is not None:
        stmt = stmt.where(db.recordings.c.status == status)
    return df(conn, stmt)


def quarantine(conn) -> pd.DataFrame:
    """Quarantined recordings: recording_id, file (as delivered), reason, kept_at (the quarantined copy),
    content_hash, size_bytes, received_at."""
    r = db.recordings
    return df(conn, select(
        r.c.id.label("recording_id"), r.c.original_name.label("file"), r.c.error.label("reason"),
        r.c.archive_path.label("kept_at"), r.c.content_hash, r.c.size_bytes, r.c.received_at,
    ).where(r.c.status == "quarantined").order_by(r.c.id))


def _sidecar_field(stored, key) -> str:
    """One field of a stored sidecar text, "" when the text is not a JSON object or lacks it."""
    try:
        obj = json.loads(stored) if stored else None
    except (TypeError, ValueError, RecursionError):
        return ""
    return text(str(obj.get(key, ""))) if isinstance(obj, dict) else ""  # text(): no lone surrogate comes back


def recent_quarantine(conn, *, limit: int = 20) -> pd.DataFrame:
    """The latest quarantined recordings: recording_id, file, reason, received_at (UTC), and the site, rig, lot,
    unit their sidecar names (empty when it could not be read)."""
    r = db.recordings
    out = df(conn, select(r.c.id.label("recording_id"), r.c.original_name.label("file"), r.c.error.label("reason"),
                          r.c.received_at, r.c.sidecar_json)
             .where(r.c.status == "quarantined").order_by(r.c.received_at.desc()).limit(limit))
    for key in ("site", "rig", "lot", "unit"):
        out[key] = [_sidecar_field(s, key) for s in out["sidecar_json"]] if len(out) else []
    return out.drop(columns=["sidecar_json"])


def actuations(conn, *, profile: str | None = None) -> pd.DataFrame:
    """One row per actuation with its identifiers, times (recorded_at: the sidecar's text; recorded_at_utc) and
    where its original is kept."""
    a, r = db.actuations, db.recordings
    stmt = select(
        a.c.id.label("actuation_id"), r.c.original_name.label("file"), db.sites.c.name.label("site"),
        db.rigs.c.name.label("rig"), db.lots.c.name.label("lot"), db.units.c.name.label("unit"), a.c.actuation,
        a.c.recorded_at_text.label("recorded_at"), a.c.recorded_at.label("recorded_at_utc"), a.c.profile,
        a.c.passed_qc, r.c.id.label("recording_id"), r.c.archive_path, r.c.content_hash,
    ).select_from(placed_full()).order_by(a.c.recorded_at, a.c.id)
    if profile is not None:
        stmt = stmt.where(a.c.profile == profile)
    return df(conn, stmt)


def flags(conn, *, actuation_ids=None, active_only: bool = True) -> pd.DataFrame:
    """Flags (one row per flag) with their model version and any verdicts as text: flag_id, actuation_id,
    model_id, model_version, event, statistic, value, limit, reason, created_at, verdicts. ``actuation_ids``:
    only these actuations; ``active_only``: only the flags that count (quality-check flags and those of active
    models)."""
    f = db.flags
    cols = ["flag_id", "actuation_id", "model_id", "model_version", "event", "statistic", "value", "limit",
            "reason", "created_at", "verdicts"]
    stmt = (select(f.c.id.label("flag_id"), f.c.actuation_id, f.c.model_id,
                   db.reference_models.c.version.label("model_version"), f.c.event, f.c.statistic, f.c.value,
                   f.c.limit_value.label("limit"), f.c.reason, f.c.created_at)
            .select_from(f.outerjoin(db.reference_models, db.reference_models.c.id == f.c.model_id))
            .order_by(f.c.actuation_id, f.c.id))
    if actuation_ids is not None:
        ids = [int(i) for i in actuation_ids]
        if not ids:
            return pd.DataFrame(columns=cols)
        stmt = stmt.where(f.c.actuation_id.in_(ids))
    if active_only:
        stmt = stmt.where(counted_flag(active_model_ids(conn)))
    out = df(conn, stmt)
    vstmt = select(db.verdicts.c.flag_id, db.verdicts.c.person, db.verdicts.c.verdict,
                   db.verdicts.c.note).order_by(db.verdicts.c.id)
    if actuation_ids is not None:
        vstmt = vstmt.where(db.verdicts.c.flag_id.in_([int(i) for i in out["flag_id"]] or [-1]))
    v = df(conn, vstmt)
    if len(v):
        words = v["person"] + ": " + v["verdict"] + v["note"].fillna("").map(lambda n: f" ({n})" if n else "")
        out["verdicts"] = text_by_id(out["flag_id"], words.groupby(v["flag_id"]).agg("; ".join))
    else:
        out["verdicts"] = pd.Series([""] * len(out), index=out.index, dtype=object)
    return out[cols]


def export_actuations(conn) -> pd.DataFrame:
    """One row per actuation: identifiers, QC, event timings and features, statistics under the active models,
    ``flagged`` (bool), ``reasons`` and ``verdicts`` (text). Per-event columns are named ``<event>.<column>``."""
    base = actuations(conn).drop(columns=["recorded_at_utc", "recording_id", "archive_path", "content_hash"])
    base = base.sort_values("actuation_id").reset_index(drop=True)
    ids = base["actuation_id"]
    qc = df(conn, select(db.actuations.c.id.label("actuation_id"), db.qc_results.c.check_name, db.qc_results.c.value,
                         db.qc_results.c.passed)
            .select_from(db.qc_results.join(db.actuations,
                                            db.actuations.c.recording_id == db.qc_results.c.recording_id))
            .order_by(db.actuations.c.id, db.qc_results.c.check_name))
    failed = qc[~qc["passed"].astype(bool)].groupby("actuation_id")["check_name"].agg(",".join)
    base["qc_failed"] = text_by_id(ids, failed)
    if len(qc):
        qv = qc.pivot(index="actuation_id", columns="check_name", values="value")
        qv.columns = [f"qc.{c}" for c in qv.columns]
        base = base.join(qv, on="actuation_id")
    ev = df(conn, select(db.events.c.actuation_id, db.events.c.name, *[db.events.c[c] for c in EVENT_COLUMNS])
            .order_by(db.events.c.id))
    names = list(dict.fromkeys(ev["name"]))
    for name in names:
        part = ev[ev["name"] == name].set_index("actuation_id")[list(EVENT_COLUMNS)]
        part.columns = [f"{name}.{c}" for c in part.columns]
        base = base.join(part, on="actuation_id")
    t = db.trajectories
    tr = df(conn, select(t.c.actuation_id, t.c.event, db.reference_models.c.version.label("model_version"),
                         *[t.c[c] for c in STAT_COLUMNS if c != "model_version"])
            .select_from(t.join(db.reference_models, db.reference_models.c.id == t.c.model_id))
            .where(t.c.model_id.in_(active_model_ids(conn) or [-1])))
    for name in list(dict.fromkeys(list(names) + list(tr["event"]))):
        part = tr[tr["event"] == name].set_index("actuation_id")[list(STAT_COLUMNS)]
        if not len(part):
            continue
        part.columns = [f"{name}.{c}" for c in part.columns]
        base = base.join(part, on="actuation_id")
    fl = flags(conn, active_only=True)
    fl["text"] = np.where(fl["event"].notna(), fl["event"].fillna("") + ": " + fl["reason"], fl["reason"])
    base["flagged"] = ids.isin(set(fl["actuation_id"])).astype(bool)
    base["reasons"] = text_by_id(ids, fl.groupby("actuation_id")["text"].agg(" | ".join))
    vd = fl[fl["verdicts"] != ""]
    base["verdicts"] = text_by_id(ids, vd.groupby("actuation_id")["verdicts"].agg("; ".join))
    causes = actuation_causes(conn)
    base["cause"] = text_by_id(ids, causes).where(base["flagged"], "")
    base["verdict"] = text_by_id(ids, actuation_verdicts(conn))  # the latest review of its flags' signals
    return base


def actuation_detail(conn, actuation_id: int) -> dict | None:
    """Everything the drill-down shows about one actuation except arrays: metadata (id, profile, profile_version,
    profile_sha256 (of the profile file the analysis used; None for analyses before they were recorded), actuation,
    recorded_at_text, passed_qc, marker_source, site, rig, lot, unit, recording_id, original_name, archive_path,
    sample_rate_hz, channels, duration_s, content_hash), ``sidecar`` (dict), ``qc`` and ``events`` (DataFrames,
    without band levels). None when there is no such actuation."""
    a, r = db.actuations, db.recordings
    row = conn.execute(
        select(a.c.id, a.c.profile, a.c.profile_version, a.c.profile_sha256, a.c.actuation, a.c.recorded_at_text,
               a.c.passed_qc, a.c.marker_source,
               db.sites.c.name.label("site"), db.rigs.c.name.label("rig"), db.lots.c.name.label("lot"),
               db.units.c.name.label("unit"), r.c.id.label("recording_id"), r.c.original_name, r.c.archive_path,
               r.c.sample_rate_hz, r.c.channels, r.c.duration_s, r.c.sidecar_json, r.c.content_hash)
        .select_from(placed_full()).where(a.c.id == int(actuation_id))).first()
    if row is None:
        return None
    qc = df(conn, select(db.qc_results.c.check_name, db.qc_results.c.value, db.qc_results.c.limit_value,
                         db.qc_results.c.passed, db.qc_results.c.detail)
            .where(db.qc_results.c.recording_id == row.recording_id)
            .order_by(db.qc_results.c.check_name))
    ev = df(conn, select(db.events.c.id.label("event_id"), db.events.c.name, db.events.c.found, db.events.c.onset_s,
                         db.events.c.end_s, db.events.c.duration_s, db.events.c.peak_dbfs, db.events.c.latency_s,
                         db.events.c.method, db.events.c.reason, db.events.c.dominant_hz, db.events.c.centroid_hz,
                         db.events.c.band_energy_db, db.events.c.level_reference)
            .where(db.events.c.actuation_id == row.id).order_by(db.events.c.onset_s, db.events.c.id))
    out = dict(row._mapping)
    try:
        side = json.loads(row.sidecar_json) if row.sidecar_json else {}
    except (ValueError, RecursionError):
        side = {}
    out["sidecar"] = side if isinstance(side, dict) else {}
    out.pop("sidecar_json")
    out["qc"] = qc
    out["events"] = ev
    return out


BAND_LEVEL_COLUMNS = ["actuation_id", "file", "lot", "rig", "unit", "passed_qc", "levels", "slice_times_s",
                      "band_centres_hz", "resonances"]


def band_levels(conn, event: str, *, profile: str | None = None, lots=None, actuation_ids=None,
                passed_qc_only: bool = True) -> pd.DataFrame:
    """One row per actuation (of ``profile``, in ``lots``, or the given ids) with the event's band levels:
    actuation_id, file, lot, rig, unit, passed_qc, levels ((n_slices, n_bands) float32 in the event's level unit, or
    None when the event has none), slice_times_s (s from the onset), band_centres_hz (Hz), resonances (the
    event's analysis.signal.resonance.Resonance tuple, empty when its profile names none)."""
    a = db.actuations
    stmt = (select(a.c.id.label("actuation_id"), db.recordings.c.original_name.label("file"),
                   db.lots.c.name.label("lot"), db.rigs.c.name.label("rig"), db.units.c.name.label("unit"),
                   a.c.passed_qc, db.events.c.levels_f32, db.events.c.n_slices, db.events.c.n_bands,
                   db.events.c.slice_times_f64, db.events.c.band_centres_f64, db.events.c.resonances_f64)
            .select_from(placed_full().outerjoin(db.events, and_(db.events.c.actuation_id == a.c.id,
                                                              db.events.c.name == event)))
            .order_by(a.c.id))
    if profile is not None:
        stmt = stmt.where(a.c.profile == profile)
    if lots is not None:
        stmt = stmt.where(db.lots.c.name.in_(list(lots)))
    if actuation_ids is not None:
        stmt = stmt.where(a.c.id.in_([int(i) for i in actuation_ids]))
    if passed_qc_only:
        stmt = stmt.where(a.c.passed_qc.is_(True))
    out = []
    for r in conn.execute(stmt):
        arrays = event_arrays(r)
        levels, times, centres = arrays if arrays is not None else (None, None, None)
        out.append(dict(actuation_id=r.actuation_id, file=r.file, lot=r.lot, rig=r.rig, unit=r.unit,
                        passed_qc=bool(r.passed_qc), levels=levels, slice_times_s=times, band_centres_hz=centres,
                        resonances=resonances_from_blob(r.resonances_f64)))
    return pd.DataFrame(out, columns=BAND_LEVEL_COLUMNS)


def event_levels(conn, actuation_id: int, event: str):
    """(levels (n_slices, n_bands) float32, slice_times_s, band_centres_hz) of one actuation's event, or None."""
    rows = band_levels(conn, event, actuation_ids=[actuation_id], passed_qc_only=False)
    if not len(rows) or rows["levels"].iloc[0] is None:
        return None
    r = rows.iloc[0]
    return r["levels"], r["slice_times_s"], r["band_centres_hz"]


def _score_rows(conn, event, actuation_ids, model_ids):
    t = db.trajectories
    stmt = (select(t.c.actuation_id, t.c.model_id, db.reference_models.c.version, db.reference_models.c.t2_limit,
                   db.reference_models.c.spe_limit, t.c.flagged, t.c.n_slices, t.c.n_components, t.c.scores_f32,
                   t.c.t2_f32, t.c.spe_f32)
            .select_from(t.join(db.reference_models, db.reference_models.c.id == t.c.model_id))
            .where(and_(t.c.event == event, t.c.model_id.in_(list(model_ids) or [-1]),
                        t.c.actuation_id.in_([int(i) for i in actuation_ids]))))
    return conn.execute(stmt)


def _trajectory(r, event) -> Trajectory:
    shape = (r.n_slices,) if r.n_slices else None
    return Trajectory(
        actuation_id=r.actuation_id, event=event, model_id=r.model_id, model_version=r.version,
        scores=from_f32(r.scores_f32, (r.n_slices, r.n_components) if r.n_slices else None),
        t2=from_f32(r.t2_f32, shape), spe=from_f32(r.spe_f32, shape), t2_limit=r.t2_limit, spe_limit=r.spe_limit,
        flagged=bool(r.flagged))


def trajectory(conn, actuation_id: int, event: str, *, model_id: int | None = None, where: str) -> Trajectory:
    """One actuation's stored statistics of ``event`` under ``model_id`` (default: the event's active model);
    StoreError (naming the store ``where``) when there are none."""
    prof = conn.execute(select(db.actuations.c.profile).where(db.actuations.c.id == int(actuation_id))).scalar()
    ids = [model_id] if model_id is not None else active_model_ids(conn, prof, event)
    r = _score_rows(conn, event, [actuation_id], ids).first() if prof is not None else None
    if r is None:
        raise StoreError(f"{where}: no scores of actuation {actuation_id} event {event!r}"
                         + (f" under model {model_id}" if model_id is not None else " under the active model"))
    return _trajectory(r, event)


TRAJECTORY_COLUMNS = ["actuation_id", "lot", "rig", "flagged", "scores", "t2", "spe"]


def trajectories(conn, event: str, *, actuation_ids=(), lots_=(), profile: str | None = None,
                 per_lot: int = 40) -> pd.DataFrame:
    """Score trajectories under the event's active model: one row per actuation with actuation_id, lot, rig,
    flagged, scores (n_slices, A), t2 (n_slices,), spe (n_slices,). The chosen actuations, and up to
    ``per_lot`` actuations of each chosen lot (in time order); actuations without scores are left out."""
    model_ids = active_model_ids(conn, profile, event)
    chosen = {int(i) for i in actuation_ids}
    if not model_ids or (not chosen and not lots_):
        return pd.DataFrame(columns=TRAJECTORY_COLUMNS)
    a = db.actuations
    for lot in lots_:
        q = (select(a.c.id).select_from(a.join(db.lots, db.lots.c.id == a.c.lot_id)).where(db.lots.c.name == lot)
             .order_by(a.c.recorded_at, a.c.id).limit(per_lot))
        if profile:
            q = q.where(a.c.profile == profile)
        chosen |= set(conn.execute(q).scalars())
    where_ = {r.actuation_id: r for r in conn.execute(
        select(a.c.id.label("actuation_id"), a.c.recorded_at, db.lots.c.name.label("lot"), db.rigs.c.name.label("rig"))
        .select_from(a.join(db.lots, db.lots.c.id == a.c.lot_id).join(db.rigs, db.rigs.c.id == a.c.rig_id))
        .where(a.c.id.in_(sorted(chosen))))}
    out = []
    for r in _score_rows(conn, event, sorted(chosen), model_ids):
        if r.scores_f32 is None:
            continue
        t = _trajectory(r, event)
        w = where_[r.actuation_id]
        out.append((w.recorded_at, t.actuation_id, dict(actuation_id=t.actuation_id, lot=w.lot, rig=w.rig,
                                                        flagged=t.flagged, scores=t.scores, t2=t.t2, spe=t.spe)))
    out.sort(key=lambda item: (item[0], item[1]))
    return pd.DataFrame([item[2] for item in out], columns=TRAJECTORY_COLUMNS)


def unscored(conn, profile: str, event: str, model_id: int, *, limit: int) -> list:
    """Up to ``limit`` actuations of ``profile`` (by id) with no scores of ``event`` under ``model_id``: rows with
    actuation_id, levels (decoded, or None), resonances (Resonance tuple), found, reason (why the event has no
    levels)."""
    a, t = db.actuations, db.trajectories
    rows = conn.execute(
        select(a.c.id.label("actuation_id"), db.events.c.levels_f32, db.events.c.n_slices, db.events.c.n_bands,
               db.events.c.slice_times_f64, db.events.c.band_centres_f64, db.events.c.found, db.events.c.reason,
               db.events.c.resonances_f64)
        .select_from(a.outerjoin(db.events, and_(db.events.c.actuation_id == a.c.id, db.events.c.name == event)))
        .where(a.c.profile == profile)
        .where(~exists().where(and_(t.c.actuation_id == a.c.id, t.c.event == event, t.c.model_id == model_id)))
        .order_by(a.c.id).limit(limit)
    ).all()
    out = []
    for r in rows:
        arrays = event_arrays(r)
        out.append(dict(actuation_id=r.actuation_id, levels=arrays[0] if arrays else None,
                        resonances=resonances_from_blob(r.resonances_f64), n_slices=r.n_slices, n_bands=r.n_bands,
                        found=r.found, reason=r.reason))
    return out


def latest_per_rig(conn, *, per_rig: int = 10, profile: str | None = None) -> pd.DataFrame:
    """The latest ``per_rig`` actuations of every rig: actuation_id, site, rig, lot, unit, actuation, recorded_at
    (the sidecar's text), recorded_at_utc, passed_qc, file, n_model_flags, n_qc_flags (flags that count)."""
    a, f = db.actuations, db.flags
    active = active_model_ids(conn)
    n_model = (select(func.count(f.c.id)).where(and_(f.c.actuation_id == a.c.id, model_flag(active)))
               .scalar_subquery())
    n_qc = (select(func.count(f.c.id)).where(and_(f.c.actuation_id == a.c.id, f.c.model_id.is_(None)))
            .scalar_subquery())
    ids = []
    # One index seek per rig (ix_actuations_rig: rig_id, recorded_at) rather than a window over every actuation.
    for rig_id in conn.execute(select(db.rigs.c.id)).scalars():
        q = (select(a.c.id).where(a.c.rig_id == rig_id).order_by(a.c.recorded_at.desc(), a.c.id.desc())
             .limit(per_rig))
        if profile:
            q = q.where(a.c.profile == profile)
        ids += list(conn.execute(q).scalars())
    stmt = (select(a.c.id.label("actuation_id"), db.sites.c.name.label("site"), db.rigs.c.name.label("rig"),
                   db.lots.c.name.label("lot"), db.units.c.name.label("unit"), a.c.actuation,
                   a.c.recorded_at_text.label("recorded_at"), a.c.recorded_at.label("recorded_at_utc"),
                   a.c.passed_qc, db.recordings.c.original_name.label("file"), n_model.label("n_model_flags"),
                   n_qc.label("n_qc_flags"))
            .select_from(placed_full()).where(a.c.id.in_(ids or [-1]))
            .order_by(db.sites.c.name, db.rigs.c.name, a.c.recorded_at.desc(), a.c.id.desc()))
    return df(conn, stmt)


def lot_actuations(conn, lot: str, *, rig: str | None = None, limit: int = 500) -> pd.DataFrame:
    """The actuations of one lot (optionally on one rig): actuation_id, unit, actuation, rig, site, recorded_at
    (the sidecar's text), passed_qc, n_flags (flags that count)."""
    a, f = db.actuations, db.flags
    n_flags = (select(func.count(f.c.id)).where(and_(f.c.actuation_id == a.c.id,
                                                     counted_flag(active_model_ids(conn))))
               .scalar_subquery())
    stmt = (select(a.c.id.label("actuation_id"), db.units.c.name.label("unit"), a.c.actuation,
                   db.rigs.c.name.label("rig"), db.sites.c.name.label("site"),
                   a.c.recorded_at_text.label("recorded_at"), a.c.passed_qc, n_flags.label("n_flags"))
            .select_from(placed_full()).where(db.lots.c.name == lot).order_by(a.c.recorded_at, a.c.id).limit(limit))
    if rig:
        stmt = stmt.where(db.rigs.c.name == rig)
    return df(conn, stmt)


def lot_names(conn, profile: str | None = None) -> list[str]:
    """The lots that have actuations (of ``profile``), sorted by name."""
    a = db.actuations
    stmt = select(db.lots.c.name).distinct().select_from(db.lots.join(a, a.c.lot_id == db.lots.c.id))
    if profile is not None:
        stmt = stmt.where(a.c.profile == profile)
    return sorted(conn.execute(stmt).scalars())


def audit_log(conn, *, person: str | None = None, action_prefix: str | None = None, since=None, until=None,
              newest_first: bool = False, limit: int | None = None) -> pd.DataFrame:
    """The audit log, oldest first (or newest first), filtered in the database: person (exact), action_prefix
    (e.g. "auth."), since/until (dates or times, UTC; until a date includes that day), at most ``limit`` rows."""
    a = db.audit_log
    stmt = select(a)
    if person:
        stmt = stmt.where(a.c.person == person)
    if action_prefix:
        stmt = stmt.where(a.c.action.startswith(action_prefix, autoescape=True))
    if since:
        stmt = stmt.where(a.c.at >= pd.Timestamp(since).to_pydatetime())
    if until:
        end = pd.Timestamp(until)
        end = end + pd.Timedelta(days=1) if end == end.normalize() else end
        stmt = stmt.where(a.c.at < end.to_pydatetime())
    stmt = stmt.order_by(a.c.id.desc() if newest_first else a.c.id)
    return df(conn, stmt.limit(limit) if limit is not None else stmt)


def audit_facets(conn) -> tuple[list[str], list[str]]:
    """(the people, the kinds of action such as "auth.") that the audit log holds, for its filters."""
    a = db.audit_log
    people = sorted(conn.execute(select(a.c.person).distinct()).scalars())
    actions = conn.execute(select(a.c.action).distinct()).scalars()
    return people, sorted({x.split(".")[0] + "." for x in actions})


def kept_files(conn) -> dict:
    """{path: (recording_id, status, content_hash, has_sidecar)} of every copy the store keeps (archived
    originals, quarantined files); has_sidecar: the store holds the recording's sidecar text, so its copy was
    kept beside the recording."""
    r = db.recordings
    return {row.archive_path: (row.id, row.status, row.content_hash, row.sidecar_json is not None)
            for row in conn.execute(select(r.c.id, r.c.status, r.c.archive_path, r.c.content_hash,
                                           r.c.sidecar_json.is_not(None).label("sidecar_json"))
                                    .where(r.c.archive_path.is_not(None)))}


def check_integrity(conn) -> list[str]:
    """Whole-recording check, in one read transaction: every analysed recording has one actuation, its QC rows
    and its events; every quarantined one a reason; nothing else but live claims. Returns the problems found."""
    problems = []
    r, a = db.recordings, db.actuations
    rows = conn.execute(
        select(r.c.id, r.c.status, r.c.error, r.c.archive_path,
               func.count(func.distinct(a.c.id)).label("n_act"),
               func.count(func.distinct(db.qc_results.c.check_name)).label("n_qc"),
               func.count(func.distinct(db.events.c.id)).label("n_ev"))
        .select_from(r.outerjoin(a, a.c.recording_id == r.c.id)
                     .outerjoin(db.qc_results, db.qc_results.c.recording_id == r.c.id)
                     .outerjoin(db.events, db.events.c.actuation_id == a.c.id))
        .group_by(r.c.id, r.c.status, r.c.error, r.c.archive_path)
    ).all()
    for row in rows:
        if row.status == "analysed":
            if row.n_act != 1 or row.n_qc == 0 or row.n_ev == 0:
                problems.append(f"recording {row.id}: analysed but has {row.n_act} actuation(s), {row.n_qc} QC "
                                f"row(s), {row.n_ev} event row(s)")
            if not row.archive_path:
                problems.append(f"recording {row.id}: analysed but no archived original")
        elif row.status == "quarantined":
            if not row.error:
                problems.append(f"recording {row.id}: quarantined without a reason")
            if row.n_act:
                problems.append(f"recording {row.id}: quarantined but has an actuation")
        elif row.status == "claimed":
            if row.n_act or row.n_qc:
                problems.append(f"recording {row.id}: only claimed but has results")
        else:
            problems.append(f"recording {row.id}: unknown status {row.status!r}")
    return problems


def today_changes(conn) -> tuple:
    """A few index lookups that change whenever what Today shows may have: the store's fingerprint (largest ids,
    active models, latest verdict), the latest signal, and the number and latest time of the quarantined
    recordings (a recording is claimed, and has its id, before it is quarantined). A hashable tuple."""
    from .aggregates import fingerprint

    r = db.recordings
    quarantined = conn.execute(select(func.count(r.c.id), func.max(r.c.analysed_at))
                               .where(r.c.status == "quarantined")).one()
    return fingerprint(conn) + (
        ("max_signal", conn.execute(select(func.max(db.signals.c.id))).scalar() or 0),
        ("quarantined", int(quarantined[0]), str(quarantined[1])),
    )
