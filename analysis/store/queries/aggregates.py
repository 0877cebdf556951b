"""Aggregates computed in SQL: what the filters offer, per-lot points, the thinned cloud of actuations, per-rig
summaries and histograms, the reference lots' summary, the evidence behind suggested causes, flag counts, and the
store's fingerprint. What comes back is what is drawn, whatever the number of actuations in the store.

One rule for the values of a statistic: only actuations that passed their quality checks give values (a
recording that failed one points at the recording, not at its lot or rig); every actuation counts in the
actuation and flag counts. Log statistics (positive ratios) are summarised on their natural log.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from sqlalchemy import Integer, and_, case, func, literal, or_, select

from .. import schema as db
from ..errors import StoreError
from ..types import Filters, Statistic, statistic
from ._base import (
    active_model_ids,
    df,
    is_flagged,
    model_flag,
    placed,
    sd_from_moments,
    sd_from_moments_scalar,
    where,
)
from .models import reference_lots

__all__ = ["choices", "lot_points", "actuation_cloud", "rig_summary", "reference_summary", "rig_histogram",
           "triage_evidence", "flag_summary", "fingerprint", "LOT_POINT_COLUMNS"]

LOT_POINT_COLUMNS = ["lot", "rig", "site", "n", "value", "sd", "n_flagged", "n_all", "first", "last"]


def _with_value(conn, stat: Statistic, event: str, profile: str | None):
    """(FROM clause with sites, rigs, lots and the statistic's table, the raw value column) for one event."""
    base = placed()
    a = db.actuations
    if stat.table == "trajectories":
        t = db.trajectories
        base = base.join(t, and_(t.c.actuation_id == a.c.id, t.c.event == event,
                                 t.c.model_id.in_(active_model_ids(conn, profile, event) or [-1])))
        return base, t.c[stat.column]
    e = db.events
    return base.join(e, and_(e.c.actuation_id == a.c.id, e.c.name == event)), e.c[stat.column]


def _summarised(stat: Statistic, value):
    """The value as summarised: NULL for actuations that failed QC, and the natural log for log statistics."""
    ok = db.actuations.c.passed_qc.is_(True)
    if stat.log:
        return case((and_(ok, value > 0), func.ln(value)), else_=None)
    return case((ok, value), else_=None)


def choices(conn, profile: str | None = None) -> dict:
    """What the filters offer: profiles, sites, rigs (with their site), lots (in time order), events per profile,
    and the first and last recording day (UTC)."""
    a, m = db.actuations, db.reference_models
    prof = sorted(conn.execute(select(a.c.profile).distinct()).scalars())
    rig_rows = conn.execute(select(db.rigs.c.name, db.sites.c.name.label("site"))
                            .select_from(db.rigs.join(db.sites, db.sites.c.id == db.rigs.c.site_id))
                            .order_by(db.sites.c.name, db.rigs.c.name)).all()
    lot_stmt = (select(db.lots.c.name, func.min(a.c.recorded_at).label("first"))
                .select_from(db.lots.join(a, a.c.lot_id == db.lots.c.id))
                .group_by(db.lots.c.name).order_by(func.min(a.c.recorded_at)))
    if profile:
        lot_stmt = lot_stmt.where(a.c.profile == profile)
    ev = conn.execute(select(m.c.profile, m.c.event).distinct()).all()
    ev_found = conn.execute(select(db.events.c.name).distinct()).scalars().all() if not ev else []
    span = conn.execute(select(func.min(a.c.recorded_at), func.max(a.c.recorded_at))).first()
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


def lot_points(conn, stat_key: str, event: str, filters: Filters = Filters(), *, by_rig: bool = True) -> pd.DataFrame:
    """One row per lot (and rig, when ``by_rig``): lot, rig ("all rigs" when pooled), site, n (values), value (the
    mean, or for log statistics the geometric mean), sd (of the values, or of their natural logs), n_flagged and
    n_all (actuations), first and last recording time (UTC). Ordered by the lot's first recording."""
    stat = statistic(stat_key)
    base, value = _with_value(conn, stat, event, filters.profile)
    a = db.actuations
    v = _summarised(stat, value)
    flagged = case((is_flagged(active_model_ids(conn)), 1), else_=0)
    keys = [db.lots.c.name.label("lot")]
    if by_rig:
        keys += [db.rigs.c.name.label("rig"), db.sites.c.name.label("site")]
    stmt = (select(*keys, func.count(v).label("n"), func.avg(v).label("m"), func.avg(v * v).label("m2"),
                   func.sum(flagged).label("n_flagged"), func.count(a.c.id).label("n_all"),
                   func.min(a.c.recorded_at).label("first"), func.max(a.c.recorded_at).label("last"))
            .select_from(base).group_by(*keys))
    out = df(conn, where(stmt, filters))
    if not by_rig:
        out["rig"] = "all rigs"
        out["site"] = ", ".join(filters.sites) if filters.sites else "all sites"
    if not len(out):
        return pd.DataFrame(columns=LOT_POINT_COLUMNS)
    m = out["m"].astype(float)
    out["sd"] = sd_from_moments(out["n"], m, out["m2"])
    out["value"] = np.exp(m) if stat.log else m
    out["first"] = pd.to_datetime(out["first"])
    out["last"] = pd.to_datetime(out["last"])
    out["n_flagged"] = out["n_flagged"].fillna(0).astype(int)
    out = out.sort_values(["first", "rig"]).reset_index(drop=True)
    return out[LOT_POINT_COLUMNS]


def actuation_cloud(conn, stat_key: str, event: str, filters: Filters = Filters(), *,
                    max_points: int = 4000, n_total: int | None = None) -> pd.DataFrame:
    """Single actuations to draw behind the lot points: every flagged one and an even thinning of the rest
    (every k-th by id) so that at most about ``max_points`` come back. ``n_total``: the number of actuations
    with a value, when the caller has it already (saves a count). Columns: actuation_id, lot, rig, site,
    recorded_at (UTC), value, flagged."""
    stat = statistic(stat_key)
    base, value = _with_value(conn, stat, event, filters.profile)
    a = db.actuations
    fl = is_flagged(active_model_ids(conn))
    if n_total is None:
        count = where(select(func.count()).select_from(base).where(value.is_not(None)), filters)
        n_total = conn.execute(count).scalar() or 0
    k = max(1, math.ceil(int(n_total) / max(1, max_points)))
    keep = literal(True) if k == 1 else or_(fl, (a.c.id % k) == 0)
    stmt = (select(a.c.id.label("actuation_id"), db.lots.c.name.label("lot"), db.rigs.c.name.label("rig"),
                   db.sites.c.name.label("site"), a.c.recorded_at, value.label("value"),
                   case((fl, True), else_=False).label("flagged"))
            .select_from(base).where(value.is_not(None)).where(keep))
    out = df(conn, where(stmt, filters))
    out["flagged"] = out["flagged"].astype(bool)
    out["recorded_at"] = pd.to_datetime(out["recorded_at"])
    return out


RIG_SUMMARY_COLUMNS = ["site", "rig", "actuations", "n", "mean", "sd", "lo", "hi", "flagged", "qc_failed",
                       "flags_per_1000", "qc_failures_per_1000"]


def rig_summary(conn, stat_key: str, event: str, filters: Filters = Filters()) -> pd.DataFrame:
    """Per rig: site, rig, actuations, n (with a value), mean and sd of the statistic (of its natural log for
    log statistics), lo and hi (its range on that scale), flagged actuations, quality-check failures, and the
    rates per 1,000 actuations."""
    stat = statistic(stat_key)
    base, value = _with_value(conn, stat, event, filters.profile)
    a = db.actuations
    v = _summarised(stat, value)
    stmt = (select(db.sites.c.name.label("site"), db.rigs.c.name.label("rig"), func.count(a.c.id).label("actuations"),
                   func.count(v).label("n"), func.avg(v).label("m"), func.avg(v * v).label("m2"),
                   func.min(v).label("lo"), func.max(v).label("hi"),
                   func.sum(case((is_flagged(active_model_ids(conn)), 1), else_=0)).label("flagged"),
                   func.sum(case((a.c.passed_qc.is_(False), 1), else_=0)).label("qc_failed"))
            .select_from(base).group_by(db.sites.c.name, db.rigs.c.name).order_by(db.sites.c.name, db.rigs.c.name))
    out = df(conn, where(stmt, filters))
    if not len(out):
        return pd.DataFrame(columns=RIG_SUMMARY_COLUMNS)
    out["mean"] = out["m"].astype(float)
    out["sd"] = sd_from_moments(out["n"], out["m"], out["m2"])
    for c in ("flagged", "qc_failed"):
        out[c] = out[c].fillna(0).astype(int)
    out["flags_per_1000"] = 1000.0 * out["flagged"] / out["actuations"]
    out["qc_failures_per_1000"] = 1000.0 * out["qc_failed"] / out["actuations"]
    return out[RIG_SUMMARY_COLUMNS]


def reference_summary(conn, stat_key: str, event: str, filters: Filters = Filters()) -> dict:
    """n, mean and sd of the statistic (natural log for log statistics) over the active reference lots (within
    the profile filter) and the lots themselves, or an empty dict when the event has no active model."""
    ref = reference_lots(conn, filters.profile, event)
    if not ref:
        return {}
    stat = statistic(stat_key)
    base, value = _with_value(conn, stat, event, filters.profile)
    v = _summarised(stat, value)
    stmt = select(func.count(v), func.avg(v), func.avg(v * v)).select_from(base).where(db.lots.c.name.in_(ref))
    if filters.profile:
        stmt = stmt.where(db.actuations.c.profile == filters.profile)
    n, m, m2 = conn.execute(stmt).first()
    if not n:
        return {}
    return {"n": int(n), "mean": float(m), "sd": sd_from_moments_scalar(n, float(m), float(m2)), "lots": ref}


def rig_histogram(conn, stat_key: str, event: str, filters: Filters = Filters(), *, n_bins: int = 40,
                  lo: float | None = None, hi: float | None = None):
    """Histogram of the statistic per rig, binned in SQL: (edges (n_bins + 1,), DataFrame rig, site, bin, count).
    Log statistics are binned on their natural log. lo, hi: the range when the caller knows it (saves a scan)."""
    stat = statistic(stat_key)
    base, value = _with_value(conn, stat, event, filters.profile)
    v = _summarised(stat, value)
    if lo is None or hi is None:
        lo, hi = conn.execute(where(select(func.min(v), func.max(v)).select_from(base), filters)).first()
    if lo is None:
        return np.array([]), pd.DataFrame(columns=["rig", "site", "bin", "count"])
    lo, hi = float(lo), float(hi)
    if hi <= lo:
        hi = lo + 1.0
    width = (hi - lo) / n_bins
    # floor, not a cast (PostgreSQL rounds on a cast); the maximum itself falls in the last bin
    raw = func.cast(func.floor((v - lo) / width), Integer)
    b = case((raw > n_bins - 1, n_bins - 1), else_=raw)
    stmt = (select(db.rigs.c.name.label("rig"), db.sites.c.name.label("site"), b.label("bin"),
                   func.count().label("count"))
            .select_from(base).where(v.is_not(None)).group_by(db.rigs.c.name, db.sites.c.name, b))
    return lo + width * np.arange(n_bins + 1), df(conn, where(stmt, filters))


def triage_evidence(conn, lot_names, rig_names, *, lots_window: int = 6) -> pd.DataFrame:
    """Counts behind the suggested causes: per (lot, rig) among the given lots and the last ``lots_window`` lots
    seen on each given rig: actuations and actuations with an active model flag (quality-check flags excluded,
    they point at the recording). Columns: lot, rig, actuations, flagged, first (UTC)."""
    a = db.actuations
    active = active_model_ids(conn)
    recent = set(lot_names)
    for rig in rig_names:
        q = (select(db.lots.c.name).select_from(a.join(db.lots, db.lots.c.id == a.c.lot_id)
                                                .join(db.rigs, db.rigs.c.id == a.c.rig_id))
             .where(db.rigs.c.name == rig).group_by(db.lots.c.name)
             .order_by(func.max(a.c.recorded_at).desc()).limit(lots_window))
        recent |= set(conn.execute(q).scalars())
    if not recent:
        return pd.DataFrame(columns=["lot", "rig", "actuations", "flagged", "first"])
    stmt = (select(db.lots.c.name.label("lot"), db.rigs.c.name.label("rig"), func.count(a.c.id).label("actuations"),
                   func.sum(case((is_flagged(active, which=model_flag), 1), else_=0)).label("flagged"),
                   func.min(a.c.recorded_at).label("first"))
            .select_from(a.join(db.lots, db.lots.c.id == a.c.lot_id).join(db.rigs, db.rigs.c.id == a.c.rig_id))
            .where(db.lots.c.name.in_(sorted(recent))).group_by(db.lots.c.name, db.rigs.c.name))
    out = df(conn, stmt)
    out["flagged"] = out["flagged"].fillna(0).astype(int)
    return out


_GROUPS = {"site": db.sites.c.name, "rig": db.rigs.c.name, "lot": db.lots.c.name, "unit": db.units.c.name,
           "profile": db.actuations.c.profile}


def flag_summary(conn, *, by=("rig", "lot")) -> pd.DataFrame:
    """Actuations, flagged actuations and the flagged fraction per group (default: per rig and lot; any of
    site, rig, lot, unit, profile). Flagged: a flag that counts (quality-check or active model)."""
    bad = [b for b in by if b not in _GROUPS]
    if bad or not by:
        raise StoreError(f"flag summary groups by {', '.join(_GROUPS)}; got {list(by)!r}")
    a = db.actuations
    keys = [_GROUPS[b].label(b) for b in by]
    stmt = (select(*keys, func.count(a.c.id).label("actuations"),
                   func.sum(case((is_flagged(active_model_ids(conn)), 1), else_=0)).label("flagged"))
            .select_from(placed().join(db.units, db.units.c.id == a.c.unit_id)).group_by(*keys).order_by(*keys))
    out = df(conn, stmt)
    out["flagged"] = out["flagged"].fillna(0).astype(int)
    out["flagged_fraction"] = out["flagged"] / out["actuations"]
    return out


def fingerprint(conn) -> tuple:
    """The store's state in a few index lookups: the largest ids of the growing tables, the active models, and
    the latest verdict (whatever is added or activated changes it), as a hashable tuple."""
    counts = {
        "max_actuation": conn.execute(select(func.max(db.actuations.c.id))).scalar() or 0,
        "max_recording": conn.execute(select(func.max(db.recordings.c.id))).scalar() or 0,
        "max_flag": conn.execute(select(func.max(db.flags.c.id))).scalar() or 0,
        "max_trajectory": conn.execute(select(func.max(db.trajectories.c.id))).scalar() or 0,
        "max_model": conn.execute(select(func.max(db.reference_models.c.id))).scalar() or 0,
        "max_verdict": conn.execute(select(func.max(db.verdicts.c.id))).scalar() or 0,
        "active_models": tuple(active_model_ids(conn)),
    }
    return tuple(sorted(counts.items()))
