"""The audit trail as a hash chain: every row carries the SHA-256 of its own content and of the row before it.

``append`` writes one row inside the caller's write transaction (the change it records commits or rolls back with
it): under a lock (SQLite: the write transaction's own, BEGIN IMMEDIATE; PostgreSQL: a transaction-scoped
advisory lock) it reads the head, numbers the row head + 1, and hashes (id, at, person, action, target, detail,
prev_sha256) in canonical JSON (analysis.store.integrity.digest). The head (id and hash) is kept in store_info
under ``audit_head`` in the same transaction, and `harken audit head` prints it so that it can be recorded
outside the store.

``verify`` walks the chain: a row whose content was altered no longer matches its hash; a row deleted from the
middle leaves the next row's prev_sha256 pointing at nothing that is there; a truncated tail ends before the head
recorded in store_info, or before a head recorded elsewhere and given to it. The database triggers keep the code
from updating or deleting rows; the chain shows it when someone with the file did so anyway.
"""

from __future__ import annotations

import csv
import json
import zlib
from pathlib import Path

from sqlalchemy import select, text

from . import schema as db
from .codec import text as stored_text
from .integrity import digest

__all__ = ["append", "verify", "head", "export_csv", "row_digest", "GENESIS", "HEAD_KEY"]

#: prev_sha256 of the first row.
GENESIS = "0" * 64
HEAD_KEY = "audit_head"
_FIELDS = ("id", "at", "person", "action", "target", "detail", "prev_sha256")
_LOCK = zlib.crc32(b"harken.audit") - 2**31


def row_digest(row) -> str:
    """SHA-256 of an audit row's content (a mapping with id, at, person, action, target, detail, prev_sha256)."""
    return digest({k: row[k] for k in _FIELDS})


def _lock(conn) -> None:
    if conn.dialect.name == "postgresql":
        conn.execute(text("SELECT pg_advisory_xact_lock(:k)"), {"k": _LOCK})


def append(conn, *, person: str, action: str, target: str = "", detail: dict | None = None) -> tuple[int, str]:
    """Append one audit row (inside the caller's write transaction); returns (id, its SHA-256)."""
    _lock(conn)
    a = db.audit_log
    last = conn.execute(select(a.c.id, a.c.row_sha256).order_by(a.c.id.desc()).limit(1)).first()
    row = dict(id=(last.id if last else 0) + 1, at=db.utc_now(), person=stored_text(person), action=action,
               target=stored_text(target), detail=stored_text(json.dumps(detail or {}, ensure_ascii=False,
                                                                         default=str)),
               prev_sha256=(last.row_sha256 if last and last.row_sha256 else GENESIS))
    row["row_sha256"] = row_digest(row)
    conn.execute(a.insert().values(**row))
    db.put_info(conn, HEAD_KEY, f"{row['id']}:{row['row_sha256']}")
    return row["id"], row["row_sha256"]


def head(conn) -> tuple[int, str] | None:
    """The head recorded in store_info: (id, SHA-256), or None for an empty trail."""
    v = conn.execute(select(db.store_info.c.value).where(db.store_info.c.key == HEAD_KEY)).scalar()
    if not v or ":" not in v:
        return None
    i, sha = v.split(":", 1)
    return int(i), sha


def parse_head(value: str) -> tuple[int, str]:
    """'ID:SHA256' (as `harken audit head` prints it) -> (id, sha); ValueError when it is not that."""
    i, sep, sha = str(value).strip().partition(":")
    if not sep or not i.isdigit() or len(sha) != 64 or any(c not in "0123456789abcdef" for c in sha):
        raise ValueError(f"a head is ID:SHA256 as `harken audit head` prints it; got {value!r}")
    return int(i), sha


def verify(conn, *, expected_head: tuple[int, str] | None = None, chunk: int = 5000) -> tuple[int, str | None]:
    """(rows checked, the first problem in words or None) of the whole chain, read in id order in chunks."""
    a = db.audit_log
    prev_sha, prev_id, n, seen = GENESIS, 0, 0, {}
    wanted = {h[0]: h[1] for h in (head(conn), expected_head) if h is not None}
    while True:
        rows = conn.execute(select(a).where(a.c.id > prev_id).order_by(a.c.id).limit(chunk)).mappings().all()
        if not rows:
            break
        for r in rows:
            n += 1
            if r["row_sha256"] is None:
                return n, f"audit row {r['id']} has no hash (written around the chain)"
            if row_digest(r) != r["row_sha256"]:
                return n, (f"audit row {r['id']} ({r['action']} by {r['person']}) does not match its hash: it was "
                           "altered")
            if r["prev_sha256"] != prev_sha:
                what = "the first row" if prev_id == 0 else f"row {prev_id}"
                return n, (f"audit row {r['id']} does not follow {what}: a row before it was deleted or altered "
                           "(its prev_sha256 points at a row that is not there)")
            if r["id"] in wanted:
                seen[r["id"]] = r["row_sha256"]
            prev_sha, prev_id = r["row_sha256"], r["id"]
    for i, sha in sorted(wanted.items()):
        if i not in seen:
            return n, (f"the audit trail ends at row {prev_id} but its head was recorded at row {i}: rows after "
                       f"{prev_id} were removed" if i > prev_id else f"audit row {i} of the recorded head is missing")
        if seen[i] != sha:
            return n, f"audit row {i} differs from the recorded head {i}:{sha[:12]}...: the chain was rewritten"
    return n, None


def export_csv(conn, path: str | Path) -> int:
    """Write the audit trail to CSV (every column, id order); returns the number of rows."""
    a = db.audit_log
    cols = ["id", "at", "person", "action", "target", "detail", "prev_sha256", "row_sha256"]
    n = 0
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(cols)
        for r in conn.execute(select(*(a.c[c] for c in cols)).order_by(a.c.id)):
            w.writerow([v.isoformat() if hasattr(v, "isoformat") else v for v in r])
            n += 1
    return n
