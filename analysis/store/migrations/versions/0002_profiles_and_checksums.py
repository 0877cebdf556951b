"""Which device profile each analysis and each model used, and checksums of models, QC result sets and flag sets.

New columns: actuations.profile_version, profile_sha256, qc_sha256; reference_models.profile_version,
profile_sha256, content_sha256; trajectories.flags_sha256. The profile of analyses made before this revision is
not known (NULL). The checksums of existing rows are computed here, with a frozen copy of the recipe of
analysis/store/integrity.py as it was when this revision was written (a later change of that recipe needs a
revision of its own that recomputes them).

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02
"""

import hashlib
import json
from datetime import datetime

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None

_MODEL_FIELDS = ("profile", "event", "version", "reference_lots", "parameters", "n_recordings", "n_components",
                 "t2_limit", "spe_limit", "created_by", "created_at", "model_json", "model_npz", "profile_version",
                 "profile_sha256")
_TRAJECTORY_FIELDS = ("actuation_id", "event", "model_id", "n_slices", "n_components", "scores_f32", "t2_f32",
                      "spe_f32", "t2_max", "spe_max", "t2_ratio", "spe_ratio", "trajectory_distance",
                      "event_spe_ratio", "slices_outside", "flagged")
_FLAG_FIELDS = ("statistic", "value", "limit_value", "reason")


def _plain(v):
    if isinstance(v, (bytes, bytearray, memoryview)):
        return "sha256:" + hashlib.sha256(bytes(v)).hexdigest()
    if isinstance(v, datetime):
        return v.isoformat()
    if isinstance(v, bool) or v is None or isinstance(v, str):
        return v
    if isinstance(v, int):
        return int(v)
    if isinstance(v, float):
        return float(v)
    raise TypeError(f"no canonical form for {type(v).__name__}")


def _digest(obj) -> str:
    def walk(o):
        if isinstance(o, dict):
            return {str(k): walk(v) for k, v in o.items()}
        if isinstance(o, (list, tuple)):
            return [walk(v) for v in o]
        return _plain(o)

    text = json.dumps(walk(obj), sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False)
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def _bool(v):
    return None if v is None else bool(v)


def _flags(rows):
    return sorted(([r[k] for k in _FLAG_FIELDS] for r in rows), key=lambda r: (r[0], r[3] or ""))


def upgrade() -> None:
    with op.batch_alter_table("actuations") as batch_op:
        batch_op.add_column(sa.Column("profile_version", sa.Integer(), nullable=True))
        batch_op.add_column(sa.Column("profile_sha256", sa.String(64), nullable=True))
        batch_op.add_column(sa.Column("qc_sha256", sa.String(64), nullable=True))
    with op.batch_alter_table("reference_models") as batch_op:
        batch_op.add_column(sa.Column("profile_version", sa.Integer(), nullable=True))
        batch_op.add_column(sa.Column("profile_sha256", sa.String(64), nullable=True))
        batch_op.add_column(sa.Column("content_sha256", sa.String(64), nullable=True))
    with op.batch_alter_table("trajectories") as batch_op:
        batch_op.add_column(sa.Column("flags_sha256", sa.String(64), nullable=True))
    _fill_checksums(op.get_bind())


def _fill_checksums(conn) -> None:
    meta = sa.MetaData()
    models = sa.Table("reference_models", meta, autoload_with=conn)
    acts = sa.Table("actuations", meta, autoload_with=conn)
    qc = sa.Table("qc_results", meta, autoload_with=conn)
    flags = sa.Table("flags", meta, autoload_with=conn)
    trajs = sa.Table("trajectories", meta, autoload_with=conn)
    _set(conn, models, "content_sha256", [(r["id"], _digest({k: r[k] for k in _MODEL_FIELDS}))
                                          for r in conn.execute(sa.select(models)).mappings().all()])
    qc_by, qf_by, fl_by = {}, {}, {}
    for r in conn.execute(sa.select(qc)).mappings():
        qc_by.setdefault(r["recording_id"], []).append(r)
    for r in conn.execute(sa.select(flags)).mappings():
        if r["model_id"] is None:
            qf_by.setdefault(r["actuation_id"], []).append(r)
        else:
            fl_by.setdefault((r["actuation_id"], r["event"], r["model_id"]), []).append(r)
    values = []
    for r in conn.execute(sa.select(acts.c.id, acts.c.recording_id, acts.c.passed_qc)).all():
        rows = sorted(([q["check_name"], q["value"], q["limit_value"], _bool(q["passed"]), q["detail"]]
                       for q in qc_by.get(r.recording_id, [])), key=lambda x: x[0])
        values.append((r.id, _digest({"recording_id": int(r.recording_id), "passed_qc": bool(r.passed_qc),
                                      "qc": rows, "flags": _flags(qf_by.get(r.id, []))})))
    _set(conn, acts, "qc_sha256", values)
    values = []
    for r in conn.execute(sa.select(trajs)).mappings().all():
        traj = {k: (_bool(r[k]) if k == "flagged" else r[k]) for k in _TRAJECTORY_FIELDS}
        values.append((r["id"], _digest({"trajectory": traj, "flags": _flags(
            fl_by.get((r["actuation_id"], r["event"], r["model_id"]), []))})))
    _set(conn, trajs, "flags_sha256", values)


def _set(conn, table, column: str, values) -> None:
    """UPDATE table SET column = value WHERE id = id, for every (id, value), in one executemany."""
    if values:
        conn.execute(table.update().where(table.c.id == sa.bindparam("b_id")).values({column: sa.bindparam("b_v")}),
                     [{"b_id": i, "b_v": v} for i, v in values])


def downgrade() -> None:
    with op.batch_alter_table("trajectories") as batch_op:
        batch_op.drop_column("flags_sha256")
    with op.batch_alter_table("reference_models") as batch_op:
        for name in ("content_sha256", "profile_sha256", "profile_version"):
            batch_op.drop_column(name)
    with op.batch_alter_table("actuations") as batch_op:
        for name in ("qc_sha256", "profile_sha256", "profile_version"):
            batch_op.drop_column(name)
