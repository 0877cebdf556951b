"""The results store's tables (SQLAlchemy Core).

One schema serves SQLite and PostgreSQL. Times are stored as naive UTC datetimes (SQLite has no time zone type);
the sidecar's own ``recorded_at`` text, with its UTC offset, is kept beside it. Arrays are compact bytes:
band levels, scores, T² and SPE as little-endian float32 with their shape in integer columns; slice times and
band centres as float64 (they are axes, few values, and must compare exactly).

The database gets its tables from the Alembic revisions in migrations/ (see migrate.py), not from these
definitions: a change here needs a new revision, which ``compare_metadata`` in the tests holds to it.
"""

from __future__ import annotations

from datetime import UTC, datetime

from sqlalchemy import (  # noqa: I001
    Boolean,
    Column,
    Date,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    MetaData,
    String,
    Table,
    Text,
    UniqueConstraint,
    select,
)

__all__ = ["metadata", "TABLES", "utc_now", "put_info"]

metadata = MetaData()

#: One row per key: "schema_version", "created_by_harken", "created_at".
store_info = Table(
    "store_info", metadata,
    Column("key", String(64), primary_key=True),
    Column("value", Text, nullable=False),
)

sites = Table(
    "sites", metadata,
    Column("id", Integer, primary_key=True),
    Column("name", Text, nullable=False, unique=True),
)

rigs = Table(
    "rigs", metadata,
    Column("id", Integer, primary_key=True),
    Column("site_id", Integer, ForeignKey("sites.id"), nullable=False),
    Column("name", Text, nullable=False),
    UniqueConstraint("site_id", "name", name="uq_rigs_site_name"),
)

lots = Table(
    "lots", metadata,
    Column("id", Integer, primary_key=True),
    Column("name", Text, nullable=False, unique=True),
)

units = Table(
    "units", metadata,
    Column("id", Integer, primary_key=True),
    Column("lot_id", Integer, ForeignKey("lots.id"), nullable=False),
    Column("name", Text, nullable=False),
    UniqueConstraint("lot_id", "name", name="uq_units_lot_name"),
)

#: status: "claimed" (a worker is on it), "analysed" (results committed), "quarantined" (could not be analysed).
recordings = Table(
    "recordings", metadata,
    Column("id", Integer, primary_key=True),
    Column("content_hash", String(64), nullable=False, unique=True),  # SHA-256 of the audio file, hex
    Column("original_name", Text, nullable=False),  # as delivered, relative to the inbox or as given
    Column("size_bytes", Integer, nullable=False),
    Column("sample_rate_hz", Integer),
    Column("channels", Integer),
    Column("duration_s", Float),
    Column("profile", Text),
    Column("sidecar_json", Text),
    Column("archive_path", Text),  # the kept original (or the quarantined copy)
    Column("received_at", DateTime, nullable=False),
    Column("analysed_at", DateTime),
    Column("status", String(16), nullable=False),
    Column("error", Text),
    Column("claimed_by", Text),
    Column("claimed_at", DateTime),
    Index("ix_recordings_status", "status", "claimed_at"),
)

actuations = Table(
    "actuations", metadata,
    Column("id", Integer, primary_key=True),
    Column("recording_id", Integer, ForeignKey("recordings.id"), nullable=False, unique=True),
    Column("profile", Text, nullable=False),
    Column("site_id", Integer, ForeignKey("sites.id"), nullable=False),
    Column("rig_id", Integer, ForeignKey("rigs.id"), nullable=False),
    Column("lot_id", Integer, ForeignKey("lots.id"), nullable=False),
    Column("unit_id", Integer, ForeignKey("units.id"), nullable=False),
    Column("actuation", Integer, nullable=False),  # the sidecar's actuation number of the unit
    Column("recorded_at", DateTime, nullable=False),  # UTC
    Column("recorded_at_text", String(64), nullable=False),  # the sidecar's ISO text with its offset
    Column("passed_qc", Boolean, nullable=False),
    Column("marker_source", Text),
    Column("profile_version", Integer),  # the device profile the analysis used: its version ...
    Column("profile_sha256", String(64)),  # ... and the SHA-256 of its file
    Column("qc_sha256", String(64)),  # checksum of the recording's QC results and QC flags (analysis.store.integrity)
    Index("ix_actuations_profile_time", "profile", "recorded_at"),
    Index("ix_actuations_lot", "lot_id", "recorded_at"),
    Index("ix_actuations_rig", "rig_id", "recorded_at"),
)

qc_results = Table(
    "qc_results", metadata,
    Column("recording_id", Integer, ForeignKey("recordings.id"), primary_key=True),
    Column("check_name", String(64), primary_key=True),
    Column("value", Float),
    Column("limit_value", Float),
    Column("passed", Boolean, nullable=False),
    Column("detail", Text),
)

#: One row per profile event of an actuation, found or not; band levels only for analysed events.
events = Table(
    "events", metadata,
    Column("id", Integer, primary_key=True),
    Column("actuation_id", Integer, ForeignKey("actuations.id"), nullable=False),
    Column("name", Text, nullable=False),
    Column("found", Boolean, nullable=False),
    Column("onset_s", Float),
    Column("end_s", Float),
    Column("duration_s", Float),
    Column("peak_dbfs", Float),
    Column("latency_s", Float),
    Column("method", String(64)),
    Column("reason", Text),
    Column("dominant_hz", Float),
    Column("centroid_hz", Float),
    Column("band_energy_db", Float),
    Column("padded_slices", Integer),
    Column("level_reference", String(64)),  # unit of the band levels, e.g. "dBFS"
    Column("n_slices", Integer),
    Column("n_bands", Integer),
    Column("levels_f32", LargeBinary),  # (n_slices, n_bands) float32 band levels
    Column("slice_times_f64", LargeBinary),  # (n_slices,) s from the onset
    Column("band_centres_f64", LargeBinary),  # (n_bands,) Hz
    # (n_ranges, 4) float64 per profile resonance range: frequency_hz, level_db, bandwidth_hz, decay_per_s
    Column("resonances_f64", LargeBinary),
    UniqueConstraint("actuation_id", "name", name="uq_events_actuation_name"),
    Index("ix_events_name", "name", "actuation_id"),
)

#: status: "active" (one per profile and event), "retired", or "pending" (built, awaiting a signed approval).
reference_models = Table(
    "reference_models", metadata,
    Column("id", Integer, primary_key=True),
    Column("profile", Text, nullable=False),
    Column("event", Text, nullable=False),
    Column("version", Integer, nullable=False),
    Column("status", String(16), nullable=False),
    Column("reference_lots", Text, nullable=False),  # JSON list
    Column("parameters", Text, nullable=False),  # JSON: the model's constructor parameters
    Column("n_recordings", Integer, nullable=False),
    Column("n_components", Integer, nullable=False),
    Column("t2_limit", Float),
    Column("spe_limit", Float),
    Column("created_by", Text, nullable=False),
    Column("created_at", DateTime, nullable=False),
    Column("model_json", Text, nullable=False),  # analysis.monitor's model file, verbatim
    Column("model_npz", LargeBinary, nullable=False),  # its arrays file, verbatim
    Column("profile_version", Integer),  # the device profile it was fitted with
    Column("profile_sha256", String(64)),
    Column("content_sha256", String(64)),  # checksum of the row (analysis.store.integrity)
    UniqueConstraint("profile", "event", "version", name="uq_models_version"),
    Index("ix_models_status", "profile", "event", "status"),
)

#: Statistics of one event of one actuation under one model version.
trajectories = Table(
    "trajectories", metadata,
    Column("id", Integer, primary_key=True),
    Column("actuation_id", Integer, ForeignKey("actuations.id"), nullable=False),
    Column("event", Text, nullable=False),
    Column("model_id", Integer, ForeignKey("reference_models.id"), nullable=False),
    Column("n_slices", Integer),
    Column("n_components", Integer),
    Column("scores_f32", LargeBinary),  # (n_slices, n_components)
    Column("t2_f32", LargeBinary),  # (n_slices,)
    Column("spe_f32", LargeBinary),  # (n_slices,)
    Column("t2_max", Float),
    Column("spe_max", Float),
    Column("t2_ratio", Float),
    Column("spe_ratio", Float),
    Column("trajectory_distance", Float),
    Column("event_spe_ratio", Float),
    Column("resonance_t2", Float),  # T² of the resonance block (None for a model without one)
    Column("residual_f32", LargeBinary),  # (n_bands,) slice-mean residual: which bands carry a departure
    Column("slices_outside", Integer),
    Column("flagged", Boolean, nullable=False),
    Column("flags_sha256", String(64)),  # checksum of these statistics and the flags they raised
    UniqueConstraint("actuation_id", "event", "model_id", name="uq_trajectories"),
    Index("ix_trajectories_model", "model_id", "actuation_id"),
)

#: The whitened resonance features of one event of one actuation under one model (one row per component k): a
#: unit's mean of them, summed in the database, gives its unit-level T² (analysis.monitor.levels).
resonance_components = Table(
    "resonance_components", metadata,
    Column("actuation_id", Integer, ForeignKey("actuations.id"), primary_key=True),
    Column("model_id", Integer, ForeignKey("reference_models.id"), primary_key=True),
    Column("k", Integer, primary_key=True),
    Column("value", Float, nullable=False),
    Index("ix_resonance_components_model", "model_id", "actuation_id"),
)

#: One row per reason an actuation is flagged. model_id is NULL for quality-check flags, which need no model.
flags = Table(
    "flags", metadata,
    Column("id", Integer, primary_key=True),
    Column("actuation_id", Integer, ForeignKey("actuations.id"), nullable=False),
    Column("model_id", Integer, ForeignKey("reference_models.id")),
    Column("event", Text),
    Column("statistic", String(64), nullable=False),  # t2, spe, trajectory, event_residual, event_missing, qc:<check>
    Column("value", Float),
    Column("limit_value", Float),
    Column("reason", Text, nullable=False),
    Column("created_at", DateTime, nullable=False),
    Index("ix_flags_actuation", "actuation_id", "model_id"),
    Index("ix_flags_model", "model_id", "actuation_id"),
)

verdicts = Table(
    "verdicts", metadata,
    Column("id", Integer, primary_key=True),
    Column("flag_id", Integer, ForeignKey("flags.id")),  # a verdict on one flag (the first releases)
    Column("person", Text, nullable=False),
    Column("verdict", String(64), nullable=False),
    Column("note", Text),
    Column("created_at", DateTime, nullable=False),
    Column("signal_id", Integer, ForeignKey("signals.id", name="fk_verdicts_signal")),  # a review of a signal
    Index("ix_verdicts_flag", "flag_id"),
    Index("ix_verdicts_signal", "signal_id"),
)

#: The rig's background before the first event of each actuation (analysis.signal.background): band levels in
#: dB re full scale, float32, at float64 band centres.
backgrounds = Table(
    "backgrounds", metadata,
    Column("actuation_id", Integer, ForeignKey("actuations.id"), primary_key=True),
    Column("start_s", Float),
    Column("duration_s", Float),
    Column("level_dbfs", Float),
    Column("n_bands", Integer, nullable=False),
    Column("levels_f32", LargeBinary, nullable=False),
    Column("band_centres_f64", LargeBinary, nullable=False),
)

#: One row per raised signal at any level (analysis.triage.LEVELS), kept up to date by the worker and by
#: re-scoring: a signal raised again keeps its row (last_seen moves); one no longer raised stays, inactive.
#: key: what it is about (level|event|lot|rig|unit|actuation), unique per profile. Names are kept as text, as
#: shown and exported; first/last: the recording times (UTC) of the actuations behind it.
signals = Table(
    "signals", metadata,
    Column("id", Integer, primary_key=True),
    Column("profile", Text, nullable=False),
    Column("key", Text, nullable=False),
    Column("level", String(16), nullable=False),
    Column("event", Text),
    Column("statistic", String(64), nullable=False),
    Column("value", Float),
    Column("limit_value", Float),
    Column("rule", Text),
    Column("site", Text),
    Column("rig", Text),
    Column("lot", Text),
    Column("unit", Text),
    Column("actuation_id", Integer, ForeignKey("actuations.id")),
    Column("cause", String(16), nullable=False),
    Column("evidence", Text, nullable=False),  # in words
    Column("evidence_json", Text, nullable=False),  # the same as data
    Column("model_version", Integer),
    Column("first", DateTime),
    Column("last", DateTime),
    Column("first_seen", DateTime, nullable=False),
    Column("last_seen", DateTime, nullable=False),
    Column("active", Boolean, nullable=False),
    UniqueConstraint("profile", "key", name="uq_signals_key"),
    Index("ix_signals_active", "active", "level", "profile"),
    Index("ix_signals_actuation", "actuation_id"),
)

#: People who sign in, and their roles (analysis.store.users). Never deleted: a disabled user stays attributable.
users = Table(
    "users", metadata,
    Column("id", Integer, primary_key=True),
    Column("user_name", Text, nullable=False),
    Column("full_name", Text, nullable=False),
    Column("role", String(16), nullable=False),  # viewer, technician, method_owner, admin
    Column("state", String(16), nullable=False),  # active, disabled
    Column("password_hash", Text),  # Argon2id (argon2-cffi); None: signs in only through a trusted header
    Column("created_at", DateTime, nullable=False),
    Column("created_by", Text, nullable=False),
    UniqueConstraint("user_name", name="uq_users_name"),
)

#: A signed approval: a method owner re-entered their password and gave the signature's meaning and a reason;
#: the model version became active with it.
approvals = Table(
    "approvals", metadata,
    Column("id", Integer, primary_key=True),
    Column("model_id", Integer, ForeignKey("reference_models.id"), nullable=False),
    Column("person", Text, nullable=False),
    Column("at", DateTime, nullable=False),
    Column("meaning", Text, nullable=False),
    Column("reason", Text, nullable=False),
    Index("ix_approvals_model", "model_id"),
)

#: Append-only: the store's code only ever inserts here, through analysis.store.audit (a hash chain).
audit_log = Table(
    "audit_log", metadata,
    Column("id", Integer, primary_key=True),
    Column("at", DateTime, nullable=False),
    Column("person", Text, nullable=False),
    Column("action", String(64), nullable=False),
    Column("target", Text),
    Column("detail", Text),  # JSON
    Column("prev_sha256", String(64)),  # the hash chain (analysis.store.audit)
    Column("row_sha256", String(64)),
    Index("ix_audit_at", "at"),
)

#: Per-day summaries kept by the worker in the transaction of the actuations behind them (analysis.store.summaries),
#: read by the Lots, Rigs & sites and Today views instead of the raw rows. A cell is (profile, lot, rig, unit, UTC
#: day). stat_summaries: per cell, event, model (0 for a statistic of the event itself, which needs no model) and
#: statistic, the count, sum and sum of squares of its values (of their natural log for ratio statistics) and their
#: range, over the actuations that passed their quality checks.
stat_summaries = Table(
    "stat_summaries", metadata,
    Column("event", Text, primary_key=True),
    Column("statistic", String(32), primary_key=True),
    Column("model_id", Integer, primary_key=True),
    Column("profile", Text, primary_key=True),
    Column("lot_id", Integer, primary_key=True),
    Column("rig_id", Integer, primary_key=True),
    Column("unit_id", Integer, primary_key=True),
    Column("day", Date, primary_key=True),
    Column("n", Integer, nullable=False),
    Column("s1", Float, nullable=False),
    Column("s2", Float, nullable=False),
    Column("lo", Float),
    Column("hi", Float),
)

#: Per cell: every actuation, those that failed a quality check, those flagged by a flag that counts (a
#: quality-check flag or one of an active model) and by an active model's flag alone, and the first and last
#: recording time (UTC).
cell_counts = Table(
    "cell_counts", metadata,
    Column("profile", Text, primary_key=True),
    Column("lot_id", Integer, primary_key=True),
    Column("rig_id", Integer, primary_key=True),
    Column("unit_id", Integer, primary_key=True),
    Column("day", Date, primary_key=True),
    Column("site_id", Integer, nullable=False),
    Column("n_all", Integer, nullable=False),
    Column("n_qc_failed", Integer, nullable=False),
    Column("n_flagged", Integer, nullable=False),
    Column("n_model_flagged", Integer, nullable=False),
    Column("first", DateTime, nullable=False),
    Column("last", DateTime, nullable=False),
    Index("ix_cell_counts_lot", "lot_id", "rig_id"),
)

#: The single-actuation cloud's sample: per (profile, lot, rig) the unflagged actuations of the lowest sampling
#: keys (a fixed hash of the id), ranked 1, 2, ... so a view takes the first r of every stratum, and every flagged
#: one, ranked -1, -2, ... from the newest.
cloud_sample = Table(
    "cloud_sample", metadata,
    Column("actuation_id", Integer, ForeignKey("actuations.id"), primary_key=True),
    Column("profile", Text, nullable=False),
    Column("lot_id", Integer, nullable=False),
    Column("rig_id", Integer, nullable=False),
    Column("rank", Integer, nullable=False),
    Index("ix_cloud_sample_rank", "profile", "rank"),
    Index("ix_cloud_sample_stratum", "lot_id", "rig_id"),
)

TABLES = {t.name: t for t in metadata.sorted_tables}


def put_info(conn, key: str, value: str) -> str | None:
    """Set one store_info row (insert or update) inside the caller's transaction; returns the value it had."""
    old = conn.execute(select(store_info.c.value).where(store_info.c.key == key)).scalar()
    if old is None:
        conn.execute(store_info.insert().values(key=key, value=value))
    else:
        conn.execute(store_info.update().where(store_info.c.key == key).values(value=value))
    return old


def utc_now() -> datetime:
    """Now as a naive UTC datetime (how the store keeps times), to the microsecond."""
    return datetime.now(UTC).replace(tzinfo=None)
