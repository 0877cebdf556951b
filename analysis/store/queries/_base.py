"""What every read query shares: the data-frame helper, the active model ids, the one "flagged" rule, the base
joins, the filters, and the SD from summed moments. Private to analysis.store.queries."""

from __future__ import annotations

import math
from datetime import datetime, timedelta

import numpy as np
import pandas as pd
from sqlalchemy import and_, exists, literal, or_, select

from ..schema import actuations, flags, lots, recordings, reference_models, rigs, sites, units
from ..types import Filters

__all__ = ["df", "active_model_ids", "counted_flag", "model_flag", "is_flagged", "placed", "placed_full", "where",
           "sd_from_moments", "sd_from_moments_scalar", "text_by_id"]


def df(conn, stmt) -> pd.DataFrame:
    """A statement's rows as a DataFrame with the statement's column names (also when there are no rows)."""
    res = conn.execute(stmt)
    return pd.DataFrame(res.fetchall(), columns=list(res.keys()))


def active_model_ids(conn, profile: str | None = None, event: str | None = None) -> list[int]:
    """Ids of the active reference models (one per profile and event), optionally of one profile or event."""
    stmt = select(reference_models.c.id).where(reference_models.c.status == "active")
    if profile:
        stmt = stmt.where(reference_models.c.profile == profile)
    if event:
        stmt = stmt.where(reference_models.c.event == event)
    return list(conn.execute(stmt.order_by(reference_models.c.id)).scalars())


# The one rule of what counts: a flag raised under an active model version, or a quality-check flag (which needs
# no model and so has no model id). Flags of retired versions stay stored and readable but no longer count.
def counted_flag(active_ids):
    """Condition on a flags row: it counts (a quality-check flag, or a flag of an active model)."""
    cond = flags.c.model_id.is_(None)
    return or_(cond, flags.c.model_id.in_(list(active_ids))) if active_ids else cond


def model_flag(active_ids):
    """Condition on a flags row: a flag of an active model (quality-check flags excluded)."""
    return flags.c.model_id.in_(list(active_ids)) if active_ids else literal(False)


def is_flagged(active_ids, *, which=counted_flag):
    """True when the actuation in the outer query has a flag that counts (a correlated EXISTS)."""
    return exists().where(and_(flags.c.actuation_id == actuations.c.id, which(active_ids)))


def placed():
    """actuations joined with their site, rig and lot."""
    return (actuations.join(sites, sites.c.id == actuations.c.site_id)
            .join(rigs, rigs.c.id == actuations.c.rig_id).join(lots, lots.c.id == actuations.c.lot_id))


def placed_full():
    """actuations joined with their recording, site, rig, lot and unit."""
    return placed().join(recordings, recordings.c.id == actuations.c.recording_id).join(
        units, units.c.id == actuations.c.unit_id)


def where(stmt, f: Filters):
    """The statement restricted by the filters (its FROM must hold actuations, sites, rigs and lots)."""
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


def sd_from_moments(n: pd.Series, m: pd.Series, m2: pd.Series) -> pd.Series:
    """Sample SDs (n - 1 divisor) from counts, means and means of squares, as SQL sums them: NaN below 2 values."""
    n, m, m2 = n.astype(float), m.astype(float), m2.astype(float)
    var = (m2 - m * m) * n / (n - 1).where(n > 1)
    return np.sqrt(var.clip(lower=0))


def sd_from_moments_scalar(n, m, m2) -> float:
    """sd_from_moments for one group."""
    if not n or n < 2:
        return math.nan
    return math.sqrt(max(0.0, (m2 - m * m) * n / (n - 1)))


def text_by_id(ids: pd.Series, by_id: pd.Series) -> pd.Series:
    """Text per id, "" where there is none."""
    d = by_id.to_dict()
    return pd.Series([d.get(i, "") for i in ids], index=ids.index, dtype=object)
