"""Reads of the stored reference models: the versions, their counts, the active ones decoded, their lots, and the
typical reference actuation of an event."""

from __future__ import annotations

import json

import pandas as pd
from sqlalchemy import and_, func, select

from .. import schema as db
from ..codec import model_from_blobs
from ..errors import StoreError
from ._base import df

__all__ = ["models", "load_model", "active_models", "reference_lots", "typical_reference_actuation", "approvals"]

_BLOBS = ("model_json", "model_npz")


def models(conn, *, profile: str | None = None, event: str | None = None, counts: bool = False) -> pd.DataFrame:
    """The stored model versions without their documents: id, profile, event, version, status, reference_lots
    (list), parameters (dict), n_recordings, n_components, t2_limit, spe_limit, created_by, created_at; with
    ``counts`` also scored and flagged (actuations scored and flagged under each version). Ordered by profile,
    event and version."""
    m = db.reference_models
    cols = [c for c in m.c if c.name not in _BLOBS]
    if counts:
        t = db.trajectories
        cols += [select(func.count(t.c.id)).where(t.c.model_id == m.c.id).scalar_subquery().label("scored"),
                 select(func.count(t.c.id)).where(and_(t.c.model_id == m.c.id, t.c.flagged.is_(True)))
                 .scalar_subquery().label("flagged")]
    stmt = select(*cols).order_by(m.c.profile, m.c.event, m.c.version)
    if profile is not None:
        stmt = stmt.where(m.c.profile == profile)
    if event is not None:
        stmt = stmt.where(m.c.event == event)
    out = df(conn, stmt)
    out["reference_lots"] = [json.loads(t) for t in out["reference_lots"]]
    out["parameters"] = [json.loads(t) for t in out["parameters"]]
    return out


def load_model(conn, model_id: int, *, where: str):
    """The ReferenceModel stored as ``model_id`` (format and checksum checked); StoreError naming ``where``."""
    m = db.reference_models
    row = conn.execute(select(m.c.model_json, m.c.model_npz).where(m.c.id == model_id)).first()
    if row is None:
        raise StoreError(f"{where}: no reference model with id {model_id}")
    return model_from_blobs(row.model_json, row.model_npz, where=f"{where} model {model_id}")


def active_models(conn, profile: str, *, where: str) -> dict:
    """{event: (model_id, ReferenceModel)} of the profile's active models."""
    m = db.reference_models
    rows = conn.execute(select(m.c.id, m.c.event, m.c.model_json, m.c.model_npz)
                        .where(and_(m.c.profile == profile, m.c.status == "active")).order_by(m.c.event)).all()
    return {r.event: (r.id, model_from_blobs(r.model_json, r.model_npz, where=f"{where} model {r.id}")) for r in rows}


def reference_lots(conn, profile: str | None, event: str) -> list[str]:
    """The lots of the active reference model of (profile, event), sorted (empty when there is none)."""
    m = db.reference_models
    stmt = select(m.c.reference_lots).where(and_(m.c.status == "active", m.c.event == event))
    if profile:
        stmt = stmt.where(m.c.profile == profile)
    out = []
    for (text,) in conn.execute(stmt):
        out += json.loads(text)
    return sorted(set(out))


def typical_reference_actuation(conn, profile: str, event: str) -> int | None:
    """The reference-lot actuation (passed QC) nearest the reference envelope's centre under the event's active
    model: the smallest trajectory distance (mean squared standardised score deviation from the centre)."""
    m, a, t = db.reference_models, db.actuations, db.trajectories
    row = conn.execute(select(m.c.id, m.c.reference_lots).where(and_(
        m.c.profile == profile, m.c.event == event, m.c.status == "active"))).first()
    if row is None:
        return None
    stmt = (select(a.c.id)
            .select_from(t.join(a, a.c.id == t.c.actuation_id).join(db.lots, db.lots.c.id == a.c.lot_id))
            .where(and_(t.c.model_id == row.id, db.lots.c.name.in_(json.loads(row.reference_lots)),
                        a.c.passed_qc.is_(True), t.c.trajectory_distance.is_not(None)))
            .order_by(t.c.trajectory_distance, a.c.id).limit(1))
    return conn.execute(stmt).scalar()


def approvals(conn) -> pd.DataFrame:
    """Every signed approval, oldest first: model_id, person, at (UTC), meaning, reason."""
    a = db.approvals
    return df(conn, select(a.c.model_id, a.c.person, a.c.at, a.c.meaning, a.c.reason).order_by(a.c.id))
