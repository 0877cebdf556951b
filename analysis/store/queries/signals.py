"""Reads of the signals table (analysis.store.signals keeps it) and the units list behind a unit signal."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sqlalchemy import and_, select

from .. import schema as db
from ..errors import StoreError
from ._base import df

__all__ = ["signals", "SIGNAL_COLUMNS", "REVIEW_COLUMNS", "actuation_causes", "units_table", "rig_fingerprint",
           "actuation_verdicts", "awaiting_review"]

#: What `harken export signals` writes, in this order.
SIGNAL_COLUMNS = ["level", "event", "statistic", "value", "limit", "rule", "site", "rig", "lot", "unit",
                  "actuation_id", "cause", "evidence", "model_version", "first", "last", "first_seen", "last_seen",
                  "active", "profile", "signal_id"]
#: The latest review of each signal, joined to SIGNAL_COLUMNS by ``signals(..., reviews=True)``.
REVIEW_COLUMNS = ["verdict", "verdict_words", "verdict_by", "verdict_at", "verdict_comment", "reviews"]

_LEVEL_ORDER = {"lot": 0, "rig": 1, "cell": 2, "unit": 3, "actuation": 4}


def signals(conn, *, profile: str | None = None, active_only: bool = True, levels=None, lot: str | None = None,
            rig: str | None = None, limit: int | None = None, reviews: bool = False,
            actuation_id: int | None = None) -> pd.DataFrame:
    """Stored signals (columns SIGNAL_COLUMNS, and REVIEW_COLUMNS with ``reviews``: the latest verdict, "" where
    none), the widest level first (lot, rig, cell, unit, actuation), then the latest first."""
    s = db.signals
    stmt = select(s.c.level, s.c.event, s.c.statistic, s.c.value, s.c.limit_value.label("limit"), s.c.rule,
                  s.c.site, s.c.rig, s.c.lot, s.c.unit, s.c.actuation_id, s.c.cause, s.c.evidence,
                  s.c.model_version, s.c.first, s.c.last, s.c.first_seen, s.c.last_seen, s.c.active, s.c.profile,
                  s.c.id.label("signal_id"))
    if profile:
        stmt = stmt.where(s.c.profile == profile)
    if active_only:
        stmt = stmt.where(s.c.active.is_(True))
    if levels:
        bad = [x for x in levels if x not in _LEVEL_ORDER]
        if bad:
            raise StoreError(f"signal levels are {', '.join(_LEVEL_ORDER)}; got {bad!r}")
        stmt = stmt.where(s.c.level.in_(list(levels)))
    if lot is not None:
        stmt = stmt.where(s.c.lot == lot)
    if rig is not None:
        stmt = stmt.where(s.c.rig == rig)
    if actuation_id is not None:
        stmt = stmt.where(s.c.actuation_id == int(actuation_id))
    out = df(conn, stmt.order_by(s.c.id))
    if not len(out):
        return pd.DataFrame(columns=SIGNAL_COLUMNS + (REVIEW_COLUMNS if reviews else []))
    if reviews:
        rv = _latest_reviews(conn, out["signal_id"])
        out = out.merge(rv, on="signal_id", how="left")
        for c in REVIEW_COLUMNS:
            out[c] = out[c].fillna(0 if c == "reviews" else "")
        out["reviews"] = out["reviews"].astype(int)
    out["active"] = out["active"].astype(bool)
    out["_o"] = out["level"].map(_LEVEL_ORDER)
    out = out.sort_values(["_o", "last"], ascending=[True, False], na_position="last").drop(columns="_o")
    out = out.reset_index(drop=True)
    return out.head(limit) if limit is not None else out


def _latest_reviews(conn, signal_ids) -> pd.DataFrame:
    """The latest verdict per signal id (REVIEW_COLUMNS + signal_id): what, in words, by whom, when (UTC), the
    comment, and how many verdicts the signal has had (a later one supersedes, none is edited)."""
    from ..types import REVIEW_VERDICTS

    v = db.verdicts
    ids = [int(i) for i in signal_ids]
    got = df(conn, select(v.c.signal_id, v.c.id, v.c.verdict, v.c.person, v.c.created_at, v.c.note)
             .where(v.c.signal_id.in_(ids or [-1])).order_by(v.c.id))
    if not len(got):
        return pd.DataFrame(columns=["signal_id"] + REVIEW_COLUMNS)
    n = got.groupby("signal_id").size().rename("reviews")
    last = got.drop_duplicates("signal_id", keep="last").set_index("signal_id")
    out = pd.DataFrame({"verdict": last["verdict"], "verdict_words": last["verdict"].map(
        lambda x: REVIEW_VERDICTS.get(x, x)), "verdict_by": last["person"],
        "verdict_at": last["created_at"].astype(str).str[:19], "verdict_comment": last["note"].fillna("")})
    return out.join(n).reset_index()


def awaiting_review(conn) -> int:
    """How many active signals have no verdict yet (counted in the database)."""
    from sqlalchemy import exists, func

    s, v = db.signals, db.verdicts
    return int(conn.execute(select(func.count()).select_from(s).where(and_(
        s.c.active.is_(True), ~exists().where(v.c.signal_id == s.c.id)))).scalar() or 0)


def actuation_verdicts(conn) -> pd.Series:
    """The latest verdict (in words, with who gave it) on each actuation's actuation-level signals, by actuation id;
    several events' reviews joined with "; "."""
    s = db.signals
    acts = df(conn, select(s.c.id.label("signal_id"), s.c.actuation_id, s.c.event).where(
        and_(s.c.level == "actuation", s.c.actuation_id.is_not(None))).order_by(s.c.id))
    if not len(acts):
        return pd.Series(dtype=object)
    rv = _latest_reviews(conn, acts["signal_id"])
    if not len(rv):
        return pd.Series(dtype=object)
    m = acts.merge(rv, on="signal_id")
    m["text"] = m["verdict_words"] + " (" + m["verdict_by"] + ", " + m["verdict_at"] + ")"
    return m.groupby("actuation_id")["text"].agg(lambda t: "; ".join(dict.fromkeys(t)))


def actuation_causes(conn, actuation_ids=None) -> pd.Series:
    """The suggested cause of each flagged actuation (active actuation-level signals), by actuation id; several
    events with different causes are joined with "; "."""
    s = db.signals
    stmt = select(s.c.actuation_id, s.c.cause).where(and_(s.c.level == "actuation", s.c.active.is_(True)))
    if actuation_ids is not None:
        stmt = stmt.where(s.c.actuation_id.in_([int(i) for i in actuation_ids]))
    got = df(conn, stmt.order_by(s.c.id))
    if not len(got):
        return pd.Series(dtype=object)
    return got.groupby("actuation_id")["cause"].agg(lambda c: "; ".join(dict.fromkeys(c)))


def units_table(conn, profile: str, event: str, *, lot: str | None = None, rig: str | None = None,
                statistic: str = "event_spe_ratio") -> pd.DataFrame:
    """Each unit of a lot or rig: its mean of ``statistic`` (geometric mean of the ratio; for the resonance block
    the T² of its mean features) over its actuations that passed QC, n, the limit for that n (from the active
    model's unit limits), whether it signals, and its lot, rig and site. Empty when the event has no active model
    or its model holds no unit limits."""
    from analysis.monitor.levels import BLOCK_STATISTIC

    from ..signals import block_summaries, model_levels, unit_summaries

    limits, refs, ids = model_levels(conn, profile)
    cols = ["unit", "lot", "rig", "site", "n", "value", "limit", "signal", "reference"]
    if event not in ids or statistic not in (limits.get(event) or {}):
        return pd.DataFrame(columns=cols)
    block = statistic == BLOCK_STATISTIC
    u = (block_summaries(conn, profile, {event: ids[event]}, limits) if block
         else unit_summaries(conn, profile, {event: ids[event]}))
    u = u[(u["statistic"] == statistic) & (u["n"] > 0)]
    if lot is not None:
        u = u[u["lot"] == lot]
    if rig is not None:
        u = u[u["rig"] == rig]
    lim = limits[event][statistic]
    ucl = np.asarray(lim.ucl(u["n"].to_numpy(dtype=float)), dtype=float) if len(u) else np.zeros(0)
    # the resonance block's unit value is a T² already; the others are means of logs of ratios
    out = u.assign(value=u["mean"].astype(float) if block else np.exp(u["mean"].astype(float)),
                   limit=ucl if block else np.exp(ucl))
    out["signal"] = out["value"] > out["limit"]
    out["reference"] = out["lot"].isin(set(refs.get(event, ())))
    return out[cols].sort_values(["lot", "rig", "unit"]).reset_index(drop=True)


def rig_fingerprint(conn, profile: str) -> pd.DataFrame:
    """Each rig's background over its lots: per (lot, rig) of non-reference lots, the median distance of its
    recordings' backgrounds from the rig's reference period, the limit, whether it departs, first and last
    recording (analysis.triage.rig_backgrounds, the rule the signals use)."""
    from analysis.triage import rig_backgrounds

    from ..signals import backgrounds, model_levels

    _, refs, _ = model_levels(conn, profile)
    cells, _ = rig_backgrounds(backgrounds(conn, profile), reference_lots=sorted({x for v in refs.values() for x in v}))
    return cells.sort_values(["rig", "first"]).reset_index(drop=True)
