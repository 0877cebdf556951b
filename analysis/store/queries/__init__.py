"""The store's one read API: named query functions of an open connection (``with store.read() as conn``), each
returning a DataFrame, a dataclass or a dict. The dashboard, the command line and the demo read the store only
through these (and the ``Store`` methods that wrap the common ones); none of them writes SQL.

- records:    schema_version, recordings, quarantine, recent_quarantine, actuations, export_actuations, flags,
              actuation_detail, band_levels, event_levels, trajectory, trajectories, unscored, latest_per_rig,
              lot_actuations, lot_names, audit_log, check_integrity, kept_files, today_changes
- models:     models, load_model, active_models, reference_lots, typical_reference_actuation
- signals:    signals, actuation_causes, units_table, rig_fingerprint
- aggregates: choices, lot_points, actuation_cloud, rig_summary, reference_summary, rig_histogram,
              triage_evidence, flag_summary, fingerprint

A flag counts when it was raised under an active model version or by a quality check (one rule, in
``_base.counted_flag``); an actuation is flagged when it has a flag that counts.
"""

from .aggregates import (
    actuation_cloud,
    choices,
    fingerprint,
    flag_summary,
    lot_points,
    reference_summary,
    rig_histogram,
    rig_summary,
    triage_evidence,
)
from .models import active_models, approvals, load_model, models, reference_lots, typical_reference_actuation
from .records import (
    actuation_detail,
    actuations,
    audit_facets,
    audit_log,
    band_levels,
    check_integrity,
    event_levels,
    export_actuations,
    flags,
    kept_files,
    latest_per_rig,
    lot_actuations,
    lot_names,
    quarantine,
    recent_quarantine,
    recordings,
    schema_version,
    today_changes,
    trajectories,
    trajectory,
    unscored,
)
from .signals import SIGNAL_COLUMNS, actuation_causes, awaiting_review, rig_fingerprint, signals, units_table

__all__ = [
    "schema_version", "recordings", "quarantine", "recent_quarantine", "actuations", "export_actuations", "flags",
    "actuation_detail", "band_levels", "event_levels", "trajectory", "trajectories", "unscored", "latest_per_rig",
    "lot_actuations", "lot_names", "audit_log", "audit_facets", "check_integrity", "kept_files",
    "models", "load_model", "active_models", "reference_lots", "typical_reference_actuation", "approvals",
    "choices", "lot_points", "actuation_cloud", "rig_summary", "reference_summary", "rig_histogram",
    "triage_evidence", "flag_summary", "fingerprint", "signals", "actuation_causes", "units_table", "SIGNAL_COLUMNS",
    "rig_fingerprint", "awaiting_review", "today_changes",
]
