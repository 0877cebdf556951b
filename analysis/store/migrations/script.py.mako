"""${message}

Keep it frozen: spell out tables and columns here (sa.Column, op.add_column, op.batch_alter_table) instead of
importing analysis.store.schema, so later edits of schema.py do not change what this revision did. On SQLite,
ALTER-like changes go through `with op.batch_alter_table(...)`, and some of them recreate the table (copy, drop,
rename): that drops audit_log's append-only triggers (create them again here). Store.open runs the upgrade with
SQLite's foreign keys off and checks them all once at the end (PRAGMA foreign_key_check), so a table that others
point at can be recreated. Adding columns, tables and indexes recreates nothing.

Revision ID: ${up_revision}
Revises: ${down_revision | comma,n}
Create Date: ${create_date}
"""

import sqlalchemy as sa
from alembic import op
${imports if imports else ""}
revision = ${repr(up_revision)}
down_revision = ${repr(down_revision)}
branch_labels = ${repr(branch_labels)}
depends_on = ${repr(depends_on)}


def upgrade() -> None:
    ${upgrades if upgrades else "pass"}


def downgrade() -> None:
    ${downgrades if downgrades else "pass"}
