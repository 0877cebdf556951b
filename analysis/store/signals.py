"""Keep the signals table up to date: read what the decisions need, decide (analysis.triage), write the rows.

``refresh_signals(conn, profile)`` runs inside the caller's write transaction: the worker's commit of a batch,
each chunk of a re-scoring. It reads per-unit sums of the natural log of each per-actuation statistic under the
active models (actuations that passed their quality checks only; summed from the per-day summaries) and, for a
model with a resonance block, the per-unit sums of its whitened components (a unit's T² of their mean), the unit
limits stored with each model, and the flagged actuations; asks analysis.triage.decide for every signal; and
writes them: a signal raised again keeps its row (first_seen stays, last_seen and the values move), a new one is
inserted, an active one no longer raised is set inactive. On PostgreSQL a transaction-scoped advisory lock makes
concurrent refreshes of one profile take turns, so the last one sees every committed batch.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
from sqlalchemy import and_, bindparam, func, or_, select

from analysis.errors import ParameterError
from analysis.monitor.levels import BLOCK_STATISTIC, GROUP_STATISTICS, limits_from_dict
from analysis.triage import decide, evidence_words

from . import schema as db
from .codec import from_f32, num
from .codec import text as stored_text
from .queries._base import active_model_ids, df, placed_full
from .summaries import profile_lock

__all__ = ["refresh_signals", "unit_summaries", "block_summaries", "model_levels", "backgrounds",
           "signature_reader"]


def model_levels(conn, profile: str) -> tuple[dict, dict, dict]:
    """For the active models of ``profile``: ({event: {statistic: MeanLimits}}, {event: reference lots},
    {event: (model_id, version)})."""
    m = db.reference_models
    rows = conn.execute(select(m.c.id, m.c.event, m.c.version, m.c.reference_lots, m.c.model_json)
                        .where(and_(m.c.profile == profile, m.c.status == "active"))).all()
    limits, refs, ids = {}, {}, {}
    for r in rows:
        ids[r.event] = (r.id, r.version)
        refs[r.event] = list(json.loads(r.reference_lots or "[]"))
        try:
            meta = json.loads(r.model_json).get("metadata") or {}
            stored = meta.get("unit_limits") or {}
            limits[r.event] = {k: limits_from_dict(k, v) for k, v in stored.items()
                               if k in GROUP_STATISTICS or k == BLOCK_STATISTIC}
        except (ValueError, AttributeError, ParameterError):
            # A model built before unit limits were stored (or a document that is not ours): no unit signals
            # for its event until it is rebuilt; the cell, lot and rig levels need no stored limits.
            limits[r.event] = {}
    return limits, refs, ids


def unit_summaries(conn, profile: str, model_ids: dict) -> pd.DataFrame:
    """Per (event, statistic, lot, rig, unit): site, n (actuations that passed QC with a positive value), mean (of
    the natural log), first and last recording time (UTC). Sums of the per-day summaries (analysis.store.summaries),
    which the same transaction has brought up to date."""
    ss, cc = db.stat_summaries, db.cell_counts
    keys = [db.lots.c.name.label("lot"), db.rigs.c.name.label("rig"), db.sites.c.name.label("site"),
            db.units.c.name.label("unit")]

    def joined(table):
        return (table.join(db.lots, db.lots.c.id == table.c.lot_id).join(db.rigs, db.rigs.c.id == table.c.rig_id)
                .join(db.sites, db.sites.c.id == db.rigs.c.site_id).join(db.units, db.units.c.id == table.c.unit_id))

    cols = ["event", "statistic", "lot", "rig", "site", "unit", "n", "mean", "first", "last"]
    if not model_ids:
        return pd.DataFrame(columns=cols)
    span = df(conn, select(*keys, func.min(cc.c.first).label("first"), func.max(cc.c.last).label("last"))
              .select_from(joined(cc)).where(cc.c.profile == profile).group_by(*keys))
    frames = []
    for event, (model_id, _version) in model_ids.items():
        stmt = (select(ss.c.statistic, *keys, func.sum(ss.c.n).label("n"), func.sum(ss.c.s1).label("s1"))
                .select_from(joined(ss))
                .where(and_(ss.c.profile == profile, ss.c.event == event, ss.c.model_id == model_id,
                            ss.c.statistic.in_(list(GROUP_STATISTICS))))
                .group_by(ss.c.statistic, *keys))
        g = df(conn, stmt).merge(span, on=["lot", "rig", "site", "unit"], how="left")
        n = g["n"].fillna(0).astype(int)
        s1 = g["s1"].astype(float)
        frames.append(pd.DataFrame({
            "event": event, "statistic": g["statistic"], "lot": g["lot"], "rig": g["rig"], "site": g["site"],
            "unit": g["unit"], "n": n, "mean": np.where(n > 0, s1 / n.where(n > 0), np.nan),
            "first": pd.to_datetime(g["first"]), "last": pd.to_datetime(g["last"])}))
    return pd.concat(frames, ignore_index=True)[cols] if frames else pd.DataFrame(columns=cols)


def block_summaries(conn, profile: str, model_ids: dict, limits: dict) -> pd.DataFrame:
    """Per (event, lot, rig, unit) of the events whose model has a resonance block: the unit-summary row of
    BLOCK_STATISTIC, whose mean is the T² of the unit's mean whitened resonance features (not a log), with the
    mean vector in ``vector``. Actuations that passed QC only."""
    a, c = db.actuations, db.resonance_components
    frames = []
    for event, (model_id, _version) in model_ids.items():
        lim = (limits.get(event) or {}).get(BLOCK_STATISTIC)
        if lim is None:
            continue
        stmt = (select(db.lots.c.name.label("lot"), db.rigs.c.name.label("rig"), db.sites.c.name.label("site"),
                       db.units.c.name.label("unit"), c.c.k, func.count(c.c.value).label("n"),
                       func.sum(c.c.value).label("s1"), func.min(a.c.recorded_at).label("first"),
                       func.max(a.c.recorded_at).label("last"))
                .select_from(placed_full().join(c, and_(c.c.actuation_id == a.c.id, c.c.model_id == model_id)))
                .where(and_(a.c.profile == profile, a.c.passed_qc.is_(True)))
                .group_by(db.lots.c.name, db.rigs.c.name, db.sites.c.name, db.units.c.name, c.c.k))
        g = df(conn, stmt)
        if not len(g):
            continue
        g = g[g["k"] < lim.p]
        keys = ["lot", "rig", "site", "unit"]
        wide = g.pivot_table(index=keys, columns="k", values="s1", aggfunc="first").reindex(columns=range(lim.p))
        n = g.groupby(keys)["n"].min().reindex(wide.index)
        span = g.groupby(keys).agg(first=("first", "min"), last=("last", "max")).reindex(wide.index)
        means = wide.to_numpy(dtype=float) / n.to_numpy(dtype=float)[:, None]
        idx = wide.index.to_frame(index=False)
        frames.append(pd.DataFrame({
            "event": event, "statistic": BLOCK_STATISTIC, "lot": idx["lot"], "rig": idx["rig"],
            "site": idx["site"], "unit": idx["unit"], "n": n.to_numpy(dtype=int),
            "mean": lim.t2(means, n.to_numpy(dtype=float)), "first": pd.to_datetime(span["first"].to_numpy()),
            "last": pd.to_datetime(span["last"].to_numpy()), "vector": list(means)}))
    cols = ["event", "statistic", "lot", "rig", "site", "unit", "n", "mean", "first", "last", "vector"]
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=cols)


def signature_reader(conn, profile: str, model_ids: dict):
    """(event, lot, rig) -> the mean over the cell's actuations that passed QC of their slice-mean residual per
    band under the event's active model (None when no scored actuation of the cell has one); read on demand and
    kept, so a refresh reads only the cells it compares."""
    a, t = db.actuations, db.trajectories
    cache: dict = {}

    def signature_of(event, lot, rig):
        key = (event, lot, rig)
        if key not in cache:
            mid = model_ids.get(event, (None, None))[0]
            rows = [] if mid is None else conn.execute(
                select(t.c.residual_f32).select_from(placed_full().join(t, t.c.actuation_id == a.c.id))
                .where(and_(t.c.model_id == mid, a.c.profile == profile, a.c.passed_qc.is_(True),
                            db.lots.c.name == lot, db.rigs.c.name == rig, t.c.residual_f32.is_not(None)))).scalars()
            vecs = [from_f32(b).astype(float) for b in rows]
            cache[key] = np.mean(vecs, axis=0) if vecs and len({v.size for v in vecs}) == 1 else None
        return cache[key]

    return signature_of


def _flagged(conn, profile: str) -> pd.DataFrame:
    """One row per flagged actuation and event (event None for quality-check flags): actuation_id, event,
    statistics (list), value and limit of the strongest flag, site, rig, lot, unit, recorded_at."""
    a, f = db.actuations, db.flags
    active = active_model_ids(conn, profile)
    counted = or_(f.c.model_id.is_(None), f.c.model_id.in_(active or [-1]))
    stmt = (select(f.c.actuation_id, f.c.event, f.c.model_id, f.c.statistic, f.c.value, f.c.limit_value,
                   db.sites.c.name.label("site"), db.rigs.c.name.label("rig"), db.lots.c.name.label("lot"),
                   db.units.c.name.label("unit"), a.c.recorded_at)
            .select_from(placed_full().join(f, f.c.actuation_id == a.c.id))
            .where(and_(a.c.profile == profile, counted)).order_by(f.c.actuation_id, f.c.id))
    fl = df(conn, stmt)
    cols = ["actuation_id", "event", "statistics", "value", "limit", "site", "rig", "lot", "unit", "recorded_at"]
    if not len(fl):
        return pd.DataFrame(columns=cols)
    fl["qc"] = fl["model_id"].isna()
    fl["event"] = fl["event"].where(~fl["qc"], None)
    ratio = fl["value"].astype(float) / fl["limit_value"].astype(float).where(fl["limit_value"] > 0)
    fl["ratio"] = ratio.fillna(np.inf)
    fl["ekey"] = fl["event"].fillna("")
    fl = fl.sort_values(["actuation_id", "ekey", "qc", "ratio"], ascending=[True, True, False, False], kind="stable")
    top = fl.drop_duplicates(["actuation_id", "ekey"]).set_index(["actuation_id", "ekey"])
    names = fl.groupby(["actuation_id", "ekey"], sort=False)["statistic"].agg(lambda v: list(dict.fromkeys(v)))
    top = top.join(names.rename("statistics")).reset_index()
    rows = pd.DataFrame({"actuation_id": top["actuation_id"].astype(int),
                         "event": top["ekey"].where(top["ekey"] != "", None), "statistics": top["statistics"],
                         "value": top["value"], "limit": top["limit_value"], "site": top["site"], "rig": top["rig"],
                         "lot": top["lot"], "unit": top["unit"], "recorded_at": top["recorded_at"]})
    out = rows[cols]
    # An actuation that failed a quality check gets one signal (the recording), not one per event as well.
    qc_ids = set(out.loc[out["event"].isna(), "actuation_id"])
    return out[out["event"].isna() | ~out["actuation_id"].isin(qc_ids)].reset_index(drop=True)


def backgrounds(conn, profile: str) -> pd.DataFrame:
    """Per actuation of ``profile`` that passed QC: actuation_id, rig, site, lot, recorded_at, levels (the
    background band levels, dB)."""
    a, b = db.actuations, db.backgrounds
    stmt = (select(a.c.id.label("actuation_id"), db.rigs.c.name.label("rig"), db.sites.c.name.label("site"),
                   db.lots.c.name.label("lot"), a.c.recorded_at, b.c.n_bands, b.c.levels_f32)
            .select_from(placed_full().join(b, b.c.actuation_id == a.c.id))
            .where(and_(a.c.profile == profile, a.c.passed_qc.is_(True))).order_by(a.c.id))
    rows = conn.execute(stmt).all()
    return pd.DataFrame({
        "actuation_id": [r.actuation_id for r in rows], "rig": [r.rig for r in rows],
        "site": [r.site for r in rows], "lot": [r.lot for r in rows],
        "recorded_at": pd.to_datetime([r.recorded_at for r in rows]),
        "levels": [from_f32(r.levels_f32, (r.n_bands,)).astype(float) for r in rows]})


def _time(v):
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return None
    t = pd.Timestamp(v)
    return None if pd.isna(t) else t.to_pydatetime().replace(tzinfo=None)


def refresh_signals(conn, profile: str, *, now=None) -> dict:
    """Recompute every signal of ``profile`` and write them (module docstring); returns counts
    {"active", "new", "ended"}."""
    profile_lock(conn, profile)
    now = now or db.utc_now()
    limits, refs, ids = model_levels(conn, profile)
    units = unit_summaries(conn, profile, ids)
    blocks = block_summaries(conn, profile, ids, limits)
    if len(blocks):
        units = pd.concat([units, blocks], ignore_index=True)
    flagged = _flagged(conn, profile)
    # The rig's background is compared with its reference lots: none before the first reference is built.
    bg = backgrounds(conn, profile) if ids else None
    decisions = decide(units, limits, flagged, reference_lots=refs, background=bg,
                       signature_of=signature_reader(conn, profile, ids))
    s = db.signals
    have = {r.key: (r.id, r.active) for r in conn.execute(select(s.c.key, s.c.id, s.c.active)
                                                           .where(s.c.profile == profile))}
    inserts, updates, seen = [], [], set()
    for d in decisions:
        key = d.key
        if key in seen:
            continue
        seen.add(key)
        version = ids.get(d.event, (None, None))[1] if d.event else None
        row = dict(level=d.level, event=d.event, statistic=d.statistic, value=num(d.value),
                   limit_value=num(d.limit), rule=stored_text(d.rule), site=stored_text(d.site),
                   rig=stored_text(d.rig), lot=stored_text(d.lot), unit=stored_text(d.unit),
                   actuation_id=d.actuation_id, cause=d.cause, evidence=stored_text(evidence_words(d)),
                   evidence_json=stored_text(json.dumps(d.evidence, ensure_ascii=False, default=str)),
                   model_version=version, first=_time(d.first), last=_time(d.last), last_seen=now, active=True)
        if key in have:
            updates.append(dict(row, b_id=have[key][0]))
        else:
            inserts.append(dict(row, profile=profile, key=key, first_seen=now))
    if inserts:
        conn.execute(s.insert(), inserts)
    if updates:
        conn.execute(s.update().where(s.c.id == bindparam("b_id")),
                     [{k: v for k, v in u.items()} for u in updates])
    ended = [i for k, (i, active) in have.items() if active and k not in seen]
    for start in range(0, len(ended), 500):
        conn.execute(s.update().where(s.c.id.in_(ended[start:start + 500])).values(active=False))
    return {"active": len(seen), "new": len(inserts), "ended": len(ended)}
