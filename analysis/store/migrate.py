"""Schema migrations of the results store: the Alembic revisions in migrations/, applied when a store is opened.

Revision ids are numbers ("0001", "0002", ...). ``SCHEMA_VERSION`` is the newest one's number, and
``store_info.schema_version`` holds it too, so a Harken from before Alembic, which reads only that row, still
refuses a newer store. A store made before Alembic (schema version 1, no ``alembic_version`` table) is stamped
"0001", the revision that spells out its schema, and upgraded from there.
"""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from alembic.util import CommandError
from sqlalchemy import inspect, select

from .errors import StoreError
from .schema import TABLES, store_info

__all__ = ["upgrade", "SCHEMA_VERSION", "HEAD", "BASELINE", "MIGRATIONS_DIR", "alembic_config"]

MIGRATIONS_DIR = Path(__file__).with_name("migrations")
#: The revision of every store made before the migrations moved to Alembic (their schema version is 1).
BASELINE = "0001"


def alembic_config(*, connection=None, script_location: str | Path | None = None,
                   harken_version: str = "") -> Config:
    """An Alembic Config for the migrations folder (or ``script_location``), without an alembic.ini.

    ``connection``: an open SQLAlchemy connection, which env.py then uses as it is (inside its transaction).
    """
    cfg = Config()
    # Config values go through configparser interpolation, where "%" is special.
    cfg.set_main_option("script_location", str(script_location or MIGRATIONS_DIR).replace("%", "%%"))
    cfg.set_main_option("path_separator", "os")
    cfg.attributes["connection"] = connection
    cfg.attributes["harken_version"] = harken_version
    return cfg


def _number(revision: str, folder) -> int:
    try:
        return int(revision)
    except ValueError:
        raise ValueError(f"{folder}: revision id {revision!r} is not a number (ids are 0001, 0002, ...)") from None


def _head(script: ScriptDirectory) -> str:
    return script.get_current_head()  # raises if the folder's history has branched into several heads


# Read once: loading the revision files is most of the time of opening a store that is already at head.
_SCRIPT = ScriptDirectory(str(MIGRATIONS_DIR))
#: The newest revision of the migrations folder, and its number: the schema version this Harken writes.
HEAD = _head(_SCRIPT)
SCHEMA_VERSION = _number(HEAD, MIGRATIONS_DIR)


def upgrade(conn, *, where: str, create: bool, harken_version: str,
            script_location: str | Path | None = None) -> str | None:
    """Bring the store on ``conn`` to the newest revision, inside the caller's open transaction.

    Creates the schema in an empty database when ``create``; stamps a store made before Alembic as "0001";
    refuses an empty database (unless ``create``), a database that is not a store, and a store made by a newer
    Harken. ``where`` names the store in errors (URL without password); ``script_location``: another migrations
    folder (tests). Returns the revision the store was at, None for a new store. Raises StoreError.
    """
    cfg = alembic_config(connection=conn, script_location=script_location, harken_version=harken_version)
    script = _SCRIPT if script_location is None else ScriptDirectory.from_config(cfg)
    head = _head(script)
    head_number = _number(head, script.dir)
    names = set(inspect(conn).get_table_names())
    before: str | None = None
    if not names:
        if not create:
            raise StoreError(f"{where}: the database is empty (not a Harken store yet)")
    else:
        if "store_info" not in names:
            raise StoreError(f"{where}: not a Harken store (it has tables {', '.join(sorted(names)[:5])}"
                             f"{' ...' if len(names) > 5 else ''} but no store_info table)")
        found = _schema_version(conn)
        if found is None:
            raise StoreError(f"{where}: not a Harken store, or a damaged one (no readable schema_version)")
        current = MigrationContext.configure(conn).get_current_heads()
        known = {s.revision for s in script.walk_revisions()}
        unknown = [r for r in current if r not in known]
        if unknown:
            raise StoreError(
                f"{where}: the store is at schema revision {unknown[0]}, which this Harken does not know (its newest "
                f"is {head}); it was made by a newer Harken, so upgrade Harken to open it"
            )
        if found > head_number:
            raise StoreError(
                f"{where}: the store has schema version {found}, this Harken knows versions up to {head_number}; "
                "it was made by a newer Harken, so upgrade Harken to open it"
            )
        if len(current) > 1:
            raise StoreError(f"{where}: the store is at several schema revisions at once ({', '.join(current)}; "
                             "damaged?)")
        if not current:
            if found != 1:
                raise StoreError(f"{where}: the store has schema version {found} but no schema revision "
                                 "(no alembic_version row; damaged?)")
            _alembic(command.stamp, cfg, BASELINE, where=where)  # made before Alembic: its schema is 0001's
            current = (BASELINE,)
        before = current[0]
    if before != head:
        _alembic(command.upgrade, cfg, "head", where=where)
    if _schema_version(conn) != head_number:
        conn.execute(store_info.update().where(store_info.c.key == "schema_version").values(value=str(head_number)))
    present = set(inspect(conn).get_table_names())
    missing = [t for t in TABLES if t not in present]
    if missing:
        raise StoreError(f"{where}: the store (schema revision {head}) lacks table(s) {', '.join(missing)} "
                         "(damaged?)")
    return before


def _schema_version(conn) -> int | None:
    row = conn.execute(select(store_info.c.value).where(store_info.c.key == "schema_version")).first()
    try:
        return int(row[0]) if row is not None else None
    except ValueError:
        return None


def _alembic(cmd, cfg: Config, revision: str, *, where: str) -> None:
    try:
        cmd(cfg, revision)
    except CommandError as exc:
        raise StoreError(f"{where}: cannot bring the store to schema revision {revision}: {exc}") from None
