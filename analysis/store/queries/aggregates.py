"""Aggregates for the views: what the filters offer, per-lot points, the sampled cloud of actuations, per-rig
summaries and histograms, the reference lots' summary, the evidence behind suggested causes, flag counts, and the
store's fingerprint. What comes back is what is drawn, whatever the number of actuations in the store: the means,
SDs and counts are sums over the per-day summaries (analysis.store.summaries), whose size grows with lots x rigs
x units x days; single values (the cloud, histograms) are read raw up to a fixed number and from the stratified
sample above it.

One rule for the values of a statistic: only actuations that passed their quality checks give values (a
recording that failed one points at the recording, not at its lot or rig); every actuation counts in the
actuation and flag counts. Log statistics (positive ratios) are summarised on their natural log.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sqlalchemy import and_, case, func, select

from .. import schema as db
from ..errors import StoreError
from ..summaries import sampling_key
from ..types import Filters, Statistic, statistic
from ._base import (
    active_model_ids,
    df,
    is_flagged,
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


SS, CC, CS = db.stat_summaries, db.cell_counts, db.cloud_sample

#: Values read raw when the selection holds at most this many; from the stratified sample above it.
HISTOGRAM_VALUES = 5_000


def _cells(table):
    """A summary table joined with its rig, site and lot."""
    return (table.join(db.rigs, db.rigs.c.id == table.c.rig_id).join(db.sites, db.sites.c.id == db.rigs.c.site_id)
            .join(db.lots, db.lots.c.id == table.c.lot_id))


def _where_cells(stmt, table, f: Filters):
    """where() for a summary table: the same filters, on its profile and day."""
    if f.profile:
        stmt = stmt.where(table.c.profile == f.profile)
    if f.sites:
        stmt = stmt.where(db.sites.c.name.in_(list(f.sites)))
    if f.rigs:
        stmt = stmt.where(db.rigs.c.name.in_(list(f.rigs)))
    if f.lots:
        stmt = stmt.where(db.lots.c.name.in_(list(f.lots)))
    if f.date_from:
        stmt = stmt.where(table.c.day >= f.date_from)
    if f.date_to:
        stmt = stmt.where(table.c.day <= f.date_to)
    return stmt


def _of_statistic(conn, stat: Statistic, event: str, profile: str | None):
    """Condition on stat_summaries rows: this event and statistic, under the active model where it needs one."""
    cond = and_(SS.c.event == event, SS.c.statistic == stat.key)
    if stat.table == "trajectories":
        return and_(cond, SS.c.model_id.in_(active_model_ids(conn, profile, event) or [-1]))
    return and_(cond, SS.c.model_id == 0)


def _moments(conn, stat, event, filters, keys, *, extra=None):
    cols = [func.sum(SS.c.n).label("n"), func.sum(SS.c.s1).label("s1"), func.sum(SS.c.s2).label("s2"),
            func.min(SS.c.lo).label("lo"), func.max(SS.c.hi).label("hi")]
    stmt = select(*keys, *cols).select_from(_cells(SS)).where(_of_statistic(conn, stat, event, filters.profile))
    if extra is not None:
        stmt = stmt.where(extra)
    out = df(conn, _where_cells(stmt.group_by(*keys), SS, filters))
    n = out["n"].astype(float)
    out["m"] = out["s1"].astype(float) / n.where(n > 0)
    out["m2"] = out["s2"].astype(float) / n.where(n > 0)
    return out


def _counts(conn, filters, keys):
    stmt = (select(*keys, func.sum(CC.c.n_all).label("n_all"), func.sum(CC.c.n_flagged).label("n_flagged"),
                   func.sum(CC.c.n_qc_failed).label("qc_failed"),
                   func.sum(CC.c.n_model_flagged).label("n_model_flagged"),
                   func.min(CC.c.first).label("first"), func.max(CC.c.last).label("last"))
            .select_from(_cells(CC)).group_by(*keys))
    return df(conn, _where_cells(stmt, CC, filters))


def choices(conn, profile: str | None = None) -> dict:
    """What the filters offer: profiles, sites, rigs (with their site), lots (in time order), events per profile,
    and the first and last recording day (UTC). Read from the cell counts."""
    m = db.reference_models
    prof = sorted(conn.execute(select(CC.c.profile).distinct()).scalars())
    rig_rows = conn.execute(select(db.rigs.c.name, db.sites.c.name.label("site"))
                            .select_from(db.rigs.join(db.sites, db.sites.c.id == db.rigs.c.site_id))
                            .order_by(db.sites.c.name, db.rigs.c.name)).all()
    lot_stmt = (select(db.lots.c.name, func.min(CC.c.first).label("first"))
                .select_from(db.lots.join(CC, CC.c.lot_id == db.lots.c.id))
                .group_by(db.lots.c.name).order_by(func.min(CC.c.first)))
    if profile:
        lot_stmt = lot_stmt.where(CC.c.profile == profile)
    ev = conn.execute(select(m.c.profile, m.c.event).distinct()).all()
    ev_found = conn.execute(select(SS.c.event).distinct()).scalars().all() if not ev else []
    span = conn.execute(select(func.min(CC.c.first), func.max(CC.c.last))).first()
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
    """One row per lot (and rig, when ``by_rig``) with the event: lot, rig ("all rigs" when pooled), site, n
    (values), value (the mean, or for log statistics the geometric mean), sd (of the values, or of their natural
    logs), n_flagged and n_all (actuations of the lot, or lot and rig), first and last recording time (UTC).
    Ordered by the lot's first recording. Read from the per-day summaries."""
    stat = statistic(stat_key)
    keys = [db.lots.c.name.label("lot")]
    if by_rig:
        keys += [db.rigs.c.name.label("rig"), db.sites.c.name.label("site")]
    out = _moments(conn, stat, event, filters, keys)
    names = [k.name for k in keys]
    out = out.merge(_counts(conn, filters, keys), on=names, how="left")
    if not by_rig:
        out["rig"] = "all rigs"
        out["site"] = ", ".join(filters.sites) if filters.sites else "all sites"
    if not len(out):
        return pd.DataFrame(columns=LOT_POINT_COLUMNS)
    m = out["m"].astype(float)
    out["n"] = out["n"].astype(int)
    out["sd"] = sd_from_moments(out["n"], m, out["m2"])
    out["value"] = np.exp(m) if stat.log else m
    out["first"] = pd.to_datetime(out["first"])
    out["last"] = pd.to_datetime(out["last"])
    for c in ("n_flagged", "n_all"):
        out[c] = out[c].fillna(0).astype(int)
    out = out.sort_values(["first", "rig"]).reset_index(drop=True)
    return out[LOT_POINT_COLUMNS]


def _value_frame(conn, stat: Statistic, event: str, filters: Filters, *, budget: int, n_total: int,
                 summarised: bool, flagged_budget: int = 0) -> pd.DataFrame:
    """actuation_id, lot, rig, site, recorded_at, value, flagged over the selection: every value when there are
    at most ``budget``, else from the cloud sample, of each (profile, lot, rig) stratum with actuations in the
    selection the first r unflagged ones, r chosen so about ``budget`` come back (beyond ``budget`` strata, an
    even share of the strata), and the newest ``flagged_budget`` / strata flagged ones. The sample's ids are
    given as an IN list, so the database walks the sample and looks each value up by id: the work does not grow
    with the store."""
    base, value = _with_value(conn, stat, event, filters.profile)
    a = db.actuations
    v = _summarised(stat, value) if summarised else value
    cols = [a.c.id.label("actuation_id"), db.lots.c.name.label("lot"), db.rigs.c.name.label("rig"),
            db.sites.c.name.label("site"), a.c.recorded_at, v.label("value")]
    if n_total <= budget:
        fl = case((is_flagged(active_model_ids(conn)), True), else_=False).label("flagged")
        return df(conn, where(select(*cols, fl).select_from(base).where(v.is_not(None)), filters))
    strata = df(conn, _where_cells(select(CC.c.profile, CC.c.lot_id, CC.c.rig_id).select_from(_cells(CC))
                                   .distinct(), CC, filters))
    n_strata = max(1, len(strata))
    r = max(1, budget // n_strata)
    ranks = CS.c.rank.between(1, r)
    if n_strata > budget:  # more strata than points: an even share of the strata's first ones
        ranks = and_(ranks, sampling_key(CS.c.actuation_id) < int(2**32 * budget / n_strata))
    if flagged_budget:
        ranks = ranks | CS.c.rank.between(-max(1, flagged_budget // n_strata), -1)
    sample = select(CS.c.actuation_id).where(ranks)
    if filters.profile:
        sample = sample.where(CS.c.profile == filters.profile)
    stmt = (select(*cols, (CS.c.rank < 0).label("flagged"))
            .select_from(base.join(CS, CS.c.actuation_id == a.c.id))
            .where(and_(a.c.id.in_(sample), v.is_not(None))))
    return df(conn, where(stmt, filters))


def _total(conn, stat, event, filters) -> int:
    stmt = select(func.sum(SS.c.n)).select_from(_cells(SS)).where(_of_statistic(conn, stat, event, filters.profile))
    return int(conn.execute(_where_cells(stmt, SS, filters)).scalar() or 0)


def actuation_cloud(conn, stat_key: str, event: str, filters: Filters = Filters(), *,
                    max_points: int = 4000, n_total: int | None = None, max_flagged: int = 4000) -> pd.DataFrame:
    """Single actuations to draw behind the lot points: every one when the selection has at most ``max_points``
    values, else the stratified sample (every lot and rig alike): about ``max_points`` unflagged and about
    ``max_flagged`` flagged ones (the newest of each lot and rig). ``n_total``: the number of values, when the
    caller has it already. Columns: actuation_id, lot, rig, site, recorded_at (UTC), value, flagged."""
    stat = statistic(stat_key)
    if n_total is None:
        n_total = _total(conn, stat, event, filters)
    out = _value_frame(conn, stat, event, filters, budget=max_points, n_total=n_total, summarised=False,
                       flagged_budget=max_flagged)
    out = out.sort_values("actuation_id").reset_index(drop=True)
    out["flagged"] = out["flagged"].astype(bool)
    out["recorded_at"] = pd.to_datetime(out["recorded_at"])
    return out[["actuation_id", "lot", "rig", "site", "recorded_at", "value", "flagged"]]


RIG_SUMMARY_COLUMNS = ["site", "rig", "actuations", "n", "mean", "sd", "lo", "hi", "flagged", "qc_failed",
                       "flags_per_1000", "qc_failures_per_1000"]


def rig_summary(conn, stat_key: str, event: str, filters: Filters = Filters()) -> pd.DataFrame:
    """Per rig with the event: site, rig, actuations, n (with a value), mean and sd of the statistic (of its
    natural log for log statistics), lo and hi (its range on that scale), flagged actuations, quality-check
    failures, and the rates per 1,000 actuations. Read from the per-day summaries."""
    stat = statistic(stat_key)
    keys = [db.sites.c.name.label("site"), db.rigs.c.name.label("rig")]
    out = _moments(conn, stat, event, filters, keys)
    out = out.merge(_counts(conn, filters, keys), on=["site", "rig"], how="left")
    if not len(out):
        return pd.DataFrame(columns=RIG_SUMMARY_COLUMNS)
    out = out.sort_values(["site", "rig"]).reset_index(drop=True)
    out["n"] = out["n"].astype(int)
    out["actuations"] = out["n_all"].fillna(0).astype(int)
    out["mean"] = out["m"].astype(float)
    out["sd"] = sd_from_moments(out["n"], out["m"], out["m2"])
    out["flagged"] = out["n_flagged"].fillna(0).astype(int)
    out["qc_failed"] = out["qc_failed"].fillna(0).astype(int)
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
    stmt = (select(func.sum(SS.c.n), func.sum(SS.c.s1), func.sum(SS.c.s2)).select_from(_cells(SS))
            .where(and_(_of_statistic(conn, stat, event, filters.profile), db.lots.c.name.in_(ref))))
    if filters.profile:
        stmt = stmt.where(SS.c.profile == filters.profile)
    n, s1, s2 = conn.execute(stmt).first()
    if not n:
        return {}
    m, m2 = float(s1) / n, float(s2) / n
    return {"n": int(n), "mean": m, "sd": sd_from_moments_scalar(n, m, m2), "lots": ref}


def rig_histogram(conn, stat_key: str, event: str, filters: Filters = Filters(), *, n_bins: int = 40,
                  lo: float | None = None, hi: float | None = None, max_values: int = HISTOGRAM_VALUES):
    """Histogram of the statistic per rig: (edges (n_bins + 1,), DataFrame rig, site, bin, count). Log
    statistics are binned on their natural log. Every value when the selection has at most ``max_values``,
    else the stratified sample of unflagged actuations (the shape per rig, each lot alike, not the counts; the
    flag rates are in rig_summary). lo, hi: the range when the
    caller knows it (the summaries keep it)."""
    stat = statistic(stat_key)
    n_total = _total(conn, stat, event, filters)
    empty = np.array([]), pd.DataFrame(columns=["rig", "site", "bin", "count"])
    if not n_total:
        return empty
    vals = _value_frame(conn, stat, event, filters, budget=max_values, n_total=n_total, summarised=True)
    if not len(vals):
        return empty
    v = vals["value"].to_numpy(dtype=float)
    if lo is None or hi is None:
        lo, hi = float(np.min(v)), float(np.max(v))
    lo, hi = float(lo), float(hi)
    if hi <= lo:
        hi = lo + 1.0
    width = (hi - lo) / n_bins
    # the maximum itself falls in the last bin; a value outside a range the caller gave, in the bin at that end
    vals["bin"] = np.clip(np.floor((v - lo) / width), 0, n_bins - 1).astype(int)
    hist = vals.groupby(["rig", "site", "bin"]).size().rename("count").reset_index()
    return lo + width * np.arange(n_bins + 1), hist


def triage_evidence(conn, lot_names, rig_names, *, lots_window: int = 6) -> pd.DataFrame:
    """Counts behind the suggested causes: per (lot, rig) among the given lots and the last ``lots_window`` lots
    seen on each given rig: actuations and actuations with an active model flag (quality-check flags excluded,
    they point at the recording). Columns: lot, rig, actuations, flagged, first (UTC). From the cell counts."""
    recent = set(lot_names)
    for rig in rig_names:
        q = (select(db.lots.c.name).select_from(_cells(CC)).where(db.rigs.c.name == rig).group_by(db.lots.c.name)
             .order_by(func.max(CC.c.last).desc()).limit(lots_window))
        recent |= set(conn.execute(q).scalars())
    if not recent:
        return pd.DataFrame(columns=["lot", "rig", "actuations", "flagged", "first"])
    stmt = (select(db.lots.c.name.label("lot"), db.rigs.c.name.label("rig"), func.sum(CC.c.n_all).label("actuations"),
                   func.sum(CC.c.n_model_flagged).label("flagged"), func.min(CC.c.first).label("first"))
            .select_from(_cells(CC)).where(db.lots.c.name.in_(sorted(recent)))
            .group_by(db.lots.c.name, db.rigs.c.name))
    out = df(conn, stmt)
    out["actuations"] = out["actuations"].fillna(0).astype(int)
    out["flagged"] = out["flagged"].fillna(0).astype(int)
    return out


_GROUPS = {"site": db.sites.c.name, "rig": db.rigs.c.name, "lot": db.lots.c.name, "unit": db.units.c.name,
           "profile": CC.c.profile}


def flag_summary(conn, *, by=("rig", "lot")) -> pd.DataFrame:
    """Actuations, flagged actuations and the flagged fraction per group (default: per rig and lot; any of
    site, rig, lot, unit, profile). Flagged: a flag that counts (quality-check or active model). From the cell
    counts."""
    bad = [b for b in by if b not in _GROUPS]
    if bad or not by:
        raise StoreError(f"flag summary groups by {', '.join(_GROUPS)}; got {list(by)!r}")
    keys = [_GROUPS[b].label(b) for b in by]
    stmt = (select(*keys, func.sum(CC.c.n_all).label("actuations"), func.sum(CC.c.n_flagged).label("flagged"))
            .select_from(_cells(CC).join(db.units, db.units.c.id == CC.c.unit_id)).group_by(*keys).order_by(*keys))
    out = df(conn, stmt)
    out["actuations"] = out["actuations"].fillna(0).astype(int)
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
