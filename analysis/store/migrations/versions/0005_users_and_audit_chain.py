"""People and roles (users), signed approvals of reference models (approvals), the audit trail as a hash chain
(audit_log.prev_sha256, row_sha256), and verdicts on
signals (verdicts.signal_id; flag_id becomes optional: a review is of a signal, which names its flag's actuation).

The existing audit rows are chained here in id order, with a frozen copy of the recipe of analysis/store/audit.py
as it was when this revision was written; the head goes to store_info (audit_head). The append-only triggers are
dropped for the fill and made again.

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-03
"""

import hashlib
import json
from datetime import datetime

import sqlalchemy as sa
from alembic import op

revision = "0005"
down_revision = "0004"
branch_labels = None
depends_on = None

GENESIS = "0" * 64
_FIELDS = ("id", "at", "person", "action", "target", "detail", "prev_sha256")

APPEND_ONLY_DDL = {
    "sqlite": [
        "CREATE TRIGGER audit_log_no_update BEFORE UPDATE ON audit_log "
        "BEGIN SELECT RAISE(ABORT, 'the audit log is append-only'); END",
        "CREATE TRIGGER audit_log_no_delete BEFORE DELETE ON audit_log "
        "BEGIN SELECT RAISE(ABORT, 'the audit log is append-only'); END",
    ],
    "postgresql": [
        "CREATE TRIGGER audit_log_append_only BEFORE UPDATE OR DELETE ON audit_log "
        "FOR EACH ROW EXECUTE FUNCTION harken_audit_log_append_only()",
    ],
}
DROP_TRIGGERS = {
    "sqlite": ["DROP TRIGGER IF EXISTS audit_log_no_update", "DROP TRIGGER IF EXISTS audit_log_no_delete"],
    "postgresql": ["DROP TRIGGER IF EXISTS audit_log_append_only ON audit_log"],
}


def _plain(v):
    if isinstance(v, datetime):
        return v.isoformat()
    return v


def _digest(row) -> str:
    text = json.dumps({k: _plain(row[k]) for k in _FIELDS}, sort_keys=True, separators=(",", ":"),
                      ensure_ascii=True, allow_nan=False)
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def upgrade() -> None:
    op.create_table(
        "users",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("user_name", sa.Text, nullable=False),
        sa.Column("full_name", sa.Text, nullable=False),
        sa.Column("role", sa.String(16), nullable=False),
        sa.Column("state", sa.String(16), nullable=False),
        sa.Column("password_hash", sa.Text),
        sa.Column("created_at", sa.DateTime, nullable=False),
        sa.Column("created_by", sa.Text, nullable=False),
        sa.UniqueConstraint("user_name", name="uq_users_name"),
    )
    op.create_table(
        "approvals",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("model_id", sa.Integer, sa.ForeignKey("reference_models.id"), nullable=False),
        sa.Column("person", sa.Text, nullable=False),
        sa.Column("at", sa.DateTime, nullable=False),
        sa.Column("meaning", sa.Text, nullable=False),
        sa.Column("reason", sa.Text, nullable=False),
    )
    op.create_index("ix_approvals_model", "approvals", ["model_id"])
    with op.batch_alter_table("verdicts") as batch:
        batch.alter_column("flag_id", existing_type=sa.Integer, nullable=True)
        batch.add_column(sa.Column("signal_id", sa.Integer, sa.ForeignKey("signals.id", name="fk_verdicts_signal")))
    op.create_index("ix_verdicts_signal", "verdicts", ["signal_id"])
    dialect = op.get_context().dialect.name
    for ddl in DROP_TRIGGERS.get(dialect, []):
        op.execute(ddl)
    with op.batch_alter_table("audit_log") as batch:
        batch.add_column(sa.Column("prev_sha256", sa.String(64)))
        batch.add_column(sa.Column("row_sha256", sa.String(64)))
    conn = op.get_bind()
    a = sa.table("audit_log", sa.column("id", sa.Integer), sa.column("at", sa.DateTime),
                 sa.column("person", sa.Text), sa.column("action", sa.String), sa.column("target", sa.Text),
                 sa.column("detail", sa.Text), sa.column("prev_sha256", sa.String), sa.column("row_sha256", sa.String))
    prev, last = GENESIS, None
    rows = conn.execute(sa.select(a.c.id, a.c.at, a.c.person, a.c.action, a.c.target, a.c.detail)
                        .order_by(a.c.id)).mappings().all()
    for r in rows:
        row = dict(r, prev_sha256=prev)
        sha = _digest(row)
        conn.execute(a.update().where(a.c.id == r["id"]).values(prev_sha256=prev, row_sha256=sha))
        prev, last = sha, r["id"]
    if last is not None:
        info = sa.table("store_info", sa.column("key", sa.String), sa.column("value", sa.Text))
        conn.execute(info.delete().where(info.c.key == "audit_head"))
        conn.execute(info.insert().values(key="audit_head", value=f"{last}:{prev}"))
    for ddl in APPEND_ONLY_DDL.get(dialect, []):
        op.execute(ddl)


def downgrade() -> None:
    dialect = op.get_context().dialect.name
    for ddl in DROP_TRIGGERS.get(dialect, []):
        op.execute(ddl)
    with op.batch_alter_table("audit_log") as batch:
        batch.drop_column("row_sha256")
        batch.drop_column("prev_sha256")
    for ddl in APPEND_ONLY_DDL.get(dialect, []):
        op.execute(ddl)
    op.execute("DELETE FROM store_info WHERE key = 'audit_head'")
    op.drop_index("ix_verdicts_signal", table_name="verdicts")
    op.execute("DELETE FROM verdicts WHERE flag_id IS NULL")
    with op.batch_alter_table("verdicts") as batch:
        batch.drop_column("signal_id")
        batch.alter_column("flag_id", existing_type=sa.Integer, nullable=False)
    op.drop_index("ix_approvals_model", table_name="approvals")
    op.drop_table("approvals")
    op.drop_table("users")
