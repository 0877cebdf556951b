"""The resonance block and the residual's signature: each event's resonance features (events.resonances_f64), the
block's T² per scored event (trajectories.resonance_t2) and its whitened components (resonance_components), from
which a unit's mean gives the unit-level T²; and each scored event's slice-mean residual per band
(trajectories.residual_f32), the signature that triage compares across the cells of a lot.

Existing rows keep NULL: events analysed before the upgrade have no resonance features, so a model with a
resonance block is built from (and scores) recordings analysed from now on, or re-analysed; scores written before
it have no signature, and triage then decides without comparing signatures.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-03
"""

import sqlalchemy as sa
from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("events") as batch:
        batch.add_column(sa.Column("resonances_f64", sa.LargeBinary))
    with op.batch_alter_table("trajectories") as batch:
        batch.add_column(sa.Column("resonance_t2", sa.Float))
        batch.add_column(sa.Column("residual_f32", sa.LargeBinary))
    op.create_table(
        "resonance_components",
        sa.Column("actuation_id", sa.Integer, sa.ForeignKey("actuations.id"), primary_key=True),
        sa.Column("model_id", sa.Integer, sa.ForeignKey("reference_models.id"), primary_key=True),
        sa.Column("k", sa.Integer, primary_key=True),
        sa.Column("value", sa.Float, nullable=False),
    )
    op.create_index("ix_resonance_components_model", "resonance_components", ["model_id", "actuation_id"])


def downgrade() -> None:
    op.drop_index("ix_resonance_components_model", table_name="resonance_components")
    op.drop_table("resonance_components")
    with op.batch_alter_table("trajectories") as batch:
        batch.drop_column("residual_f32")
        batch.drop_column("resonance_t2")
    with op.batch_alter_table("events") as batch:
        batch.drop_column("resonances_f64")
