"""The first schema: every table, index and constraint of a version-1 store, and the append-only audit log.

Frozen: this file spells the tables out instead of importing analysis.store.schema, so later edits of schema.py
change nothing here. Stores made before the migrations moved to Alembic have exactly this schema and are stamped
"0001" when first opened.

Revision ID: 0001
Revises:
Create Date: 2026-12-02
"""

from datetime import UTC, datetime

import sqlalchemy as sa
from alembic import context, op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None

#: The audit log refuses UPDATE and DELETE in the database itself, not only by convention of the store's code.
APPEND_ONLY_DDL = {
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

DROP_APPEND_ONLY_DDL = {
    "sqlite": ["DROP TRIGGER audit_log_no_update", "DROP TRIGGER audit_log_no_delete"],
    "postgresql": ["DROP TRIGGER audit_log_append_only ON audit_log",
                   "DROP FUNCTION harken_audit_log_append_only()"],
}

#: In the order of creation (referenced tables first).
TABLE_NAMES = ["store_info", "sites", "lots", "recordings", "reference_models", "audit_log", "rigs", "units",
               "qc_results", "actuations", "events", "trajectories", "flags", "verdicts"]


def upgrade() -> None:
    store_info = op.create_table(
        "store_info",
        sa.Column("key", sa.String(64), nullable=False),
        sa.Column("value", sa.Text(), nullable=False),
        sa.PrimaryKeyConstraint("key"),
    )
    op.create_table(
        "sites",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.Text(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("name"),
    )
    op.create_table(
        "lots",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.Text(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("name"),
    )
    op.create_table(
        "recordings",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("content_hash", sa.String(64), nullable=False),
        sa.Column("original_name", sa.Text(), nullable=False),
        sa.Column("size_bytes", sa.Integer(), nullable=False),
        sa.Column("sample_rate_hz", sa.Integer(), nullable=True),
        sa.Column("channels", sa.Integer(), nullable=True),
        sa.Column("duration_s", sa.Float(), nullable=True),
        sa.Column("profile", sa.Text(), nullable=True),
        sa.Column("sidecar_json", sa.Text(), nullable=True),
        sa.Column("archive_path", sa.Text(), nullable=True),
        sa.Column("received_at", sa.DateTime(), nullable=False),
        sa.Column("analysed_at", sa.DateTime(), nullable=True),
        sa.Column("status", sa.String(16), nullable=False),
        sa.Column("error", sa.Text(), nullable=True),
        sa.Column("claimed_by", sa.Text(), nullable=True),
        sa.Column("claimed_at", sa.DateTime(), nullable=True),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("content_hash"),
    )
    op.create_index("ix_recordings_status", "recordings", ["status", "claimed_at"])
    op.create_table(
        "reference_models",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("profile", sa.Text(), nullable=False),
        sa.Column("event", sa.Text(), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.Column("status", sa.String(16), nullable=False),
        sa.Column("reference_lots", sa.Text(), nullable=False),
        sa.Column("parameters", sa.Text(), nullable=False),
        sa.Column("n_recordings", sa.Integer(), nullable=False),
        sa.Column("n_components", sa.Integer(), nullable=False),
        sa.Column("t2_limit", sa.Float(), nullable=True),
        sa.Column("spe_limit", sa.Float(), nullable=True),
        sa.Column("created_by", sa.Text(), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.Column("model_json", sa.Text(), nullable=False),
        sa.Column("model_npz", sa.LargeBinary(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("profile", "event", "version", name="uq_models_version"),
    )
    op.create_index("ix_models_status", "reference_models", ["profile", "event", "status"])
    op.create_table(
        "audit_log",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("at", sa.DateTime(), nullable=False),
        sa.Column("person", sa.Text(), nullable=False),
        sa.Column("action", sa.String(64), nullable=False),
        sa.Column("target", sa.Text(), nullable=True),
        sa.Column("detail", sa.Text(), nullable=True),
        sa.PrimaryKeyConstraint("id"),
    )
    op.create_index("ix_audit_at", "audit_log", ["at"])
    op.create_table(
        "rigs",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("site_id", sa.Integer(), nullable=False),
        sa.Column("name", sa.Text(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("site_id", "name", name="uq_rigs_site_name"),
        sa.ForeignKeyConstraint(["site_id"], ["sites.id"]),
    )
    op.create_table(
        "units",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("lot_id", sa.Integer(), nullable=False),
        sa.Column("name", sa.Text(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("lot_id", "name", name="uq_units_lot_name"),
        sa.ForeignKeyConstraint(["lot_id"], ["lots.id"]),
    )
    op.create_table(
        "qc_results",
        sa.Column("recording_id", sa.Integer(), nullable=False),
        sa.Column("check_name", sa.String(64), nullable=False),
        sa.Column("value", sa.Float(), nullable=True),
        sa.Column("limit_value", sa.Float(), nullable=True),
        sa.Column("passed", sa.Boolean(), nullable=False),
        sa.Column("detail", sa.Text(), nullable=True),
        sa.PrimaryKeyConstraint("recording_id", "check_name"),
        sa.ForeignKeyConstraint(["recording_id"], ["recordings.id"]),
    )
    op.create_table(
        "actuations",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("recording_id", sa.Integer(), nullable=False),
        sa.Column("profile", sa.Text(), nullable=False),
        sa.Column("site_id", sa.Integer(), nullable=False),
        sa.Column("rig_id", sa.Integer(), nullable=False),
        sa.Column("lot_id", sa.Integer(), nullable=False),
        sa.Column("unit_id", sa.Integer(), nullable=False),
        sa.Column("actuation", sa.Integer(), nullable=False),
        sa.Column("recorded_at", sa.DateTime(), nullable=False),
        sa.Column("recorded_at_text", sa.String(64), nullable=False),
        sa.Column("passed_qc", sa.Boolean(), nullable=False),
        sa.Column("marker_source", sa.Text(), nullable=True),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("recording_id"),
        sa.ForeignKeyConstraint(["recording_id"], ["recordings.id"]),
        sa.ForeignKeyConstraint(["site_id"], ["sites.id"]),
        sa.ForeignKeyConstraint(["rig_id"], ["rigs.id"]),
        sa.ForeignKeyConstraint(["lot_id"], ["lots.id"]),
        sa.ForeignKeyConstraint(["unit_id"], ["units.id"]),
    )
    op.create_index("ix_actuations_profile_time", "actuations", ["profile", "recorded_at"])
    op.create_index("ix_actuations_lot", "actuations", ["lot_id", "recorded_at"])
    op.create_index("ix_actuations_rig", "actuations", ["rig_id", "recorded_at"])
    op.create_table(
        "events",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("actuation_id", sa.Integer(), nullable=False),
        sa.Column("name", sa.Text(), nullable=False),
        sa.Column("found", sa.Boolean(), nullable=False),
        sa.Column("onset_s", sa.Float(), nullable=True),
        sa.Column("end_s", sa.Float(), nullable=True),
        sa.Column("duration_s", sa.Float(), nullable=True),
        sa.Column("peak_dbfs", sa.Float(), nullable=True),
        sa.Column("latency_s", sa.Float(), nullable=True),
        sa.Column("method", sa.String(64), nullable=True),
        sa.Column("reason", sa.Text(), nullable=True),
        sa.Column("dominant_hz", sa.Float(), nullable=True),
        sa.Column("centroid_hz", sa.Float(), nullable=True),
        sa.Column("band_energy_db", sa.Float(), nullable=True),
        sa.Column("padded_slices", sa.Integer(), nullable=True),
        sa.Column("level_reference", sa.String(64), nullable=True),
        sa.Column("n_slices", sa.Integer(), nullable=True),
        sa.Column("n_bands", sa.Integer(), nullable=True),
        sa.Column("levels_f32", sa.LargeBinary(), nullable=True),
        sa.Column("slice_times_f64", sa.LargeBinary(), nullable=True),
        sa.Column("band_centres_f64", sa.LargeBinary(), nullable=True),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("actuation_id", "name", name="uq_events_actuation_name"),
        sa.ForeignKeyConstraint(["actuation_id"], ["actuations.id"]),
    )
    op.create_index("ix_events_name", "events", ["name", "actuation_id"])
    op.create_table(
        "trajectories",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("actuation_id", sa.Integer(), nullable=False),
        sa.Column("event", sa.Text(), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("n_slices", sa.Integer(), nullable=True),
        sa.Column("n_components", sa.Integer(), nullable=True),
        sa.Column("scores_f32", sa.LargeBinary(), nullable=True),
        sa.Column("t2_f32", sa.LargeBinary(), nullable=True),
        sa.Column("spe_f32", sa.LargeBinary(), nullable=True),
        sa.Column("t2_max", sa.Float(), nullable=True),
        sa.Column("spe_max", sa.Float(), nullable=True),
        sa.Column("t2_ratio", sa.Float(), nullable=True),
        sa.Column("spe_ratio", sa.Float(), nullable=True),
        sa.Column("trajectory_distance", sa.Float(), nullable=True),
        sa.Column("event_spe_ratio", sa.Float(), nullable=True),
        sa.Column("slices_outside", sa.Integer(), nullable=True),
        sa.Column("flagged", sa.Boolean(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("actuation_id", "event", "model_id", name="uq_trajectories"),
        sa.ForeignKeyConstraint(["actuation_id"], ["actuations.id"]),
        sa.ForeignKeyConstraint(["model_id"], ["reference_models.id"]),
    )
    op.create_index("ix_trajectories_model", "trajectories", ["model_id", "actuation_id"])
    op.create_table(
        "flags",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("actuation_id", sa.Integer(), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=True),
        sa.Column("event", sa.Text(), nullable=True),
        sa.Column("statistic", sa.String(64), nullable=False),
        sa.Column("value", sa.Float(), nullable=True),
        sa.Column("limit_value", sa.Float(), nullable=True),
        sa.Column("reason", sa.Text(), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.ForeignKeyConstraint(["actuation_id"], ["actuations.id"]),
        sa.ForeignKeyConstraint(["model_id"], ["reference_models.id"]),
    )
    op.create_index("ix_flags_actuation", "flags", ["actuation_id", "model_id"])
    op.create_index("ix_flags_model", "flags", ["model_id", "actuation_id"])
    op.create_table(
        "verdicts",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("flag_id", sa.Integer(), nullable=False),
        sa.Column("person", sa.Text(), nullable=False),
        sa.Column("verdict", sa.String(64), nullable=False),
        sa.Column("note", sa.Text(), nullable=True),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.ForeignKeyConstraint(["flag_id"], ["flags.id"]),
    )
    op.create_index("ix_verdicts_flag", "verdicts", ["flag_id"])

    for ddl in APPEND_ONLY_DDL.get(op.get_context().dialect.name, []):
        op.execute(ddl)

    # Harken's program path passes its version in; the alembic command line leaves it empty.
    harken_version = context.config.attributes.get("harken_version", "")
    created_at = datetime.now(UTC).replace(tzinfo=None).isoformat(timespec="seconds") + "Z"
    op.bulk_insert(store_info, [
        {"key": "schema_version", "value": "1"},
        {"key": "created_by_harken", "value": harken_version},
        {"key": "created_at", "value": created_at},
    ])


def downgrade() -> None:
    for ddl in DROP_APPEND_ONLY_DDL.get(op.get_context().dialect.name, []):
        op.execute(ddl)
    for name in reversed(TABLE_NAMES):
        op.drop_table(name)  # drops the table's indexes with it
