"""Per-day summaries kept by the worker (analysis.store.summaries): stat_summaries (count, sum, sum of squares and
range of each per-actuation statistic per cell, event and model), cell_counts (actuations, quality-check failures,
flagged) and cloud_sample (a fixed-size stratified sample of actuations per lot and rig).

The upgrade fills them from the rows already stored, so an existing store's views read the same numbers as
before; on a large store that takes a while (about a minute per million actuations).

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-03
"""

import sqlalchemy as sa
from alembic import op

revision = "0006"
down_revision = "0005"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "stat_summaries",
        sa.Column("event", sa.Text, primary_key=True),
        sa.Column("statistic", sa.String(32), primary_key=True),
        sa.Column("model_id", sa.Integer, primary_key=True),
        sa.Column("profile", sa.Text, primary_key=True),
        sa.Column("lot_id", sa.Integer, primary_key=True),
        sa.Column("rig_id", sa.Integer, primary_key=True),
        sa.Column("unit_id", sa.Integer, primary_key=True),
        sa.Column("day", sa.Date, primary_key=True),
        sa.Column("n", sa.Integer, nullable=False),
        sa.Column("s1", sa.Float, nullable=False),
        sa.Column("s2", sa.Float, nullable=False),
        sa.Column("lo", sa.Float),
        sa.Column("hi", sa.Float),
    )
    op.create_table(
        "cell_counts",
        sa.Column("profile", sa.Text, primary_key=True),
        sa.Column("lot_id", sa.Integer, primary_key=True),
        sa.Column("rig_id", sa.Integer, primary_key=True),
        sa.Column("unit_id", sa.Integer, primary_key=True),
        sa.Column("day", sa.Date, primary_key=True),
        sa.Column("site_id", sa.Integer, nullable=False),
        sa.Column("n_all", sa.Integer, nullable=False),
        sa.Column("n_qc_failed", sa.Integer, nullable=False),
        sa.Column("n_flagged", sa.Integer, nullable=False),
        sa.Column("n_model_flagged", sa.Integer, nullable=False),
        sa.Column("first", sa.DateTime, nullable=False),
        sa.Column("last", sa.DateTime, nullable=False),
    )
    op.create_index("ix_cell_counts_lot", "cell_counts", ["lot_id", "rig_id"])
    op.create_table(
        "cloud_sample",
        sa.Column("actuation_id", sa.Integer, sa.ForeignKey("actuations.id"), primary_key=True),
        sa.Column("profile", sa.Text, nullable=False),
        sa.Column("lot_id", sa.Integer, nullable=False),
        sa.Column("rig_id", sa.Integer, nullable=False),
        sa.Column("rank", sa.Integer, nullable=False),
    )
    op.create_index("ix_cloud_sample_rank", "cloud_sample", ["profile", "rank"])
    op.create_index("ix_cloud_sample_stratum", "cloud_sample", ["lot_id", "rig_id"])
    # Fill them from the stored rows (the functions the worker uses, on the schema of this revision).
    from analysis.store.summaries import rebuild

    rebuild(op.get_bind())


def downgrade() -> None:
    op.drop_index("ix_cloud_sample_stratum", table_name="cloud_sample")
    op.drop_index("ix_cloud_sample_rank", table_name="cloud_sample")
    op.drop_table("cloud_sample")
    op.drop_index("ix_cell_counts_lot", table_name="cell_counts")
    op.drop_table("cell_counts")
    op.drop_table("stat_summaries")
