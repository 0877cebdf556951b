"""Per-day summaries of the actuation rows, kept in the same transaction as the rows behind them, so that the
Lots, Rigs & sites and Today views read tables whose size grows with lots x rigs x units x days, not with
actuations.

A *cell* is (profile, lot, rig, unit, UTC day). Per cell three things are kept (tables in schema.py):

- ``stat_summaries``: per event, model (0 for a statistic of the event itself) and statistic, the count, sum and
  sum of squares of the values (natural log for ratio statistics) and their range, over the actuations that passed
  their quality checks: what a mean, an SD and a pooled limit need, for any union of cells.
- ``cell_counts``: every actuation, quality-check failures, flagged actuations (a flag that counts) and those
  flagged by an active model, and the first and last recording time.
- ``cloud_sample``: per stratum (profile, lot, rig) the ``SAMPLE_PER_STRATUM`` unflagged actuations with the
  lowest sampling key (a fixed multiplicative hash of the id, so any two computations pick the same ones), ranked
  1, 2, ..., and every flagged one, ranked -1, -2, ... from the newest: a view that may draw ``max_points`` takes
  the first r of every stratum it shows, and of the flagged the newest few of each.

Each is recomputed from the raw rows for exactly the cells (strata) a write touched, never incremented: a
recomputation is idempotent, and on PostgreSQL the profile's advisory lock (the one the signals refresh takes)
makes concurrent writers take turns, each then seeing every row committed before it. Flag counts depend on which
model versions are active, so a change of the active version recomputes the profile's counts and sample.
``differences`` recomputes everything and names what the stored summaries got wrong (``harken check summaries``).
"""

from __future__ import annotations

import math
import zlib
from datetime import date, datetime, timedelta

import numpy as np
import pandas as pd
from sqlalchemy import Date, and_, case, func, literal_column, select, text, tuple_

from . import schema as db
from .types import STATISTICS

__all__ = ["SAMPLE_PER_STRATUM", "profile_lock", "refresh_for", "refresh_counts", "rebuild", "compute",
           "differences", "day_of", "sampling_key"]

#: Actuations kept per (profile, lot, rig) for the single-actuation cloud.
SAMPLE_PER_STRATUM = 64

CELL = ["profile", "lot_id", "rig_id", "unit_id", "day"]
STAT_KEY = ["event", "statistic", "model_id", *CELL]
STAT_VALUES = ["n", "s1", "s2", "lo", "hi"]
COUNT_VALUES = ["site_id", "n_all", "n_qc_failed", "n_flagged", "n_model_flagged", "first", "last"]

# Knuth's multiplicative hash (2654435761 = 2^32 / golden ratio, rounded to a prime; from memory): spreads
# consecutive ids evenly over [0, 2^32), so the lowest keys of a stratum are an even sample of its actuations.
_HASH_MUL = 2654435761
_HASH_MOD = 2**32


def profile_lock(conn, profile: str) -> None:
    """On PostgreSQL take the profile's transaction-scoped advisory lock (the signals refresh takes the same one),
    so writers of one profile's derived tables take turns; SQLite's single writer needs none."""
    if conn.dialect.name == "postgresql":
        key = zlib.crc32(f"harken.signals.{profile}".encode()) - 2**31
        conn.execute(text("SELECT pg_advisory_xact_lock(:k)"), {"k": key})


def day_of(column):
    """The UTC calendar day of a stored (naive UTC) time, in SQL."""
    return func.date(column, type_=Date)


def sampling_key(id_column):
    """The sampling key of an actuation id, in SQL (an integer in [0, 2^32))."""
    return (id_column * literal_column(str(_HASH_MUL))) % literal_column(str(_HASH_MOD))


def _value(stat, column):
    ok = db.actuations.c.passed_qc.is_(True)
    if stat.log:
        return case((and_(ok, column > 0), func.ln(column)), else_=None)
    return case((ok, column), else_=None)


def _stat_frames(conn, cond) -> pd.DataFrame:
    """stat_summaries rows of the actuations matching ``cond`` (long form; a cell whose actuations all failed
    their quality checks has rows with n = 0, so it still shows, without a value)."""
    a = db.actuations
    day = day_of(a.c.recorded_at)
    keys = [a.c.profile, a.c.lot_id, a.c.rig_id, a.c.unit_id, day.label("day")]
    frames = []
    e, t = db.events, db.trajectories
    for table, source, group, grouped in (
        ("events", e, [e.c.name.label("event"), literal_column("0").label("model_id")], [e.c.name]),
        ("trajectories", t, [t.c.event.label("event"), t.c.model_id.label("model_id")], [t.c.event, t.c.model_id]),
    ):
        stats = [s for s in STATISTICS.values() if s.table == table]
        cols = []
        for i, s in enumerate(stats):
            v = _value(s, source.c[s.column])
            cols += [func.count(v).label(f"n{i}"), func.sum(v).label(f"s{i}"), func.sum(v * v).label(f"q{i}"),
                     func.min(v).label(f"lo{i}"), func.max(v).label(f"hi{i}")]
        stmt = (select(*group, *keys, *cols)
                .select_from(a.join(source, source.c.actuation_id == a.c.id)).where(cond)
                .group_by(*grouped, a.c.profile, a.c.lot_id, a.c.rig_id, a.c.unit_id, day))
        res = conn.execute(stmt)
        wide = pd.DataFrame(res.fetchall(), columns=list(res.keys()))
        for i, s in enumerate(stats):
            part = wide[["event", "model_id", *CELL]].copy()
            part["statistic"] = s.key
            part["n"] = wide[f"n{i}"].fillna(0).astype(int)
            part["s1"] = wide[f"s{i}"].astype(float).fillna(0.0)
            part["s2"] = wide[f"q{i}"].astype(float).fillna(0.0)
            part["lo"] = wide[f"lo{i}"].astype(float)
            part["hi"] = wide[f"hi{i}"].astype(float)
            frames.append(part)
    out = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=STAT_KEY + STAT_VALUES)
    out["model_id"] = out["model_id"].astype(int)
    return out[STAT_KEY + STAT_VALUES]


def _active_ids(conn, profiles) -> list[int]:
    m = db.reference_models
    return list(conn.execute(select(m.c.id).where(and_(m.c.status == "active", m.c.profile.in_(list(profiles))))
                             ).scalars())


def _count_frame(conn, cond, profiles) -> pd.DataFrame:
    """cell_counts rows of the actuations matching ``cond``."""
    from .queries._base import is_flagged, model_flag  # the one "flagged" rule (imported late: no cycle)

    a = db.actuations
    active = _active_ids(conn, profiles)
    day = day_of(a.c.recorded_at)
    any_flag = is_flagged(active)
    model_flagged = is_flagged(active, which=model_flag)
    stmt = (select(a.c.profile, a.c.lot_id, a.c.rig_id, a.c.unit_id, day.label("day"),
                   func.min(a.c.site_id).label("site_id"), func.count().label("n_all"),
                   func.sum(case((a.c.passed_qc.is_(False), 1), else_=0)).label("n_qc_failed"),
                   func.sum(case((any_flag, 1), else_=0)).label("n_flagged"),
                   func.sum(case((model_flagged, 1), else_=0)).label("n_model_flagged"),
                   func.min(a.c.recorded_at).label("first"), func.max(a.c.recorded_at).label("last"))
            .where(cond).group_by(a.c.profile, a.c.lot_id, a.c.rig_id, a.c.unit_id, day))
    res = conn.execute(stmt)
    out = pd.DataFrame(res.fetchall(), columns=list(res.keys()))
    for c in ("site_id", "n_all", "n_qc_failed", "n_flagged", "n_model_flagged"):
        out[c] = out[c].fillna(0).astype(int)
    return out[CELL + COUNT_VALUES]


def _sample_frame(conn, cond, profiles) -> pd.DataFrame:
    """cloud_sample rows of the strata matching ``cond`` (a condition on actuations covering whole strata):
    per stratum the SAMPLE_PER_STRATUM unflagged actuations of the lowest sampling key, ranked 1, 2, ..., and
    every flagged one (a flag that counts), ranked -1, -2, ... from the newest."""
    from .queries._base import is_flagged  # the one "flagged" rule (imported late: no cycle)

    a = db.actuations
    flagged = is_flagged(_active_ids(conn, profiles))
    is_fl = case((flagged, 1), else_=0)
    rank = func.row_number().over(partition_by=(a.c.profile, a.c.lot_id, a.c.rig_id, is_fl),
                                  order_by=(case((flagged, -a.c.id), else_=sampling_key(a.c.id)), a.c.id))
    inner = select(a.c.id.label("actuation_id"), a.c.profile, a.c.lot_id, a.c.rig_id, is_fl.label("fl"),
                   rank.label("rank")).where(cond).subquery()
    res = conn.execute(select(inner).where((inner.c.fl == 1) | (inner.c.rank <= SAMPLE_PER_STRATUM)))
    out = pd.DataFrame(res.fetchall(), columns=["actuation_id", "profile", "lot_id", "rig_id", "fl", "rank"])
    out["rank"] = np.where(out["fl"] == 1, -out["rank"], out["rank"]).astype(int)
    return out.drop(columns="fl")


def compute(conn, *, profile: str | None = None) -> dict[str, pd.DataFrame]:
    """Every summary row recomputed from the raw rows (of one profile, or all): {"stat_summaries",
    "cell_counts", "cloud_sample": DataFrame}."""
    a = db.actuations
    cond = a.c.profile == profile if profile is not None else a.c.id.is_not(None)
    profiles = [profile] if profile is not None else list(conn.execute(select(a.c.profile).distinct()).scalars())
    return {"stat_summaries": _stat_frames(conn, cond), "cell_counts": _count_frame(conn, cond, profiles),
            "cloud_sample": _sample_frame(conn, cond, profiles)}


def _records(frame: pd.DataFrame) -> list[dict]:
    rows = []
    for rec in frame.to_dict("records"):
        out = {}
        for k, v in rec.items():
            if isinstance(v, float) and math.isnan(v):
                v = None
            elif isinstance(v, np.integer):
                v = int(v)
            elif isinstance(v, np.floating):
                v = float(v)
            elif isinstance(v, pd.Timestamp):
                v = v.to_pydatetime()
            out[k] = v
        rows.append(out)
    return rows


def _insert(conn, table, frame: pd.DataFrame, *, chunk: int = 20_000) -> None:
    rows = _records(frame)
    for i in range(0, len(rows), chunk):
        conn.execute(table.insert(), rows[i:i + chunk])


def _day(v) -> date:
    if isinstance(v, datetime):
        return v.date()
    if isinstance(v, date):
        return v
    return date.fromisoformat(str(v)[:10])


def refresh_for(conn, actuation_ids) -> int:
    """Recompute the summaries of every cell (and sample stratum) holding one of ``actuation_ids``, inside the
    caller's write transaction; returns the number of cells."""
    a = db.actuations
    ids = sorted({int(i) for i in actuation_ids})
    if not ids:
        return 0
    cells: set[tuple] = set()
    for start in range(0, len(ids), 500):
        rows = conn.execute(select(a.c.profile, a.c.lot_id, a.c.rig_id, a.c.unit_id, a.c.recorded_at)
                            .where(a.c.id.in_(ids[start:start + 500]))).all()
        cells |= {(r.profile, r.lot_id, r.rig_id, r.unit_id, _day(r.recorded_at)) for r in rows}
    for profile in sorted({c[0] for c in cells}):
        profile_lock(conn, profile)
    cell_list = sorted(cells)
    strata = sorted({c[:3] for c in cells})
    first = min(c[4] for c in cells)
    last = max(c[4] for c in cells) + timedelta(days=1)
    t0, t1 = datetime.combine(first, datetime.min.time()), datetime.combine(last, datetime.min.time())
    in_cells = and_(a.c.lot_id.in_(sorted({c[1] for c in cells})), a.c.recorded_at >= t0, a.c.recorded_at < t1,
                    tuple_(a.c.profile, a.c.lot_id, a.c.rig_id, a.c.unit_id, day_of(a.c.recorded_at))
                    .in_(cell_list))
    for table in (db.stat_summaries, db.cell_counts):
        t = table.c
        conn.execute(table.delete().where(tuple_(t.profile, t.lot_id, t.rig_id, t.unit_id, t.day).in_(cell_list)))
    _insert(conn, db.stat_summaries, _stat_frames(conn, in_cells))
    _insert(conn, db.cell_counts, _count_frame(conn, in_cells, {c[0] for c in cells}))
    s = db.cloud_sample.c
    conn.execute(db.cloud_sample.delete().where(tuple_(s.profile, s.lot_id, s.rig_id).in_(strata)))
    in_strata = and_(a.c.lot_id.in_(sorted({c[1] for c in strata})),
                     tuple_(a.c.profile, a.c.lot_id, a.c.rig_id).in_(strata))
    _insert(conn, db.cloud_sample, _sample_frame(conn, in_strata, {c[0] for c in cells}))
    return len(cells)


def refresh_counts(conn, profile: str) -> None:
    """Recompute the cell counts and the sample of ``profile`` (which flags count moves when its active versions
    change)."""
    profile_lock(conn, profile)
    mine = db.actuations.c.profile == profile
    for table in (db.cell_counts, db.cloud_sample):
        conn.execute(table.delete().where(table.c.profile == profile))
    _insert(conn, db.cell_counts, _count_frame(conn, mine, [profile]))
    _insert(conn, db.cloud_sample, _sample_frame(conn, mine, [profile]))


def rebuild(conn, *, profile: str | None = None) -> dict[str, int]:
    """Recompute every summary (of one profile, or all) from the raw rows; returns the rows written per table."""
    profiles = [profile] if profile is not None else sorted(
        conn.execute(select(db.actuations.c.profile).distinct()).scalars())
    for p in profiles:
        profile_lock(conn, p)
    fresh = compute(conn, profile=profile)
    for name, frame in fresh.items():
        table = db.TABLES[name]
        stmt = table.delete()
        if profile is not None:
            stmt = stmt.where(table.c.profile == profile)
        conn.execute(stmt)
        _insert(conn, table, frame)
    return {k: len(v) for k, v in fresh.items()}


def _stored(conn, name: str) -> pd.DataFrame:
    res = conn.execute(select(db.TABLES[name]))
    return pd.DataFrame(res.fetchall(), columns=list(res.keys()))


def differences(conn, *, rel_tol: float = 1e-9) -> list[str]:
    """Recompute every summary from the raw rows and compare with the stored ones: one line per differing row
    or value, empty when they agree."""
    fresh = compute(conn)
    keys = {"stat_summaries": STAT_KEY, "cell_counts": CELL, "cloud_sample": ["actuation_id"]}
    problems = []
    for name, key in keys.items():
        want, have = fresh[name].copy(), _stored(conn, name)
        for frame in (want, have):
            if "day" in frame:
                frame["day"] = [_day(v) for v in frame["day"]]
            for c in ("first", "last"):
                if c in frame:
                    frame[c] = pd.to_datetime(frame[c])
        m = want.merge(have, on=key, how="outer", suffixes=("", "_stored"), indicator=True)
        lines = []
        for row in m[m["_merge"] == "left_only"].itertuples(index=False):
            lines.append(f"{name}: missing row {_key_text(row, key)}")
        for row in m[m["_merge"] == "right_only"].itertuples(index=False):
            lines.append(f"{name}: stored row not in the raw rows {_key_text(row, key)}")
        both = m[m["_merge"] == "both"]
        for c in [c for c in want.columns if c not in key]:
            a_, b_ = both[c], both[f"{c}_stored"]
            if pd.api.types.is_numeric_dtype(a_) and pd.api.types.is_numeric_dtype(b_):
                x, y = a_.to_numpy(dtype=float), b_.to_numpy(dtype=float)
                bad = ~(np.isclose(x, y, rtol=rel_tol, atol=1e-12) | (np.isnan(x) & np.isnan(y)))
            else:
                bad = (a_ != b_).to_numpy()
            for row, x, y in zip(both[bad].itertuples(index=False), a_[bad], b_[bad]):
                lines.append(f"{name}: {c} of {_key_text(row, key)} is {y!r} stored, {x!r} from the raw rows")
        problems += lines
    return problems


def _key_text(row, key) -> str:
    return "(" + ", ".join(f"{k}={getattr(row, k)}" for k in key) + ")"
