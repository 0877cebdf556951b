"""The signals table: decisions at every level (actuation, unit, cell, lot, rig) with their suggested causes; and
the backgrounds table: each actuation's band levels of the quiet stretch before its first event (the rig's
fingerprint).

Both are empty after the upgrade: the next worker batch, `harken rescore` or a reference build fills the signals;
backgrounds come with recordings analysed from now on.

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-03
"""

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "backgrounds",
        sa.Column("actuation_id", sa.Integer, sa.ForeignKey("actuations.id"), primary_key=True),
        sa.Column("start_s", sa.Float),
        sa.Column("duration_s", sa.Float),
        sa.Column("level_dbfs", sa.Float),
        sa.Column("n_bands", sa.Integer, nullable=False),
        sa.Column("levels_f32", sa.LargeBinary, nullable=False),
        sa.Column("band_centres_f64", sa.LargeBinary, nullable=False),
    )
    op.create_table(
        "signals",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("profile", sa.Text, nullable=False),
        sa.Column("key", sa.Text, nullable=False),
        sa.Column("level", sa.String(16), nullable=False),
        sa.Column("event", sa.Text),
        sa.Column("statistic", sa.String(64), nullable=False),
        sa.Column("value", sa.Float),
        sa.Column("limit_value", sa.Float),
        sa.Column("rule", sa.Text),
        sa.Column("site", sa.Text),
        sa.Column("rig", sa.Text),
        sa.Column("lot", sa.Text),
        sa.Column("unit", sa.Text),
        sa.Column("actuation_id", sa.Integer, sa.ForeignKey("actuations.id")),
        sa.Column("cause", sa.String(16), nullable=False),
        sa.Column("evidence", sa.Text, nullable=False),
        sa.Column("evidence_json", sa.Text, nullable=False),
        sa.Column("model_version", sa.Integer),
        sa.Column("first", sa.DateTime),
        sa.Column("last", sa.DateTime),
        sa.Column("first_seen", sa.DateTime, nullable=False),
        sa.Column("last_seen", sa.DateTime, nullable=False),
        sa.Column("active", sa.Boolean, nullable=False),
        sa.UniqueConstraint("profile", "key", name="uq_signals_key"),
    )
    op.create_index("ix_signals_active", "signals", ["active", "level", "profile"])
    op.create_index("ix_signals_actuation", "signals", ["actuation_id"])


def downgrade() -> None:
    op.drop_index("ix_signals_actuation", table_name="signals")
    op.drop_index("ix_signals_active", table_name="signals")
    op.drop_table("signals")
    op.drop_table("backgrounds")
