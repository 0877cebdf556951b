"""Alembic's environment for the results store (analysis.store.migrate runs it; so may a developer).

Harken's own path: ``analysis.store.migrate.upgrade`` builds the Config in code and hands over its open connection
as ``config.attributes["connection"]``, already inside the transaction of ``Store.open`` (which holds the
PostgreSQL advisory lock, or SQLite's BEGIN IMMEDIATE). Alembic sees the transaction and starts or commits none
of its own, so the upgrade and the caller's checks commit or roll back together.

A developer who changed analysis/store/schema.py writes the next revision (ids are numbers: 0002, 0003, ...)
with the command line, against a scratch store at the current head (Store.open makes one through the migrations,
whatever schema.py says), from the repository's root:

    .venv/bin/python -c "from analysis.store import Store; Store.open('scratch.db').close()"
    .venv/bin/alembic -c analysis/store/migrations/alembic.ini -x url=sqlite:///scratch.db \\
        revision --autogenerate --rev-id 0002 -m "add sites country"

then reads and edits the new file in versions/ (autogenerate does not see triggers or data changes; keep the
revision frozen, see script.py.mako). ``-x url=...`` serves ``current``, ``history`` and ``upgrade`` on a scratch
database too; real stores are upgraded by Harken when it opens them.
"""

from alembic import context
from sqlalchemy import create_engine

from analysis.store.schema import metadata

config = context.config
target_metadata = metadata


def _configure(**kw) -> None:
    # render_as_batch: SQLite cannot ALTER most things, so autogenerate writes batch_alter_table blocks, which
    # on SQLite recreate the table where ALTER cannot make the change and on PostgreSQL are plain ALTERs.
    context.configure(target_metadata=target_metadata, render_as_batch=True, **kw)


def _run_with(connection) -> None:
    _configure(connection=connection)
    with context.begin_transaction():
        context.run_migrations()


def _url() -> str:
    url = context.get_x_argument(as_dictionary=True).get("url") or config.get_main_option("sqlalchemy.url")
    if not url:
        raise SystemExit("give the database: alembic -c analysis/store/migrations/alembic.ini "
                         "-x url=sqlite:///some.db ...")
    return url


connection = config.attributes.get("connection")
if connection is None and config.config_file_name is not None:
    # The command line: its alembic.ini says what to log. Harken's own path leaves logging alone.
    from logging.config import fileConfig

    fileConfig(config.config_file_name)
if connection is not None:
    _run_with(connection)
elif context.is_offline_mode():
    _configure(url=_url(), literal_binds=True)
    with context.begin_transaction():
        context.run_migrations()
else:
    engine = create_engine(_url())
    try:
        with engine.connect() as conn:
            _run_with(conn)
    finally:
        engine.dispose()
