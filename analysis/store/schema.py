"""The results store's tables (SQLAlchemy Core) and the versioned create/upgrade step.

One schema serves SQLite and PostgreSQL. Times are stored as naive UTC datetimes (SQLite has no time zone type);
the sidecar's own ``recorded_at`` text, with its UTC offset, is kept beside it. Arrays are compact bytes:
band levels, scores, T² and SPE as little-endian float32 with their shape in integer columns; slice times and
band centres as float64 (they are axes, few values, and must compare exactly).

``SCHEMA_VERSION`` is the version this Harken writes. ``MIGRATIONS[v]`` upgrades a store of version v to v + 1;
a store newer than this Harken is refused with a message that says so.
"""

from __future__ import annotations

from datetime import datetime, timezone

from sqlalchemy import (  # noqa: I001
    Boolean,
    Column,
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
    inspect,
    select,
)

__all__ = ["SCHEMA_VERSION", "MIGRATIONS", "metadata", "TABLES", "ensure_schema", "utc_now"]

SCHEMA_VERSION = 1

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
    UniqueConstraint("actuation_id", "name", name="uq_events_actuation_name"),
    Index("ix_events_name", "name", "actuation_id"),
)

#: status: "active" (one per profile and event) or "retired".
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
    Column("slices_outside", Integer),
    Column("flagged", Boolean, nullable=False),
    UniqueConstraint("actuation_id", "event", "model_id", name="uq_trajectories"),
    Index("ix_trajectories_model", "model_id", "actuation_id"),
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
    Column("flag_id", Integer, ForeignKey("flags.id"), nullable=False),
    Column("person", Text, nullable=False),
    Column("verdict", String(64), nullable=False),
    Column("note", Text),
    Column("created_at", DateTime, nullable=False),
    Index("ix_verdicts_flag", "flag_id"),
)

#: Append-only: the store's code only ever inserts here.
audit_log = Table(
    "audit_log", metadata,
    Column("id", Integer, primary_key=True),
    Column("at", DateTime, nullable=False),
    Column("person", Text, nullable=False),
    Column("action", String(64), nullable=False),
    Column("target", Text),
    Column("detail", Text),  # JSON
    Index("ix_audit_at", "at"),
)

TABLES = {t.name: t for t in metadata.sorted_tables}

#: The audit log refuses UPDATE and DELETE in the database itself, not only by convention of this code.
_APPEND_ONLY_DDL = {
    "sqlite": [
        "CREATE TRIGGER audit_log_no_update BEFORE UPDATE ON audit_log "
        "BEGIN SELECT RAISE(ABORT, 'the audit log is append-only'); END",
        "CREATE TRIGGER audit_log_no_delete BEFORE DELETE ON audit_log "
        "BEGIN SELECT RAISE(ABORT, 'the audit log is append-only'); END",
    ],
    "postgresql": [
        "CREATE FUNCTION harken_audit_log_append_only() RETURNS trigger LANGUAGE plpgsql AS "
        "$$ BEGIN RAISE EXCEPTION 'the audit log is append-only'; END $$",
        "CREATE TRIGGER audit_log_append_only BEFORE UPDATE OR DELETE ON audit_log "
        "FOR EACH ROW EXECUTE FUNCTION harken_audit_log_append_only()",
    ],
}

#: MIGRATIONS[v](connection) upgrades a version-v store to v + 1 (none yet: version 1 is the first).
MIGRATIONS: dict = {}


def utc_now() -> datetime:
    """Now as a naive UTC datetime (how the store keeps times), to the microsecond."""
    return datetime.now(timezone.utc).replace(tzinfo=None)


def ensure_schema(conn, *, where: str, known_version: int = SCHEMA_VERSION, harken_version: str = "") -> int:
    """Create the tables in an empty database, upgrade an older store, refuse a newer or foreign one.

    ``where`` names the store (URL without password) in error messages. Returns the schema version found before
    any upgrade (0 for a new store). Runs inside the caller's transaction.
    """
    from .errors import StoreError

    names = set(inspect(conn).get_table_names())
    if not names:
        metadata.create_all(conn)
        for ddl in _APPEND_ONLY_DDL.get(conn.dialect.name, []):
            conn.exec_driver_sql(ddl)
        conn.execute(store_info.insert(), [
            {"key": "schema_version", "value": str(known_version)},
            {"key": "created_by_harken", "value": harken_version},
            {"key": "created_at", "value": utc_now().isoformat(timespec="seconds") + "Z"},
        ])
        return 0
    if "store_info" not in names:
        raise StoreError(f"{where}: not a Harken store (it has tables {', '.join(sorted(names)[:5])}"
                         f"{' ...' if len(names) > 5 else ''} but no store_info table)")
    row = conn.execute(select(store_info.c.value).where(store_info.c.key == "schema_version")).first()
    try:
        found = int(row[0]) if row is not None else None
    except ValueError:
        found = None
    if found is None:
        raise StoreError(f"{where}: not a Harken store, or a damaged one (no readable schema_version)")
    if found > known_version:
        raise StoreError(
            f"{where}: the store has schema version {found}, this Harken knows versions up to {known_version}; "
            "it was made by a newer Harken, so upgrade Harken to open it"
        )
    for v in range(found, known_version):
        step = MIGRATIONS.get(v)
        if step is None:
            raise StoreError(f"{where}: no upgrade from schema version {v} to {v + 1} (store too old to open)")
        step(conn)
    if found < known_version:
        conn.execute(store_info.update().where(store_info.c.key == "schema_version").values(value=str(known_version)))
    missing = [t for t in TABLES if t not in inspect(conn).get_table_names()]
    if missing:
        raise StoreError(f"{where}: schema version {found} store lacks table(s) {', '.join(missing)} (damaged?)")
    return found
