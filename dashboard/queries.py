"""The dashboard's read queries on the results store (SQLAlchemy Core on analysis.store.schema's tables).

Each function takes an open connection (``store.read()``) and returns a small DataFrame or dataclass: the
aggregation happens in SQL, so what comes back is what is drawn (per-lot points, per-rig histograms, a thinned
cloud of actuations), whatever the number of actuations in the store.

"Active" statistics are those scored under each profile's and event's active reference model; an actuation is
flagged when it has a flag of an active model or a quality-check flag (which needs no model), as in the store.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from datetime import date, datetime, timedelta

import numpy as np
import pandas as pd
from sqlalchemy import and_, case, exists, func, literal, or_, select

from analysis.store.schema import (
    actuations,
    events,
    flags,
    lots,
    qc_results,
    recordings,
    reference_models,
    rigs,
    sites,
    trajectories,
    units,
)

__all__ = [
    "Statistic", "STATISTICS", "statistic", "Filters", "choices", "lot_points", "actuation_cloud", "lot_actuations",
    "rig_summary", "rig_histogram", "latest_per_rig", "flags_for", "recent_quarantine", "triage_evidence",
    "actuation_detail", "typical_reference_actuation", "trajectories_for", "reference_lots_of", "models_table",
    "store_counts_fast",
]


@dataclass(frozen=True)
class Statistic:
    """A per-actuation statistic the charts can draw: where it lives, its label and unit, and whether it is a
    positive ratio best drawn (and given limits) on a log scale."""

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
    try:
        return STATISTICS[key]
    except KeyError:
        raise ValueError(f"statistic must be one of {', '.join(STATISTICS)}; got {key!r}") from None


@dataclass(frozen=True)
class Filters:
    """What the views filter on (None or empty = everything). Dates are UTC calendar days, both ends included."""

    profile: str | None = None
    sites: tuple[str, ...] = ()
    rigs: tuple[str, ...] = ()
    lots: tuple[str, ...] = ()
    date_from: date | None = None
    date_to: date | None = None


def _df(conn, stmt) -> pd.DataFrame:
    res = conn.execute(stmt)
    return pd.DataFrame(res.fetchall(), columns=list(res.keys()))


def _active_model_ids(conn, profile=None, event=None):
    stmt = select(reference_models.c.id).where(reference_models.c.status == "active")
    if profile:
        stmt = stmt.where(reference_models.c.profile == profile)
    if event:
        stmt = stmt.where(reference_models.c.event == event)
    return list(conn.execute(stmt).scalars())


def _flagged_expr(active_ids):
    """True when the actuation has a quality-check flag or a flag of an active model (correlated EXISTS)."""
    cond = flags.c.model_id.is_(None)
    if active_ids:
        cond = or_(cond, flags.c.model_id.in_(active_ids))
    return exists().where(and_(flags.c.actuation_id == actuations.c.id, cond))


def _where(stmt, f: Filters):
    if f.profile:
        stmt = stmt.where(actuations.c.profile == f.profile)
    if f.sites:
        stmt = stmt.where(sites.c.name.in_(list(f.sites)))
    if f.rigs:
        stmt = stmt.where(rigs.c.name.in_(list(f.rigs)))
    if f.lots:
        stmt = stmt.where(lots.c.name.in_(list(f.lots)))
    if f.date_from:
        stmt = stmt.where(actuations.c.recorded_at >= datetime.combine(f.date_from, datetime.min.time()))
    if f.date_to:
        stmt = stmt.where(actuations.c.recorded_at < datetime.combine(f.date_to + timedelta(days=1),
                                                                      datetime.min.time()))
    return stmt


def _with_value(conn, stat: Statistic, event: str, profile: str | None):
    """(from clause, value column, active model ids) for a statistic of one event."""
    base = (actuations.join(sites, sites.c.id == actuations.c.site_id)
            .join(rigs, rigs.c.id == actuations.c.rig_id).join(lots, lots.c.id == actuations.c.lot_id))
    active = _active_model_ids(conn)
    if stat.table == "trajectories":
        event_models = _active_model_ids(conn, profile, event) or [-1]
        base = base.join(trajectories, and_(trajectories.c.actuation_id == actuations.c.id,
                                            trajectories.c.event == event,
                                            trajectories.c.model_id.in_(event_models)))
        value = trajectories.c[stat.column]
    else:
        base = base.join(events, and_(events.c.actuation_id == actuations.c.id, events.c.name == event))
        value = events.c[stat.column]
    return base, value, active


def choices(conn, profile: str | None = None) -> dict:
    """What the filters offer: profiles, sites, rigs (with their site), lots (in time order), events per profile,
    and the first and last recording day (UTC)."""
    prof = sorted(conn.execute(select(actuations.c.profile).distinct()).scalars())
    rig_rows = conn.execute(select(rigs.c.name, sites.c.name.label("site"))
                            .select_from(rigs.join(sites, sites.c.id == rigs.c.site_id))
                            .order_by(sites.c.name, rigs.c.name)).all()
    lot_stmt = (select(lots.c.name, func.min(actuations.c.recorded_at).label("first"))
                .select_from(lots.join(actuations, actuations.c.lot_id == lots.c.id))
                .group_by(lots.c.name).order_by(func.min(actuations.c.recorded_at)))
    if profile:
        lot_stmt = lot_stmt.where(actuations.c.profile == profile)
    ev_stmt = select(reference_models.c.profile, reference_models.c.event).distinct()
    ev = conn.execute(ev_stmt).all()
    ev_found = conn.execute(select(events.c.name).distinct()).scalars().all() if not ev else []
    span = conn.execute(select(func.min(actuations.c.recorded_at), func.max(actuations.c.recorded_at))).first()
    events_by_profile: dict[str, list[str]] = {}
    for p, e in ev:
        events_by_profile.setdefault(p, []).append(e)
    for p in prof:
        events_by_profile.setdefault(p, sorted(ev_found))
    return {
        "profiles": prof,
        "sites": sorted({r.site for r in rig_rows}),
        "rigs": [(r.name, r.site) for r in rig_rows],
        "lots": list(conn.execute(lot_stmt).scalars()),
        "events": {p: sorted(v) for p, v in events_by_profile.items()},
        "first_day": span[0].date() if span and span[0] else None,
        "last_day": span[1].date() if span and span[1] else None,
    }


def reference_lots_of(conn, profile: str | None, event: str) -> list[str]:
    """The lots of the active reference model of (profile, event) (empty when there is none)."""
    stmt = select(reference_models.c.reference_lots).where(and_(reference_models.c.status == "active",
                                                                reference_models.c.event == event))
    if profile:
        stmt = stmt.where(reference_models.c.profile == profile)
    out = []
    for (text,) in conn.execute(stmt):
        out += json.loads(text)
    return sorted(set(out))


def lot_points(conn, stat_key: str, event: str, filters: Filters = Filters(), *, by_rig: bool = True) -> pd.DataFrame:
    """One row per lot (and rig, when ``by_rig``): lot, rig ("all rigs" when pooled), site, n, value (the mean,
    or for log statistics the geometric mean of the positive values), sd (of the values, or of their natural
    logs), n_flagged, first and last recording time (UTC). Ordered by the lot's first recording."""
    stat = statistic(stat_key)
    base, value, active = _with_value(conn, stat, event, filters.profile)
    flagged = case((_flagged_expr(active), 1), else_=0)
    if stat.log:
        v = case((value > 0, func.ln(value)), else_=None)
    else:
        v = value
    keys = [lots.c.name.label("lot")]
    if by_rig:
        keys += [rigs.c.name.label("rig"), sites.c.name.label("site")]
    stmt = (select(*keys, func.count(v).label("n"), func.avg(v).label("m"), func.avg(v * v).label("m2"),
                   func.sum(flagged).label("n_flagged"), func.count(actuations.c.id).label("n_all"),
                   func.min(actuations.c.recorded_at).label("first"), func.max(actuations.c.recorded_at).label("last"))
            .select_from(base).group_by(*keys))
    df = _df(conn, _where(stmt, filters))
    if not by_rig:
        df["rig"] = "all rigs"
        df["site"] = ", ".join(filters.sites) if filters.sites else "all sites"
    if not len(df):
        return pd.DataFrame(columns=["lot", "rig", "site", "n", "value", "sd", "n_flagged", "n_all", "first", "last"])
    n = df["n"].astype(float)
    m = df["m"].astype(float)
    var = (df["m2"].astype(float) - m * m) * n / (n - 1).where(n > 1)
    df["sd"] = np.sqrt(var.clip(lower=0))
    df["value"] = np.exp(m) if stat.log else m
    df["first"] = pd.to_datetime(df["first"])
    df["last"] = pd.to_datetime(df["last"])
    df["n_flagged"] = df["n_flagged"].fillna(0).astype(int)
    df = df.sort_values(["first", "rig"]).reset_index(drop=True)
    return df[["lot", "rig", "site", "n", "value", "sd", "n_flagged", "n_all", "first", "last"]]


def actuation_cloud(conn, stat_key: str, event: str, filters: Filters = Filters(), *,
                    max_points: int = 4000, n_total: int | None = None) -> pd.DataFrame:
    """Single actuations to draw behind the lot points: every flagged one and an even thinning of the rest
    (every k-th by id) so that at most about ``max_points`` come back. ``n_total``: the number of actuations
    with a value, when the caller has it already (saves a count). Columns: actuation_id, lot, rig, site,
    recorded_at (UTC), value, flagged."""
    stat = statistic(stat_key)
    base, value, active = _with_value(conn, stat, event, filters.profile)
    fl = _flagged_expr(active)
    if n_total is None:
        count = _where(select(func.count()).select_from(base).where(value.is_not(None)), filters)
        n_total = conn.execute(count).scalar() or 0
    n = int(n_total)
    k = max(1, math.ceil(n / max(1, max_points)))
    keep = literal(True) if k == 1 else or_(fl, (actuations.c.id % k) == 0)
    stmt = (select(actuations.c.id.label("actuation_id"), lots.c.name.label("lot"), rigs.c.name.label("rig"),
                   sites.c.name.label("site"), actuations.c.recorded_at, value.label("value"),
                   case((fl, True), else_=False).label("flagged"))
            .select_from(base).where(value.is_not(None)).where(keep))
    df = _df(conn, _where(stmt, filters))
    df["flagged"] = df["flagged"].astype(bool)
    df["recorded_at"] = pd.to_datetime(df["recorded_at"])
    return df


def lot_actuations(conn, lot: str, *, rig: str | None = None, limit: int = 500) -> pd.DataFrame:
    """The actuations of one lot (optionally on one rig): actuation_id, unit, actuation, rig, site, recorded_at
    (the sidecar's text), passed_qc, n_flags (active and QC)."""
    active = _active_model_ids(conn)
    cond = flags.c.model_id.is_(None)
    if active:
        cond = or_(cond, flags.c.model_id.in_(active))
    n_flags = (select(func.count(flags.c.id)).where(and_(flags.c.actuation_id == actuations.c.id, cond))
               .scalar_subquery())
    stmt = (select(actuations.c.id.label("actuation_id"), units.c.name.label("unit"), actuations.c.actuation,
                   rigs.c.name.label("rig"), sites.c.name.label("site"),
                   actuations.c.recorded_at_text.label("recorded_at"), actuations.c.passed_qc,
                   n_flags.label("n_flags"))
            .select_from(actuations.join(lots, lots.c.id == actuations.c.lot_id)
                         .join(units, units.c.id == actuations.c.unit_id)
                         .join(rigs, rigs.c.id == actuations.c.rig_id).join(sites, sites.c.id == actuations.c.site_id))
            .where(lots.c.name == lot).order_by(actuations.c.recorded_at, actuations.c.id).limit(limit))
    if rig:
        stmt = stmt.where(rigs.c.name == rig)
    return _df(conn, stmt)


def rig_summary(conn, stat_key: str, event: str, filters: Filters = Filters()) -> pd.DataFrame:
    """Per rig: site, rig, actuations, n (with a value), mean and sd of the statistic (of its natural log for
    log statistics), flagged actuations, quality-check failures, and the rates per 1,000 actuations."""
    stat = statistic(stat_key)
    base, value, active = _with_value(conn, stat, event, filters.profile)
    v = case((value > 0, func.ln(value)), else_=None) if stat.log else value
    stmt = (select(sites.c.name.label("site"), rigs.c.name.label("rig"), func.count(actuations.c.id).label("actuations"),
                   func.count(v).label("n"), func.avg(v).label("m"), func.avg(v * v).label("m2"),
                   func.min(v).label("lo"), func.max(v).label("hi"),
                   func.sum(case((_flagged_expr(active), 1), else_=0)).label("flagged"),
                   func.sum(case((actuations.c.passed_qc.is_(False), 1), else_=0)).label("qc_failed"))
            .select_from(base).group_by(sites.c.name, rigs.c.name).order_by(sites.c.name, rigs.c.name))
    df = _df(conn, _where(stmt, filters))
    if not len(df):
        return pd.DataFrame(columns=["site", "rig", "actuations", "n", "mean", "sd", "lo", "hi", "flagged",
                                     "qc_failed", "flags_per_1000", "qc_failures_per_1000"])
    n = df["n"].astype(float)
    m = df["m"].astype(float)
    df["mean"] = m
    df["sd"] = np.sqrt(((df["m2"].astype(float) - m * m) * n / (n - 1).where(n > 1)).clip(lower=0))
    for c in ("flagged", "qc_failed"):
        df[c] = df[c].fillna(0).astype(int)
    df["flags_per_1000"] = 1000.0 * df["flagged"] / df["actuations"]
    df["qc_failures_per_1000"] = 1000.0 * df["qc_failed"] / df["actuations"]
    return df[["site", "rig", "actuations", "n", "mean", "sd", "lo", "hi", "flagged", "qc_failed", "flags_per_1000",
               "qc_failures_per_1000"]]


def reference_summary(conn, stat_key: str, event: str, filters: Filters = Filters()) -> dict:
    """Mean, sd and n of the statistic (natural log for log statistics) over the active reference lots
    (within the profile filter), or an empty dict when the event has no active model."""
    ref = reference_lots_of(conn, filters.profile, event)
    if not ref:
        return {}
    stat = statistic(stat_key)
    base, value, _ = _with_value(conn, stat, event, filters.profile)
    v = case((value > 0, func.ln(value)), else_=None) if stat.log else value
    stmt = select(func.count(v), func.avg(v), func.avg(v * v)).select_from(base).where(lots.c.name.in_(ref))
    if filters.profile:
        stmt = stmt.where(actuations.c.profile == filters.profile)
    n, m, m2 = conn.execute(stmt).first()
    if not n:
        return {}
    sd = math.sqrt(max(0.0, (m2 - m * m) * n / (n - 1))) if n > 1 else float("nan")
    return {"n": int(n), "mean": float(m), "sd": sd, "lots": ref}


def rig_histogram(conn, stat_key: str, event: str, filters: Filters = Filters(), *, n_bins: int = 40,
                  lo: float | None = None, hi: float | None = None):
    """Histogram of the statistic per rig, binned in SQL: (edges (n_bins + 1,), DataFrame rig, site, bin, count).
    Log statistics are binned on their natural log. lo, hi: the range when the caller knows it (saves a scan)."""
    stat = statistic(stat_key)
    base, value, _ = _with_value(conn, stat, event, filters.profile)
    v = case((value > 0, func.ln(value)), else_=None) if stat.log else value
    if lo is None or hi is None:
        lo, hi = conn.execute(_where(select(func.min(v), func.max(v)).select_from(base), filters)).first()
    if lo is None:
        return np.array([]), pd.DataFrame(columns=["rig", "site", "bin", "count"])
    lo, hi = float(lo), float(hi)
    if hi <= lo:
        hi = lo + 1.0
    width = (hi - lo) / n_bins
    # floor, not a cast (PostgreSQL rounds on a cast); the maximum itself falls in the last bin
    raw = func.cast(func.floor((v - lo) / width), _int())
    b = case((raw > n_bins - 1, n_bins - 1), else_=raw)
    stmt = (select(rigs.c.name.label("rig"), sites.c.name.label("site"), b.label("bin"), func.count().label("count"))
            .select_from(base).where(v.is_not(None)).group_by(rigs.c.name, sites.c.name, b))
    df = _df(conn, _where(stmt, filters))
    return lo + width * np.arange(n_bins + 1), df


def _int():
    from sqlalchemy import Integer

    return Integer


def latest_per_rig(conn, *, per_rig: int = 10, profile: str | None = None) -> pd.DataFrame:
    """The latest ``per_rig`` actuations of every rig: actuation_id, site, rig, lot, unit, actuation, recorded_at
    (the sidecar's text), recorded_at_utc, passed_qc, file, n_model_flags, n_qc_flags."""
    active = _active_model_ids(conn)
    model_cond = flags.c.model_id.in_(active) if active else literal(False)
    n_model = (select(func.count(flags.c.id)).where(and_(flags.c.actuation_id == actuations.c.id, model_cond))
               .scalar_subquery())
    n_qc = (select(func.count(flags.c.id)).where(and_(flags.c.actuation_id == actuations.c.id,
                                                      flags.c.model_id.is_(None))).scalar_subquery())
    ids = []
    # One index seek per rig (ix_actuations_rig: rig_id, recorded_at) rather than a window over every actuation.
    for rig_id in conn.execute(select(rigs.c.id)).scalars():
        q = (select(actuations.c.id).where(actuations.c.rig_id == rig_id)
             .order_by(actuations.c.recorded_at.desc(), actuations.c.id.desc()).limit(per_rig))
        if profile:
            q = q.where(actuations.c.profile == profile)
        ids += list(conn.execute(q).scalars())
    stmt = (select(actuations.c.id.label("actuation_id"), sites.c.name.label("site"), rigs.c.name.label("rig"),
                   lots.c.name.label("lot"), units.c.name.label("unit"), actuations.c.actuation,
                   actuations.c.recorded_at_text.label("recorded_at"), actuations.c.recorded_at.label("recorded_at_utc"),
                   actuations.c.passed_qc, recordings.c.original_name.label("file"),
                   n_model.label("n_model_flags"), n_qc.label("n_qc_flags"))
            .select_from(actuations.join(recordings, recordings.c.id == actuations.c.recording_id)
                         .join(sites, sites.c.id == actuations.c.site_id).join(rigs, rigs.c.id == actuations.c.rig_id)
                         .join(lots, lots.c.id == actuations.c.lot_id).join(units, units.c.id == actuations.c.unit_id))
            .where(actuations.c.id.in_(ids or [-1]))
            .order_by(sites.c.name, rigs.c.name, actuations.c.recorded_at.desc(), actuations.c.id.desc()))
    return _df(conn, stmt)


def flags_for(conn, actuation_ids) -> pd.DataFrame:
    """Active and quality-check flags of the given actuations: flag_id, actuation_id, event, statistic, value,
    limit, reason, model_version."""
    ids = [int(i) for i in actuation_ids]
    cols = ["flag_id", "actuation_id", "event", "statistic", "value", "limit", "reason", "model_version"]
    if not ids:
        return pd.DataFrame(columns=cols)
    stmt = (select(flags.c.id.label("flag_id"), flags.c.actuation_id, flags.c.event, flags.c.statistic, flags.c.value,
                   flags.c.limit_value.label("limit"), flags.c.reason, reference_models.c.version.label("model_version"))
            .select_from(flags.outerjoin(reference_models, reference_models.c.id == flags.c.model_id))
            .where(flags.c.actuation_id.in_(ids))
            .where(or_(flags.c.model_id.is_(None), reference_models.c.status == "active"))
            .order_by(flags.c.actuation_id, flags.c.id))
    return _df(conn, stmt)


def recent_quarantine(conn, *, limit: int = 20) -> pd.DataFrame:
    """The latest quarantined recordings: recording_id, file, reason, received_at (UTC), and the site, rig, lot,
    unit their sidecar names (empty when it could not be read)."""
    stmt = (select(recordings.c.id.label("recording_id"), recordings.c.original_name.label("file"),
                   recordings.c.error.label("reason"), recordings.c.received_at, recordings.c.sidecar_json)
            .where(recordings.c.status == "quarantined").order_by(recordings.c.received_at.desc()).limit(limit))
    df = _df(conn, stmt)
    for key in ("site", "rig", "lot", "unit"):
        df[key] = [_side(s, key) for s in df["sidecar_json"]] if len(df) else []
    return df.drop(columns=["sidecar_json"])


def _side(text, key):
    try:
        return str(json.loads(text).get(key, "")) if text else ""
    except (TypeError, ValueError):
        return ""


def triage_evidence(conn, lot_names, rig_names, *, lots_window: int = 6) -> pd.DataFrame:
    """Counts behind the suggested causes: per (lot, rig) among the given lots and the last ``lots_window`` lots
    seen on each given rig: actuations and actuations with an active model flag (quality-check flags excluded,
    they point at the recording). Columns: lot, rig, actuations, flagged, first (UTC)."""
    active = _active_model_ids(conn)
    cond = flags.c.model_id.in_(active) if active else literal(False)
    model_flag = exists().where(and_(flags.c.actuation_id == actuations.c.id, cond))
    recent = set(lot_names)
    for rig in rig_names:
        q = (select(lots.c.name).select_from(actuations.join(lots, lots.c.id == actuations.c.lot_id)
                                             .join(rigs, rigs.c.id == actuations.c.rig_id))
             .where(rigs.c.name == rig).group_by(lots.c.name)
             .order_by(func.max(actuations.c.recorded_at).desc()).limit(lots_window))
        recent |= set(conn.execute(q).scalars())
    if not recent:
        return pd.DataFrame(columns=["lot", "rig", "actuations", "flagged", "first"])
    stmt = (select(lots.c.name.label("lot"), rigs.c.name.label("rig"), func.count(actuations.c.id).label("actuations"),
                   func.sum(case((model_flag, 1), else_=0)).label("flagged"),
                   func.min(actuations.c.recorded_at).label("first"))
            .select_from(actuations.join(lots, lots.c.id == actuations.c.lot_id)
                         .join(rigs, rigs.c.id == actuations.c.rig_id))
            .where(lots.c.name.in_(sorted(recent))).group_by(lots.c.name, rigs.c.name))
    df = _df(conn, stmt)
    df["flagged"] = df["flagged"].fillna(0).astype(int)
    return df


def actuation_detail(conn, actuation_id: int) -> dict | None:
    """Everything the drill-down shows about one actuation except arrays: metadata, the archived file, QC rows
    and event rows (without band levels). None when there is no such actuation."""
    row = conn.execute(
        select(actuations.c.id, actuations.c.profile, actuations.c.actuation, actuations.c.recorded_at_text,
               actuations.c.passed_qc, actuations.c.marker_source, sites.c.name.label("site"),
               rigs.c.name.label("rig"), lots.c.name.label("lot"), units.c.name.label("unit"),
               recordings.c.id.label("recording_id"), recordings.c.original_name, recordings.c.archive_path,
               recordings.c.sample_rate_hz, recordings.c.channels, recordings.c.duration_s,
               recordings.c.sidecar_json, recordings.c.content_hash)
        .select_from(actuations.join(recordings, recordings.c.id == actuations.c.recording_id)
                     .join(sites, sites.c.id == actuations.c.site_id).join(rigs, rigs.c.id == actuations.c.rig_id)
                     .join(lots, lots.c.id == actuations.c.lot_id).join(units, units.c.id == actuations.c.unit_id))
        .where(actuations.c.id == int(actuation_id))).first()
    if row is None:
        return None
    qc = _df(conn, select(qc_results.c.check_name, qc_results.c.value, qc_results.c.limit_value, qc_results.c.passed,
                          qc_results.c.detail).where(qc_results.c.recording_id == row.recording_id)
             .order_by(qc_results.c.check_name))
    ev = _df(conn, select(events.c.id.label("event_id"), events.c.name, events.c.found, events.c.onset_s,
                          events.c.end_s, events.c.duration_s, events.c.peak_dbfs, events.c.latency_s,
                          events.c.method, events.c.reason, events.c.dominant_hz, events.c.centroid_hz,
                          events.c.band_energy_db, events.c.level_reference)
             .where(events.c.actuation_id == row.id).order_by(events.c.onset_s, events.c.id))
    out = dict(row._mapping)
    try:
        out["sidecar"] = json.loads(row.sidecar_json) if row.sidecar_json else {}
    except ValueError:
        out["sidecar"] = {}
    out.pop("sidecar_json")
    out["qc"] = qc
    out["events"] = ev
    return out


def event_levels(conn, actuation_id: int, event: str):
    """(levels (n_slices, n_bands) float32 in the event's level unit, slice_times_s, band_centres_hz) or None."""
    r = conn.execute(select(events.c.levels_f32, events.c.n_slices, events.c.n_bands, events.c.slice_times_f64,
                            events.c.band_centres_f64)
                     .where(and_(events.c.actuation_id == int(actuation_id), events.c.name == event))).first()
    if r is None or r.levels_f32 is None:
        return None
    return (np.frombuffer(r.levels_f32, dtype="<f4").reshape(r.n_slices, r.n_bands),
            np.frombuffer(r.slice_times_f64, dtype="<f8"), np.frombuffer(r.band_centres_f64, dtype="<f8"))


def typical_reference_actuation(conn, profile: str, event: str) -> int | None:
    """The reference-lot actuation (passed QC) nearest the reference envelope's centre under the event's active
    model: the smallest trajectory distance (mean squared standardised score deviation from the centre)."""
    row = conn.execute(select(reference_models.c.id, reference_models.c.reference_lots).where(and_(
        reference_models.c.profile == profile, reference_models.c.event == event,
        reference_models.c.status == "active"))).first()
    if row is None:
        return None
    ref = json.loads(row.reference_lots)
    stmt = (select(actuations.c.id)
            .select_from(trajectories.join(actuations, actuations.c.id == trajectories.c.actuation_id)
                         .join(lots, lots.c.id == actuations.c.lot_id))
            .where(and_(trajectories.c.model_id == row.id, lots.c.name.in_(ref), actuations.c.passed_qc.is_(True),
                        trajectories.c.trajectory_distance.is_not(None)))
            .order_by(trajectories.c.trajectory_distance, actuations.c.id).limit(1))
    return conn.execute(stmt).scalar()


def trajectories_for(conn, event: str, *, actuation_ids=(), lots_=(), profile: str | None = None,
                     per_lot: int = 40) -> pd.DataFrame:
    """Score trajectories under the event's active model: one row per actuation with actuation_id, lot, rig,
    flagged, scores (n_slices, A), t2 (n_slices,), spe (n_slices,). Chosen actuations, and up to ``per_lot``
    actuations of each chosen lot (in time order)."""
    ids = [int(i) for i in actuation_ids]
    models_ = _active_model_ids(conn, profile, event)
    cols = ["actuation_id", "lot", "rig", "flagged", "scores", "t2", "spe"]
    if not models_ or (not ids and not lots_):
        return pd.DataFrame(columns=cols)
    chosen = set(ids)
    for lot in lots_:
        q = (select(actuations.c.id).select_from(actuations.join(lots, lots.c.id == actuations.c.lot_id))
             .where(lots.c.name == lot).order_by(actuations.c.recorded_at, actuations.c.id).limit(per_lot))
        if profile:
            q = q.where(actuations.c.profile == profile)
        chosen |= set(conn.execute(q).scalars())
    stmt = (select(actuations.c.id, lots.c.name.label("lot"), rigs.c.name.label("rig"), trajectories.c.flagged,
                   trajectories.c.n_slices, trajectories.c.n_components, trajectories.c.scores_f32,
                   trajectories.c.t2_f32, trajectories.c.spe_f32)
            .select_from(trajectories.join(actuations, actuations.c.id == trajectories.c.actuation_id)
                         .join(lots, lots.c.id == actuations.c.lot_id).join(rigs, rigs.c.id == actuations.c.rig_id))
            .where(and_(trajectories.c.event == event, trajectories.c.model_id.in_(models_),
                        trajectories.c.actuation_id.in_(sorted(chosen))))
            .order_by(actuations.c.recorded_at, actuations.c.id))
    out = []
    for r in conn.execute(stmt):
        if r.scores_f32 is None:
            continue
        out.append(dict(actuation_id=r.id, lot=r.lot, rig=r.rig, flagged=bool(r.flagged),
                        scores=np.frombuffer(r.scores_f32, dtype="<f4").reshape(r.n_slices, r.n_components),
                        t2=np.frombuffer(r.t2_f32, dtype="<f4"), spe=np.frombuffer(r.spe_f32, dtype="<f4")))
    return pd.DataFrame(out, columns=cols)


def models_table(conn) -> pd.DataFrame:
    """The stored reference models (no blobs) with the number of actuations scored and flagged under each."""
    scored = (select(func.count(trajectories.c.id)).where(trajectories.c.model_id == reference_models.c.id)
              .scalar_subquery())
    flagged = (select(func.count(trajectories.c.id)).where(and_(trajectories.c.model_id == reference_models.c.id,
                                                               trajectories.c.flagged.is_(True))).scalar_subquery())
    stmt = (select(reference_models.c.id, reference_models.c.profile, reference_models.c.event,
                   reference_models.c.version, reference_models.c.status, reference_models.c.reference_lots,
                   reference_models.c.parameters, reference_models.c.n_recordings, reference_models.c.n_components,
                   reference_models.c.t2_limit, reference_models.c.spe_limit, reference_models.c.created_by,
                   reference_models.c.created_at, scored.label("scored"), flagged.label("flagged"))
            .order_by(reference_models.c.profile, reference_models.c.event, reference_models.c.version.desc()))
    df = _df(conn, stmt)
    df["reference_lots"] = [json.loads(t) for t in df["reference_lots"]]
    df["parameters"] = [json.loads(t) for t in df["parameters"]]
    return df


def store_counts_fast(conn) -> dict:
    """The store's state in a few index lookups: largest ids of the growing tables, number and status of the
    models, and the latest verdict (whatever is added or activated changes one of them)."""
    from analysis.store.schema import verdicts

    return {
        "max_actuation": conn.execute(select(func.max(actuations.c.id))).scalar() or 0,
        "max_recording": conn.execute(select(func.max(recordings.c.id))).scalar() or 0,
        "max_flag": conn.execute(select(func.max(flags.c.id))).scalar() or 0,
        "max_trajectory": conn.execute(select(func.max(trajectories.c.id))).scalar() or 0,
        "max_model": conn.execute(select(func.max(reference_models.c.id))).scalar() or 0,
        "max_verdict": conn.execute(select(func.max(verdicts.c.id))).scalar() or 0,
        "active_models": tuple(sorted(_active_model_ids(conn))),
    }


