"""``Store``: the results store opened from a URL (SQLite file by default, PostgreSQL for a lab-wide install).

No module-level engine: every ``Store`` owns its engine; close it (or use it as a context manager) when done.
SQLite runs in WAL mode with a busy timeout so the dashboard reads while a worker writes; write transactions
start with BEGIN IMMEDIATE so two writers queue for the lock instead of failing on a read-to-write upgrade.
"""

from __future__ import annotations

import contextlib
import time
from pathlib import Path

from sqlalchemy import create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.exc import ArgumentError, DBAPIError, NoSuchModuleError
from sqlalchemy.pool import StaticPool

from . import queries, summaries, writes
from .errors import StoreError
from .migrate import upgrade as upgrade_schema
from .signals import refresh_signals
from .types import Claim

__all__ = ["Store", "DEFAULT_STORE_FILE", "default_store_url", "safe_url"]

DEFAULT_STORE_FILE = "harken.db"
#: SQLite waits this long for a lock before giving up (the dashboard's reads never need the write lock).
SQLITE_BUSY_TIMEOUT_S = 30.0
#: PostgreSQL advisory lock key held while the schema is checked or created (any fixed 64-bit number).
_SCHEMA_LOCK_KEY = 0x4861726B656E  # "Harken"


def default_store_url(folder: str | Path = ".") -> str:
    """The embedded default: ``harken.db`` in ``folder`` (the working folder unless told otherwise)."""
    return f"sqlite:///{(Path(folder) / DEFAULT_STORE_FILE).resolve()}"


def _normalise(url) -> str:
    """A bare file path means a SQLite file."""
    text = str(url)
    return text if "://" in text else f"sqlite:///{Path(text).resolve()}"


def safe_url(url) -> str:
    """The URL as it may be printed: the password replaced by ***."""
    try:
        return make_url(_normalise(url)).render_as_string(hide_password=True)
    except ArgumentError:
        return "<unparsable store URL>"


class Store:
    """The results store. Open with ``Store.open(url)``; methods return DataFrames or dataclasses."""

    def __init__(self, engine, *, url: str, files_dir: Path, stem: str = "harken"):
        self.engine = engine
        self.stem = stem  # archive and quarantine folders are <stem>-archive, <stem>-quarantine
        self.url = url  # without password
        self.files_dir = Path(files_dir)
        self._ids: dict = {}  # (table, key) -> id of sites/rigs/lots/units already in the store

    # ------------------------------------------------------------------ opening
    @classmethod
    def open(cls, url=None, *, files_dir: str | Path | None = None, create: bool = True,
             migrations: str | Path | None = None) -> Store:
        """Open (and, if empty and ``create``, initialise) the store at ``url``, upgrading an older schema.

        ``url``: a SQLAlchemy URL (``sqlite:///path.db``, ``postgresql+psycopg://user@host/db``) or a file path;
        None means ``harken.db`` in the working folder. ``files_dir``: where the archive and quarantine folders
        live (default: beside a SQLite file, else the working folder). ``migrations``: another folder of schema
        revisions (tests and tools; default: this Harken's own). Raises StoreError naming the URL.
        """
        text = _normalise(url if url is not None else default_store_url())
        where = safe_url(text)
        try:
            u = make_url(text)
        except ArgumentError as exc:
            raise StoreError(f"{where}: not a store URL ({exc})") from None
        backend = u.get_backend_name()
        if backend not in ("sqlite", "postgresql"):
            raise StoreError(f"{where}: unsupported database {backend!r}; use sqlite:///FILE or "
                             "postgresql+psycopg://USER@HOST/DB")
        db_file = None
        if backend == "sqlite":
            db_file = u.database if u.database not in (None, "", ":memory:") else None
            if db_file is not None:
                parent = Path(db_file).resolve().parent
                if not parent.is_dir():
                    raise StoreError(f"{where}: folder {parent} does not exist")
                if not create and not Path(db_file).exists():
                    raise StoreError(f"{where}: no store there (file {db_file} does not exist)")
        if files_dir is None:
            files_dir = Path(db_file).resolve().parent if db_file else Path.cwd()
        try:
            engine = _make_engine(u, memory=backend == "sqlite" and db_file is None)
        except NoSuchModuleError as exc:
            raise StoreError(f"{where}: database driver not installed ({exc})") from None
        except ModuleNotFoundError as exc:
            raise StoreError(f"{where}: database driver not installed ({exc.name}); for PostgreSQL install "
                             "harken[postgresql] (pip install 'harken[postgresql]')") from None
        store = cls(engine, url=where, files_dir=Path(files_dir), stem=Path(db_file).stem if db_file else "harken")
        try:
            with engine.connect().execution_options(harken_write=True) as conn:
                with _foreign_keys_checked_at_the_end(conn, where=where):
                    if backend == "postgresql":
                        # Two workers opening a new store at once: one creates the tables, the other waits here.
                        conn.exec_driver_sql(f"SELECT pg_advisory_xact_lock({_SCHEMA_LOCK_KEY})")
                    # Creates, stamps or upgrades the schema in this transaction, or refuses the database.
                    upgrade_schema(conn, where=where, create=create, harken_version=_harken_version(),
                                   script_location=migrations)
        except StoreError:
            engine.dispose()
            raise
        except DBAPIError as exc:
            engine.dispose()
            raise StoreError(f"{where}: cannot open the store: {_reason(exc)}") from None
        return store

    @property
    def dialect(self) -> str:
        return self.engine.dialect.name

    @property
    def archive_dir(self) -> Path:
        """Content-addressed originals of analysed recordings (the dashboard plays audio from here)."""
        return self.files_dir / f"{self.stem}-archive"

    @property
    def quarantine_dir(self) -> Path:
        """Recordings that could not be analysed, kept as delivered with a hash prefix."""
        return self.files_dir / f"{self.stem}-quarantine"

    def close(self) -> None:
        self.engine.dispose()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __repr__(self):
        return f"Store({self.url!r})"

    # ------------------------------------------------------------------ transactions
    @contextlib.contextmanager
    def read(self):
        """A connection inside one read transaction: every query in it sees the same committed state
        (SQLite: a WAL snapshot; PostgreSQL: REPEATABLE READ, as READ COMMITTED gives each statement its own)."""
        try:
            conn = self.engine.connect()
            if self.dialect == "postgresql":
                conn = conn.execution_options(isolation_level="REPEATABLE READ")
            with conn, conn.begin():
                yield conn
        except DBAPIError as exc:
            raise StoreError(f"{self.url}: read failed: {_reason(exc)}") from None

    @contextlib.contextmanager
    def write(self):
        """A connection inside one write transaction, committed on success, rolled back on any error."""
        try:
            with self.engine.connect().execution_options(harken_write=True) as conn, conn.begin():
                yield conn
        except (DBAPIError, OverflowError) as exc:  # OverflowError: an integer too large for SQLite
            self._ids.clear()  # ids cached during the failed transaction may not exist
            raise StoreError(f"{self.url}: write failed: {_reason(exc)}") from None
        except BaseException:
            self._ids.clear()
            raise

    # ------------------------------------------------------------------ writes (analysis.store.writes)
    def claim(self, content_hash: str, original_name: str, size_bytes: int, *, worker: str,
              claim_timeout_s: float) -> Claim:
        """Register a recording by its content hash and claim it for ``worker`` (see Claim)."""
        with self.write() as conn:
            return writes.claim(conn, content_hash, original_name, size_bytes, worker=worker,
                                claim_timeout_s=claim_timeout_s)

    def claim_many(self, entries, *, worker: str, claim_timeout_s: float, gone=None) -> list[Claim]:
        """``claim`` for each (content_hash, original_name, size_bytes) of ``entries``, in one transaction; ``gone``
        as writes.claim (a worker known to have stopped loses its claims at once)."""
        with self.write() as conn:
            return [writes.claim(conn, h, name, size, worker=worker, claim_timeout_s=claim_timeout_s, gone=gone)
                    for h, name, size in entries]

    def refresh_claims(self, *, worker: str) -> int:
        """Renew every live claim of ``worker`` (its heartbeat); returns how many."""
        with self.write() as conn:
            return writes.refresh_claims(conn, worker=worker)

    def commit_analyses(self, items, *, worker: str) -> list[int | None]:
        """Write analysed recordings (``writes.Analysed`` items) in one transaction, each whole; returns the
        actuation id per item, or None where the claim was lost to another worker (nothing of it written)."""
        with self.write() as conn:
            return writes.commit_analyses(conn, self._ids, list(items), worker=worker)

    def commit_quarantine(self, recording_id: int, *, worker: str, reason: str, quarantine_path: str,
                          sidecar_json: str | None = None) -> bool:
        """Mark a claimed recording as quarantined with its reason; False when the claim was lost."""
        with self.write() as conn:
            return writes.commit_quarantine(conn, recording_id, worker=worker, reason=reason,
                                            quarantine_path=quarantine_path, sidecar_json=sidecar_json)

    def reopen_quarantined(self, recording_id: int, *, worker: str, sidecar_text: str | None) -> bool:
        """Claim a quarantined recording again if it came back with another sidecar (audited)."""
        with self.write() as conn:
            return writes.reopen_quarantined(conn, recording_id, worker=worker, sidecar_text=sidecar_text)

    def release_claim(self, recording_id: int, *, worker: str) -> None:
        """Forget a claim whose file vanished before it was analysed (so a later delivery is new again)."""
        with self.write() as conn:
            writes.release_claim(conn, recording_id, worker=worker)

    def add_verdict(self, flag_id: int, *, person: str, verdict: str, note: str = "") -> int:
        """Record a person's verdict on a flag (audited); returns the verdict id."""
        with self.write() as conn:
            return writes.add_verdict(conn, flag_id, person=person, verdict=verdict, note=note, where=self.url)

    def approve_model(self, model_id: int, *, person: str, password: str, meaning: str, reason: str) -> int:
        """A signed approval: ``person`` re-enters their password; the pending version becomes active (audited)."""
        from .users import check_password

        with self.read() as conn:
            user = check_password(conn, person, password)
        if user is None:  # audited in a transaction of its own: the refusal must not roll back with anything
            self.audit(person=person, action="reference.approve_refused", target=f"model {model_id}",
                       detail={"why": "password not confirmed"})
            raise StoreError(f"the approval of model {model_id} needs {person}'s own password, re-entered; it did "
                             "not match (or the user is not active)")
        with self.write() as conn:
            return writes.approve_model(conn, model_id, user=user, meaning=meaning, reason=reason, where=self.url)

    def set_policy(self, key: str, value: str, *, person: str) -> None:
        with self.write() as conn:
            writes.set_policy(conn, key, value, person=person)

    def add_review(self, signal_id: int, *, person: str, verdict: str, comment: str = "") -> int:
        """Record a signed-in person's verdict on a signal (audited); returns the verdict id."""
        with self.write() as conn:
            return writes.add_review(conn, signal_id, person=person, verdict=verdict, comment=comment,
                                     where=self.url)

    def activate_model(self, model_id: int, *, person: str) -> None:
        """Make a stored model version the active one of its profile and event (audited)."""
        with self.write() as conn:
            writes.activate_model(conn, model_id, person=person, where=self.url)

    def audit(self, *, person: str, action: str, target: str = "", detail: dict | None = None) -> None:
        with self.write() as conn:
            writes.audit(conn, person=person, action=action, target=target, detail=detail)

    def insert_model(self, *, profile: str, event: str, model, meta: dict, created_by: str,
                     activate: bool = True) -> tuple[int, int]:
        """Store a fitted ReferenceModel as the next version of (profile, event), active unless told otherwise
        (audited); returns (model_id, version)."""
        from .codec import model_to_blobs

        text, blob = model_to_blobs(model, meta)
        with self.write() as conn:
            return writes.insert_model(conn, profile=profile, event=event, model_json=text, model_npz=blob,
                                       meta=meta, model=model, created_by=created_by, activate=activate)

    def insert_scores(self, model_id: int, event: str, items, *, refresh_profile: str | None = None) -> None:
        """Write scores of one event under one model: items [(actuation_id, ScoredEvent)], in one transaction
        (with the signals of ``refresh_profile`` brought up to date in it, when given)."""
        with self.write() as conn:
            items = list(items)
            writes.insert_scores(conn, model_id, event, items)
            summaries.refresh_for(conn, [actuation_id for actuation_id, _ in items])
            if refresh_profile is not None:
                refresh_signals(conn, refresh_profile)

    def refresh_signals(self, profile: str) -> dict:
        """Recompute and store every signal of ``profile`` (analysis.store.signals); returns counts."""
        with self.write() as conn:
            return refresh_signals(conn, profile)

    # ------------------------------------------------------------------ reads (analysis.store.queries)
    # The common reads, each in its own read transaction; ``with store.read() as conn`` and the functions of
    # analysis.store.queries give every other one, and several in one consistent snapshot.
    def schema_version(self) -> int:
        with self.read() as conn:
            return queries.schema_version(conn)

    def recordings(self, *, status: str | None = None):
        with self.read() as conn:
            return queries.recordings(conn, status=status)

    def quarantine(self):
        with self.read() as conn:
            return queries.quarantine(conn)

    def actuations(self, *, profile: str | None = None):
        with self.read() as conn:
            return queries.actuations(conn, profile=profile)

    def export_actuations(self):
        with self.read() as conn:
            return queries.export_actuations(conn)

    def signals(self, *, profile: str | None = None, active_only: bool = True, levels=None, reviews: bool = False):
        """Stored signals (analysis.store.queries.signals), with their latest review when ``reviews``."""
        with self.read() as conn:
            return queries.signals(conn, profile=profile, active_only=active_only, levels=levels, reviews=reviews)

    def flag_summary(self, *, by: tuple[str, ...] = ("rig", "lot")):
        with self.read() as conn:
            return queries.flag_summary(conn, by=tuple(by))

    def flags(self, *, actuation_ids=None, active_only: bool = True):
        with self.read() as conn:
            return queries.flags(conn, actuation_ids=actuation_ids, active_only=active_only)

    def models(self, *, profile: str | None = None, event: str | None = None, counts: bool = False):
        with self.read() as conn:
            return queries.models(conn, profile=profile, event=event, counts=counts)

    def load_model(self, model_id: int):
        with self.read() as conn:
            return queries.load_model(conn, model_id, where=self.url)

    def active_model_ids(self, profile: str) -> list[int]:
        """Ids of the profile's active models (a cheap check of whether they changed)."""
        from .queries._base import active_model_ids

        with self.read() as conn:
            return active_model_ids(conn, profile)

    def active_models(self, profile: str) -> dict:
        """{event: (model_id, ReferenceModel)} of the profile's active models."""
        with self.read() as conn:
            return queries.active_models(conn, profile, where=self.url)

    def band_levels(self, profile: str, event: str, *, lots=None, passed_qc_only: bool = True):
        with self.read() as conn:
            return queries.band_levels(conn, event, profile=profile, lots=lots, passed_qc_only=passed_qc_only)

    def lot_names(self, profile: str | None = None) -> list[str]:
        with self.read() as conn:
            return queries.lot_names(conn, profile)

    def unscored(self, profile: str, event: str, model_id: int, *, limit: int) -> list:
        with self.read() as conn:
            return queries.unscored(conn, profile, event, model_id, limit=limit)

    def trajectory(self, actuation_id: int, event: str, *, model_id: int | None = None):
        with self.read() as conn:
            return queries.trajectory(conn, actuation_id, event, model_id=model_id, where=self.url)

    def audit_log(self):
        with self.read() as conn:
            return queries.audit_log(conn)

    def check_integrity(self, *, checksums: bool = True, files: bool = True, contents: bool = False) -> list[str]:
        """Problems found, in words (empty when there are none): recordings that are not whole (every analysed
        one has one actuation, its QC rows and events; every quarantined one a reason), rows whose content no
        longer matches its checksum (``checksums``; analysis.store.integrity), and (``files``) archived or
        quarantined copies that are missing (a recording's or an archived sidecar's), files in the archive or
        quarantine folders that no recording points to, and temporary copies left behind; with ``contents``
        also every archived recording whose bytes no longer hash to its content hash (reads every file)."""
        with self.read() as conn:
            problems = queries.check_integrity(conn)
            if checksums:
                from .integrity import verify_checksums

                problems += verify_checksums(conn)
            kept = queries.kept_files(conn) if files or contents else None
        if files:
            problems += self._file_problems(kept)
        if contents:
            problems += self._content_problems(kept)
        return problems

    def _content_problems(self, kept: dict) -> list[str]:
        """Archived originals whose SHA-256 is no longer the content hash they are filed under."""
        import hashlib

        out = []
        for path, (recording_id, status, content_hash, _side) in sorted(kept.items()):
            p = Path(path)
            if status != "analysed" or not p.is_file():
                continue  # quarantined copies may be markers of refused links; a missing file is listed apart
            h = hashlib.sha256()
            with open(p, "rb") as f:
                for block in iter(lambda: f.read(1 << 20), b""):
                    h.update(block)
            if h.hexdigest() != content_hash:
                out.append(f"recording {recording_id} ({status}): its archived copy {self._shown(p)} has changed "
                           f"(SHA-256 {h.hexdigest()[:12]}…, filed as {content_hash[:12]}…)")
        return out

    def _shown(self, p: Path) -> str:
        try:
            return str(p.relative_to(self.files_dir))
        except ValueError:
            return str(p)

    def _file_problems(self, kept: dict) -> list[str]:
        """Compare the files under the archive and quarantine folders with what the store says it keeps."""
        out = []
        shown = self._shown
        wanted = {}
        for path, (recording_id, status, _hash, has_sidecar) in kept.items():
            p = Path(path)
            wanted[p] = (recording_id, status)
            if not p.is_file():
                out.append(f"recording {recording_id} ({status}): its kept copy {shown(p)} is missing")
            elif status == "analysed" and has_sidecar and not p.with_suffix(".json").is_file():
                out.append(f"recording {recording_id} ({status}): its archived sidecar {shown(p.with_suffix('.json'))} "
                           "is missing")
        # A kept recording's sidecar copy lies beside it: the archive's as <hash>.json, the quarantine's as
        # <hash prefix>-<stem>.json.
        stems = {p.with_suffix(".json") for p in wanted} | {
            p.with_name(p.name.split("-", 1)[0]) for p in wanted if p.parent == self.quarantine_dir}
        for folder in (self.archive_dir, self.quarantine_dir):
            if not folder.is_dir():
                continue
            for p in sorted(folder.rglob("*")):
                if p.is_dir():
                    continue
                if p.name.startswith(".") and p.name.endswith(".tmp"):
                    out.append(f"{shown(p)}: a temporary copy left by a stopped worker (the next worker removes it)")
                elif p in wanted:
                    continue
                elif p.suffix == ".json" and (p in stems or p.with_name(p.name.split("-", 1)[0]) in stems):
                    continue
                else:
                    out.append(f"{shown(p)}: no recording in the store points to this file (an orphan)")
        return out


@contextlib.contextmanager
def _foreign_keys_checked_at_the_end(conn, *, where: str):
    """The schema transaction on ``conn``. On SQLite foreign keys are off during it and checked once at its end
    (PRAGMA foreign_key_check): a revision in batch mode rebuilds a table by copy, drop and rename, which an
    immediate foreign-key check refuses for any table others point at. The PRAGMA takes effect only outside a
    transaction, so it is set on the driver's connection before BEGIN, and set back before the connection returns
    to the pool."""
    raw = conn.connection.driver_connection if conn.dialect.name == "sqlite" else None
    if raw is not None:
        raw.execute("PRAGMA foreign_keys=OFF")
    try:
        with conn.begin():
            yield
            if raw is not None:
                broken = conn.exec_driver_sql("PRAGMA foreign_key_check").fetchall()
                if broken:
                    table, rowid, parent, _ = broken[0]
                    raise StoreError(f"{where}: the schema upgrade left {len(broken)} row(s) pointing nowhere (e.g. "
                                     f"{table} row {rowid} -> {parent}); nothing was changed")
    finally:
        if raw is not None:
            raw.execute("PRAGMA foreign_keys=ON")


def _harken_version() -> str:
    try:
        from analysis import __version__

        return __version__
    except ImportError:  # pragma: no cover
        return ""


def _reason(exc) -> str:
    orig = getattr(exc, "orig", None)
    return str(orig if orig is not None else exc).strip().splitlines()[0]


def _set_wal(cur) -> None:
    """PRAGMA journal_mode=WAL, retried while another connection holds the lock: switching a new file to WAL
    needs it exclusively, and SQLite answers "database is locked" at once there instead of waiting out the busy
    timeout (seen with several workers opening a new store at the same instant)."""
    import sqlite3

    deadline = time.monotonic() + SQLITE_BUSY_TIMEOUT_S
    while True:
        try:
            cur.execute("PRAGMA journal_mode=WAL")
            return
        except sqlite3.OperationalError as exc:
            if "locked" not in str(exc) or time.monotonic() > deadline:
                raise
            time.sleep(0.02)


def _make_engine(u, *, memory: bool):
    if u.get_backend_name() == "sqlite":
        kwargs = {"connect_args": {"timeout": SQLITE_BUSY_TIMEOUT_S, "check_same_thread": False}}
        if memory:
            kwargs["poolclass"] = StaticPool
        engine = create_engine(u, **kwargs)

        @event.listens_for(engine, "connect")
        def _on_connect(dbapi_conn, _record):
            # Let SQLAlchemy's "begin" event, not the sqlite3 module, start transactions (SQLAlchemy's
            # documented pysqlite recipe), so reads can BEGIN and writes BEGIN IMMEDIATE.
            dbapi_conn.isolation_level = None
            cur = dbapi_conn.cursor()
            if not memory:
                _set_wal(cur)
                cur.execute("PRAGMA synchronous=NORMAL")  # in WAL mode: durable at checkpoints, never corrupt
            cur.execute(f"PRAGMA busy_timeout={int(SQLITE_BUSY_TIMEOUT_S * 1000)}")
            cur.execute("PRAGMA foreign_keys=ON")
            cur.close()

        @event.listens_for(engine, "begin")
        def _on_begin(conn):
            write = conn.get_execution_options().get("harken_write", False)
            conn.exec_driver_sql("BEGIN IMMEDIATE" if write else "BEGIN")

        return engine
    return create_engine(u, pool_pre_ping=True, connect_args={"connect_timeout": 10})
