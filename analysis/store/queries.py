"""Read queries of the store, each a function of an open connection; they return DataFrames or dataclasses.

"Active" statistics and flags are those of each profile's and event's active model version; quality-check
flags need no model and always count.
"""

from __future__ import annotations

import json
from dataclasses import dataclass

import numpy as np
import pandas as pd
from sqlalchemy import and_, func, or_, select

from .errors import StoreError
from .schema import lots as lot_t
from .schema import (
    actuations,
    audit_log,
    events,
    flags,
    lots,
    qc_results,
    recordings,
    reference_models,
    rigs,
    sites,
    store_info,
    trajectories,
    units,
    verdicts,
)

__all__ = [
    "schema_version", "recordings_df", "quarantine", "actuations_df", "export_actuations", "flag_summary",
    "flags_df", "models", "load_model", "active_models", "band_levels", "trajectory", "Trajectory", "audit_log_df",
    "check_integrity", "lot_names",
]

EVENT_COLUMNS = ("found", "onset_s", "end_s", "duration_s", "peak_dbfs", "latency_s", "dominant_hz", "centroid_hz",
                 "band_energy_db")
STAT_COLUMNS = ("model_version", "t2_max", "t2_ratio", "spe_max", "spe_ratio", "trajectory_distance",
                "event_spe_ratio", "slices_outside", "flagged")


def _df(conn, stmt) -> pd.DataFrame:
    res = conn.execute(stmt)
    return pd.DataFrame(res.fetchall(), columns=list(res.keys()))


def schema_version(conn) -> int:
    return int(conn.execute(select(store_info.c.value).where(store_info.c.key == "schema_version")).scalar_one())


def recordings_df(conn, *, status=None) -> pd.DataFrame:
    cols = [c for c in recordings.c if c.name != "sidecar_json"]
    stmt = select(*cols).order_by(recordings.c.id)
    if status is not None:
        stmt = stmt.where(recordings.c.status == status)
    return _df(conn, stmt)


def quarantine(conn) -> pd.DataFrame:
    """Quarantined recordings: id, file (as delivered), reason, kept_at (the quarantined copy), received_at."""
    return _df(conn, select(
        recordings.c.id.label("recording_id"), recordings.c.original_name.label("file"),
        recordings.c.error.label("reason"), recordings.c.archive_path.label("kept_at"),
        recordings.c.content_hash, recordings.c.size_bytes, recordings.c.received_at,
    ).where(recordings.c.status == "quarantined").order_by(recordings.c.id))


def _base():
    return (
        actuations.join(recordings, recordings.c.id == actuations.c.recording_id)
        .join(sites, sites.c.id == actuations.c.site_id)
        .join(rigs, rigs.c.id == actuations.c.rig_id)
        .join(lots, lots.c.id == actuations.c.lot_id)
        .join(units, units.c.id == actuations.c.unit_id)
    )


def actuations_df(conn, *, profile=None) -> pd.DataFrame:
    """One row per actuation with its identifiers, times (UTC) and where its original is kept."""
    stmt = select(
        actuations.c.id.label("actuation_id"), recordings.c.original_name.label("file"),
        sites.c.name.label("site"), rigs.c.name.label("rig"), lots.c.name.label("lot"), units.c.name.label("unit"),
        actuations.c.actuation, actuations.c.recorded_at_text.label("recorded_at"),
        actuations.c.recorded_at.label("recorded_at_utc"), actuations.c.profile, actuations.c.passed_qc,
        recordings.c.id.label("recording_id"), recordings.c.archive_path, recordings.c.content_hash,
    ).select_from(_base()).order_by(actuations.c.recorded_at, actuations.c.id)
    if profile is not None:
        stmt = stmt.where(actuations.c.profile == profile)
    return _df(conn, stmt)


def _active_ids(conn) -> list[int]:
    return list(conn.execute(select(reference_models.c.id).where(reference_models.c.status == "active")).scalars())


def flags_df(conn, *, actuation_id=None, active_only=True) -> pd.DataFrame:
    """Flags with their model version and any verdicts (one row per flag; verdicts joined as text)."""
    stmt = (select(flags.c.id.label("flag_id"), flags.c.actuation_id, flags.c.model_id,
                   reference_models.c.version.label("model_version"), flags.c.event, flags.c.statistic,
                   flags.c.value, flags.c.limit_value.label("limit"), flags.c.reason, flags.c.created_at)
            .select_from(flags.outerjoin(reference_models, reference_models.c.id == flags.c.model_id))
            .order_by(flags.c.actuation_id, flags.c.id))
    if actuation_id is not None:
        stmt = stmt.where(flags.c.actuation_id == actuation_id)
    if active_only:
        stmt = stmt.where(or_(flags.c.model_id.is_(None), reference_models.c.status == "active"))
    df = _df(conn, stmt)
    v = _df(conn, select(verdicts.c.flag_id, verdicts.c.person, verdicts.c.verdict, verdicts.c.note,
                         verdicts.c.created_at).order_by(verdicts.c.id))
    if len(v):
        text = v.assign(t=lambda d: d["person"] + ": " + d["verdict"]
                        + d["note"].fillna("").map(lambda n: f" ({n})" if n else ""))
        df["verdicts"] = _text(df["flag_id"], text.groupby("flag_id")["t"].agg("; ".join))
    else:
        df["verdicts"] = ""
    return df


def export_actuations(conn) -> pd.DataFrame:
    """One row per actuation: identifiers, QC, event timings and features, statistics under the active models,
    ``flagged`` (bool), ``reasons`` and ``verdicts`` (text). Per-event columns are named ``<event>.<column>``."""
    base = actuations_df(conn).drop(columns=["recorded_at_utc", "recording_id", "archive_path", "content_hash"])
    base = base.sort_values("actuation_id").reset_index(drop=True)
    ids = base["actuation_id"]
    qc = _df(conn, select(actuations.c.id.label("actuation_id"), qc_results.c.check_name, qc_results.c.value,
                          qc_results.c.passed)
             .select_from(qc_results.join(actuations, actuations.c.recording_id == qc_results.c.recording_id))
             .order_by(actuations.c.id, qc_results.c.check_name))
    failed = qc[~qc["passed"].astype(bool)].groupby("actuation_id")["check_name"].agg(",".join)
    base["qc_failed"] = _text(ids, failed)
    if len(qc):
        qv = qc.pivot(index="actuation_id", columns="check_name", values="value")
        qv.columns = [f"qc.{c}" for c in qv.columns]
        base = base.join(qv, on="actuation_id")
    ev = _df(conn, select(events.c.actuation_id, events.c.name, *[events.c[c] for c in EVENT_COLUMNS])
             .order_by(events.c.id))
    names = list(dict.fromkeys(ev["name"]))
    for name in names:
        part = ev[ev["name"] == name].set_index("actuation_id")[list(EVENT_COLUMNS)]
        part.columns = [f"{name}.{c}" for c in part.columns]
        base = base.join(part, on="actuation_id")
    tr = _df(conn, select(trajectories.c.actuation_id, trajectories.c.event,
                          reference_models.c.version.label("model_version"),
                          *[trajectories.c[c] for c in STAT_COLUMNS if c != "model_version"])
             .select_from(trajectories.join(reference_models, reference_models.c.id == trajectories.c.model_id))
             .where(reference_models.c.status == "active"))
    for name in list(dict.fromkeys(list(names) + list(tr["event"]))):
        part = tr[tr["event"] == name].set_index("actuation_id")[list(STAT_COLUMNS)]
        if not len(part):
            continue
        part.columns = [f"{name}.{c}" for c in part.columns]
        base = base.join(part, on="actuation_id")
    fl = flags_df(conn, active_only=True)
    fl["text"] = np.where(fl["event"].notna(), fl["event"].fillna("") + ": " + fl["reason"], fl["reason"])
    base["flagged"] = ids.isin(set(fl["actuation_id"])).astype(bool)
    base["reasons"] = _text(ids, fl.groupby("actuation_id")["text"].agg(" | ".join))
    vd = fl[fl["verdicts"] != ""]
    base["verdicts"] = _text(ids, vd.groupby("actuation_id")["verdicts"].agg("; ".join))
    return base


def _text(ids: pd.Series, by_id: pd.Series) -> pd.Series:
    """Text per id, "" where there is none."""
    d = by_id.to_dict()
    return pd.Series([d.get(i, "") for i in ids], index=ids.index, dtype=object)


def flag_summary(conn, *, by=("rig", "lot")) -> pd.DataFrame:
    """Actuations, flagged actuations and the flagged fraction per group (default: per rig and lot; any of
    site, rig, lot, unit, profile). Flags are those of the active models plus quality-check flags."""
    allowed = ("site", "rig", "lot", "unit", "profile")
    bad = [b for b in by if b not in allowed]
    if bad or not by:
        raise StoreError(f"flag summary groups by {', '.join(allowed)}; got {list(by)!r}")
    act = actuations_df(conn)
    active = set(_active_ids(conn))
    fl = _df(conn, select(flags.c.actuation_id, flags.c.model_id))
    fl = fl[fl["model_id"].isna() | fl["model_id"].isin(active)]
    act["flagged"] = act["actuation_id"].isin(set(fl["actuation_id"]))
    out = act.groupby(list(by), sort=True).agg(actuations=("actuation_id", "size"),
                                               flagged=("flagged", "sum")).reset_index()
    out["flagged"] = out["flagged"].astype(int)
    out["flagged_fraction"] = out["flagged"] / out["actuations"]
    return out


def models(conn, *, profile=None, event=None) -> pd.DataFrame:
    cols = [c for c in reference_models.c if c.name not in ("model_json", "model_npz")]
    stmt = select(*cols).order_by(reference_models.c.profile, reference_models.c.event, reference_models.c.version)
    if profile is not None:
        stmt = stmt.where(reference_models.c.profile == profile)
    if event is not None:
        stmt = stmt.where(reference_models.c.event == event)
    df = _df(conn, stmt)
    df["reference_lots"] = df["reference_lots"].map(json.loads)
    return df


def load_model(conn, model_id, *, where):
    from .reference import model_from_blobs

    row = conn.execute(select(reference_models.c.model_json, reference_models.c.model_npz)
                       .where(reference_models.c.id == model_id)).first()
    if row is None:
        raise StoreError(f"{where}: no reference model with id {model_id}")
    return model_from_blobs(row.model_json, bytes(row.model_npz), where=f"{where} model {model_id}")


def active_models(conn, profile, *, where) -> dict:
    from .reference import model_from_blobs

    rows = conn.execute(select(reference_models.c.id, reference_models.c.event, reference_models.c.model_json,
                               reference_models.c.model_npz)
                        .where(and_(reference_models.c.profile == profile, reference_models.c.status == "active"))
                        .order_by(reference_models.c.event)).all()
    return {r.event: (r.id, model_from_blobs(r.model_json, bytes(r.model_npz), where=f"{where} model {r.id}"))
            for r in rows}


def lot_names(conn, profile=None) -> list[str]:
    stmt = select(lots.c.name).distinct().select_from(lots.join(actuations, actuations.c.lot_id == lots.c.id))
    if profile is not None:
        stmt = stmt.where(actuations.c.profile == profile)
    return sorted(conn.execute(stmt).scalars())


def band_levels(conn, profile, event, *, lots=None, passed_qc_only=True) -> pd.DataFrame:
    """One row per actuation of ``profile`` with the event's band levels: actuation_id, file, lot, rig,
    passed_qc, levels ((n_slices, n_bands) float32 array in the event's level unit, or None), slice_times_s,
    band_centres_hz (Hz)."""
    stmt = (select(actuations.c.id.label("actuation_id"), recordings.c.original_name.label("file"),
                   lot_t.c.name.label("lot"), rigs.c.name.label("rig"), actuations.c.passed_qc,
                   events.c.levels_f32, events.c.n_slices, events.c.n_bands, events.c.slice_times_f64,
                   events.c.band_centres_f64)
            .select_from(actuations.join(recordings, recordings.c.id == actuations.c.recording_id)
                         .join(lot_t, lot_t.c.id == actuations.c.lot_id).join(rigs, rigs.c.id == actuations.c.rig_id)
                         .outerjoin(events, and_(events.c.actuation_id == actuations.c.id, events.c.name == event)))
            .where(actuations.c.profile == profile).order_by(actuations.c.id))
    if lots is not None:
        stmt = stmt.where(lot_t.c.name.in_(list(lots)))
    if passed_qc_only:
        stmt = stmt.where(actuations.c.passed_qc.is_(True))
    out = []
    for r in conn.execute(stmt):
        has = r.levels_f32 is not None
        out.append(dict(
            actuation_id=r.actuation_id, file=r.file, lot=r.lot, rig=r.rig, passed_qc=bool(r.passed_qc),
            levels=np.frombuffer(r.levels_f32, dtype="<f4").reshape(r.n_slices, r.n_bands) if has else None,
            slice_times_s=np.frombuffer(r.slice_times_f64, dtype="<f8") if has else None,
            band_centres_hz=np.frombuffer(r.band_centres_f64, dtype="<f8") if has else None,
        ))
    return pd.DataFrame(out, columns=["actuation_id", "file", "lot", "rig", "passed_qc", "levels", "slice_times_s",
                                      "band_centres_hz"])


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


def trajectory(conn, actuation_id, event, *, model_id=None, where) -> Trajectory:
    """The trajectory under ``model_id`` (default: the active model of the event)."""
    stmt = (select(trajectories, reference_models.c.version, reference_models.c.t2_limit,
                   reference_models.c.spe_limit)
            .select_from(trajectories.join(reference_models, reference_models.c.id == trajectories.c.model_id))
            .where(and_(trajectories.c.actuation_id == actuation_id, trajectories.c.event == event)))
    stmt = stmt.where(trajectories.c.model_id == model_id) if model_id is not None else \
        stmt.where(reference_models.c.status == "active")
    r = conn.execute(stmt).first()
    if r is None:
        raise StoreError(f"{where}: no scores of actuation {actuation_id} event {event!r}"
                         + (f" under model {model_id}" if model_id is not None else " under the active model"))

    def arr(b, shape):
        return None if b is None else np.frombuffer(b, dtype="<f4").reshape(shape)

    return Trajectory(
        actuation_id=actuation_id, event=event, model_id=r.model_id, model_version=r.version,
        scores=arr(r.scores_f32, (r.n_slices, r.n_components) if r.n_slices else None),
        t2=arr(r.t2_f32, (r.n_slices,) if r.n_slices else None), spe=arr(r.spe_f32, (r.n_slices,) if r.n_slices else None),
        t2_limit=r.t2_limit, spe_limit=r.spe_limit, flagged=bool(r.flagged),
    )


def audit_log_df(conn) -> pd.DataFrame:
    return _df(conn, select(audit_log).order_by(audit_log.c.id))


def check_integrity(conn) -> list[str]:
    """Whole-recording check, in one read transaction: every analysed recording has one actuation, its QC rows
    and its events; every quarantined one a reason; nothing else but live claims."""
    problems = []
    rows = conn.execute(
        select(recordings.c.id, recordings.c.status, recordings.c.error, recordings.c.archive_path,
               func.count(func.distinct(actuations.c.id)).label("n_act"),
               func.count(func.distinct(qc_results.c.check_name)).label("n_qc"),
               func.count(func.distinct(events.c.id)).label("n_ev"))
        .select_from(recordings.outerjoin(actuations, actuations.c.recording_id == recordings.c.id)
                     .outerjoin(qc_results, qc_results.c.recording_id == recordings.c.id)
                     .outerjoin(events, events.c.actuation_id == actuations.c.id))
        .group_by(recordings.c.id, recordings.c.status, recordings.c.error, recordings.c.archive_path)
    ).all()
    for r in rows:
        if r.status == "analysed":
            if r.n_act != 1 or r.n_qc == 0 or r.n_ev == 0:
                problems.append(f"recording {r.id}: analysed but has {r.n_act} actuation(s), {r.n_qc} QC row(s), "
                                f"{r.n_ev} event row(s)")
            if not r.archive_path:
                problems.append(f"recording {r.id}: analysed but no archived original")
        elif r.status == "quarantined":
            if not r.error:
                problems.append(f"recording {r.id}: quarantined without a reason")
            if r.n_act:
                problems.append(f"recording {r.id}: quarantined but has an actuation")
        elif r.status == "claimed":
            if r.n_act or r.n_qc:
                problems.append(f"recording {r.id}: only claimed but has results")
        else:
            problems.append(f"recording {r.id}: unknown status {r.status!r}")
    return problems
