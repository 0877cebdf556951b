"""Checksums of what the store keeps, written with it and recomputed on demand (``harken check integrity``).

Three kinds of row carry the SHA-256 of their content, computed when they are written:
- ``reference_models.content_sha256``: a model version (its documents, limits, lots, who made it and when, the
  profile it was fitted with); its status is left out, since activating a version is a change of its own (audited);
- ``actuations.qc_sha256``: the recording's quality-check results and the flags they raised (its "QC result set");
- ``trajectories.flags_sha256``: one event's statistics under one model version and the flags they raised (a
  "flag set").
A row changed afterwards in the database (by hand, by a tool, by a fault) no longer matches its checksum.

The content is written as canonical JSON (sorted keys, no spaces, floats in their shortest exact form, blobs by
their own SHA-256), so the same values give the same checksum on SQLite and PostgreSQL. Revision 0002 filled the
checksums of rows made before it with the same recipe (a frozen copy of it lives in that revision).
"""

from __future__ import annotations

import hashlib
import json
from datetime import datetime

from sqlalchemy import select

from . import schema as db

__all__ = ["digest", "model_digest", "qc_digest", "flags_digest", "verify_checksums", "MODEL_FIELDS",
           "TRAJECTORY_FIELDS"]

#: The reference_models columns a model's checksum covers (all but id, status and the checksum itself).
MODEL_FIELDS = ("profile", "event", "version", "reference_lots", "parameters", "n_recordings", "n_components",
                "t2_limit", "spe_limit", "created_by", "created_at", "model_json", "model_npz", "profile_version",
                "profile_sha256")
#: The trajectories columns a flag set's checksum covers besides its flags.
TRAJECTORY_FIELDS = ("actuation_id", "event", "model_id", "n_slices", "n_components", "scores_f32", "t2_f32",
                     "spe_f32", "t2_max", "spe_max", "t2_ratio", "spe_ratio", "trajectory_distance",
                     "event_spe_ratio", "slices_outside", "flagged")
_QC_FIELDS = ("check_name", "value", "limit_value", "passed", "detail")
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


def digest(obj) -> str:
    """SHA-256 (hex) of a JSON-like value in canonical form."""
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


def model_digest(row) -> str:
    """Checksum of a reference_models row (a mapping with the MODEL_FIELDS)."""
    return digest({k: row[k] for k in MODEL_FIELDS})


def qc_digest(recording_id: int, passed_qc: bool, qc_rows, qc_flag_rows) -> str:
    """Checksum of a recording's QC result set: its qc_results rows and the flags they raised (mappings)."""
    qc = sorted(([r["check_name"], r["value"], r["limit_value"], _bool(r["passed"]), r["detail"]] for r in qc_rows),
                key=lambda r: r[0])
    fl = sorted(([r[k] for k in _FLAG_FIELDS] for r in qc_flag_rows), key=lambda r: (r[0], r[3] or ""))
    return digest({"recording_id": int(recording_id), "passed_qc": bool(passed_qc), "qc": qc, "flags": fl})


def flags_digest(trajectory_row, flag_rows) -> str:
    """Checksum of a flag set: a trajectories row (mapping with TRAJECTORY_FIELDS) and the flags it raised."""
    traj = {k: (_bool(trajectory_row[k]) if k == "flagged" else trajectory_row[k]) for k in TRAJECTORY_FIELDS}
    fl = sorted(([r[k] for k in _FLAG_FIELDS] for r in flag_rows), key=lambda r: (r[0], r[3] or ""))
    return digest({"trajectory": traj, "flags": fl})


def verify_checksums(conn, *, chunk: int = 2000) -> list[str]:
    """Every row whose content no longer matches its checksum (or that has none), in words; empty when all
    match. Reads in chunks: memory stays flat on a large store."""
    problems: list[str] = []
    m = db.reference_models
    for r in conn.execute(select(m)).mappings():
        if r["content_sha256"] != model_digest(r):
            problems.append(_differs(f"reference model {r['id']} ({r['profile']}/{r['event']} version {r['version']})",
                                     r["content_sha256"]))
    a, q, f, t = db.actuations, db.qc_results, db.flags, db.trajectories
    last = 0
    while True:
        acts = conn.execute(select(a.c.id, a.c.recording_id, a.c.passed_qc, a.c.qc_sha256)
                            .where(a.c.id > last).order_by(a.c.id).limit(chunk)).all()
        if not acts:
            break
        lo, hi = acts[0].id, acts[-1].id
        qc_by: dict = {}
        for r in conn.execute(select(q, a.c.id.label("actuation_id")).select_from(
                q.join(a, a.c.recording_id == q.c.recording_id)).where(a.c.id.between(lo, hi))).mappings():
            qc_by.setdefault(r["actuation_id"], []).append(r)
        qf_by: dict = {}
        for r in conn.execute(select(f).where(f.c.actuation_id.between(lo, hi), f.c.model_id.is_(None))).mappings():
            qf_by.setdefault(r["actuation_id"], []).append(r)
        for r in acts:
            want = qc_digest(r.recording_id, r.passed_qc, qc_by.get(r.id, []), qf_by.get(r.id, []))
            if r.qc_sha256 != want:
                problems.append(_differs(f"actuation {r.id}: quality-check results and their flags", r.qc_sha256))
        fl_by: dict = {}
        for r in conn.execute(select(f).where(f.c.actuation_id.between(lo, hi), f.c.model_id.is_not(None))).mappings():
            fl_by.setdefault((r["actuation_id"], r["event"], r["model_id"]), []).append(r)
        for r in conn.execute(select(t).where(t.c.actuation_id.between(lo, hi))).mappings():
            key = (r["actuation_id"], r["event"], r["model_id"])
            if r["flags_sha256"] != flags_digest(r, fl_by.pop(key, [])):
                problems.append(_differs(f"actuation {key[0]}, event {key[1]!r} under model {key[2]}: statistics "
                                         "and their flags", r["flags_sha256"]))
        for (aid, event, model_id), rows in sorted(fl_by.items()):
            problems.append(f"actuation {aid}, event {event!r} under model {model_id}: {len(rows)} flag(s) with "
                            "no statistics row (added outside Harken?)")
        last = hi
    return problems


def _differs(what: str, stored) -> str:
    if stored is None:
        return f"{what}: no checksum (the row was written or changed outside Harken)"
    return f"{what}: content differs from its checksum (changed after it was written)"
