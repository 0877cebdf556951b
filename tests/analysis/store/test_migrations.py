"""The store's Alembic migrations: they make schema.py's schema, upgrade the previous release's store, refuse a
newer one."""

from __future__ import annotations

import gzip
import io
import re
import shutil
import threading
from pathlib import Path

import pandas as pd
import pytest
from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import create_engine, inspect
from sqlalchemy.exc import DBAPIError

from analysis.store import Store, StoreError, migrate, safe_url
from analysis.store.schema import TABLES, metadata

FIXTURES = Path(__file__).parent / "fixtures"


def _revision(conn) -> tuple:
    return MigrationContext.configure(conn).get_current_heads()


def _v1_copy(tmp_path) -> Path:
    """The previous release's store (schema version 1, before Alembic), gunzipped into tmp_path."""
    path = tmp_path / "store-v1.sqlite"
    with gzip.open(FIXTURES / "store-v1.sqlite.gz", "rb") as src, open(path, "wb") as dst:
        shutil.copyfileobj(src, dst)
    return path


def _through_csv(df: pd.DataFrame) -> pd.DataFrame:
    buf = io.StringIO()
    df.to_csv(buf, index=False)
    buf.seek(0)
    return pd.read_csv(buf)


def test_revision_ids_are_numbers_in_sequence():
    script = ScriptDirectory(str(migrate.MIGRATIONS_DIR))
    revisions = list(reversed(list(script.walk_revisions())))
    assert [r.revision for r in revisions] == [f"{n:04d}" for n in range(1, len(revisions) + 1)]
    assert [r.down_revision for r in revisions] == [None] + [r.revision for r in revisions[:-1]]
    assert all(Path(r.path).name.startswith(f"{r.revision}_") for r in revisions)
    assert migrate.HEAD == revisions[-1].revision and migrate.SCHEMA_VERSION == len(revisions)


def test_a_new_store_made_by_the_migrations_matches_schema_py(store_url, tmp_path):
    with Store.open(store_url, files_dir=tmp_path) as store:
        with store.read() as conn:
            assert compare_metadata(MigrationContext.configure(conn), metadata) == []
            assert _revision(conn) == (migrate.HEAD,)
        assert store.schema_version() == migrate.SCHEMA_VERSION


def test_upgrade_returns_the_revision_found_before(store_url):
    engine = create_engine(store_url)
    try:
        with engine.begin() as conn:
            assert migrate.upgrade(conn, where="t", create=True, harken_version="9.9") is None
        with engine.begin() as conn:
            assert migrate.upgrade(conn, where="t", create=False, harken_version="9.9") == migrate.HEAD
            info = dict(conn.exec_driver_sql("SELECT key, value FROM store_info").fetchall())
    finally:
        engine.dispose()
    assert info["schema_version"] == str(migrate.SCHEMA_VERSION)
    assert info["created_by_harken"] == "9.9" and info["created_at"].endswith("Z")


def test_the_previous_releases_store_is_upgraded_and_keeps_its_contents(tmp_path):
    path = _v1_copy(tmp_path)
    probe = create_engine(f"sqlite:///{path}")
    with probe.connect() as conn:
        assert "alembic_version" not in inspect(conn).get_table_names()
        assert conn.exec_driver_sql("SELECT value FROM store_info WHERE key = 'schema_version'").scalar() == "1"
        audit_before = conn.exec_driver_sql("SELECT * FROM audit_log ORDER BY id").fetchall()
    probe.dispose()
    assert len(audit_before) == 3

    with Store.open(path, create=False) as store:
        with store.read() as conn:
            assert _revision(conn) == (migrate.HEAD,)
            assert compare_metadata(MigrationContext.configure(conn), metadata) == []
            kept = "SELECT id, at, person, action, target, detail FROM audit_log ORDER BY id"
            assert conn.exec_driver_sql(kept).fetchall() == audit_before
            # the upgrade chains the rows it found (revision 0005): the trail verifies, its head is recorded
            from analysis.store import audit as chain
            assert chain.verify(conn) == (3, None) and chain.head(conn)[0] == 3
            # revision 0006 fills the per-day summaries from the rows it found: they agree with them
            from analysis.store import summaries
            assert summaries.differences(conn) == []
            assert conn.exec_driver_sql("SELECT sum(n_all) FROM cell_counts").scalar() == 38
            quarantined = conn.exec_driver_sql(
                "SELECT original_name, error FROM recordings WHERE status = 'quarantined'").fetchall()
            verdicts = conn.exec_driver_sql("SELECT person, verdict, note FROM verdicts").fetchall()
        assert store.schema_version() == migrate.SCHEMA_VERSION
        exported = _through_csv(store.export_actuations())
        models = store.models()
        assert len(store.quarantine()) == 1

    old = pd.read_csv(FIXTURES / "store-v1-export.csv.gz")
    assert len(old) == 38
    assert set(old.columns) <= set(exported.columns)  # later revisions may add columns, never drop one
    pd.testing.assert_frame_equal(exported[list(old.columns)], old, check_exact=True)
    assert [name for name, _ in quarantined] == ["bad/no_lot.flac"] and quarantined[0][1]
    assert verdicts == [("fixture maker", "confirmed", "made for the test")]
    assert sorted(zip(models["event"], models["version"], models["status"])) == [
        ("dose_release", 1, "active"), ("metering_click", 1, "active")]

    # Opening again changes nothing: already at head.
    with Store.open(path, create=False) as store:
        with store.read() as conn:
            assert _revision(conn) == (migrate.HEAD,)
            assert conn.exec_driver_sql("SELECT count(*) FROM audit_log").scalar() == 3
    engine = create_engine(f"sqlite:///{path}")
    try:
        with engine.begin() as conn:
            assert migrate.upgrade(conn, where=str(path), create=False, harken_version="") == migrate.HEAD
    finally:
        engine.dispose()



def test_the_upgrade_fills_the_checksums_of_the_previous_releases_rows(tmp_path):
    """Revision 0002 computed a checksum for every model, QC result set and flag set already stored; the
    profile a previous analysis used is not known, so its columns stay empty."""
    path = _v1_copy(tmp_path)
    checksummed = {"actuations": "qc_sha256", "reference_models": "content_sha256", "trajectories": "flags_sha256"}
    with Store.open(path, create=False) as store:
        # files=False: the fixture's archive paths name the folder it was made in, not this one
        assert store.check_integrity(files=False) == []
        with store.read() as conn:
            counts = {t: tuple(conn.exec_driver_sql(f"SELECT count(*), count({c}) FROM {t}").one())
                      for t, c in checksummed.items()}
            sums = {t: conn.exec_driver_sql(f"SELECT {c} FROM {t}").scalars().all() for t, c in checksummed.items()}
            profiles = {t: tuple(conn.exec_driver_sql(
                f"SELECT count(profile_version), count(profile_sha256) FROM {t}").one())
                for t in ("actuations", "reference_models")}
    assert counts["actuations"] == (38, 38)  # the 38 rows of the fixture's export
    assert counts["reference_models"] == (2, 2)
    assert counts["trajectories"][0] > 0 and counts["trajectories"][0] == counts["trajectories"][1]
    for values in sums.values():
        assert all(re.fullmatch(r"[0-9a-f]{64}", v) for v in values)
        assert len(set(values)) == len(values)  # each covers its own row's content
    assert profiles == {"actuations": (0, 0), "reference_models": (0, 0)}

    # The check is not vacuous on this store: a row changed after the upgrade is found.
    engine = create_engine(f"sqlite:///{path}")
    try:
        with engine.begin() as conn:
            tid, aid, event, model_id = conn.exec_driver_sql(
                "SELECT id, actuation_id, event, model_id FROM trajectories ORDER BY id LIMIT 1").one()
            conn.exec_driver_sql(f"UPDATE trajectories SET n_slices = n_slices + 1 WHERE id = {tid}")
    finally:
        engine.dispose()
    with Store.open(path, create=False) as store:
        assert store.check_integrity(files=False) == [
            f"actuation {aid}, event {event!r} under model {model_id}: statistics and their flags: content differs "
            "from its checksum (changed after it was written)"]

def test_a_store_from_before_alembic_is_stamped_then_upgraded(store_url, tmp_path):
    """A version-1 store without alembic_version (how the previous release left it), on both backends."""
    from alembic import command

    engine = create_engine(store_url)
    try:
        with engine.begin() as conn:
            command.upgrade(migrate.alembic_config(connection=conn), migrate.BASELINE)  # the schema of version 1
            conn.exec_driver_sql("DROP TABLE alembic_version")
            conn.exec_driver_sql("UPDATE store_info SET value = '1' WHERE key = 'schema_version'")
        with engine.begin() as conn:
            assert migrate.upgrade(conn, where="t", create=False, harken_version="") == migrate.BASELINE
            assert _revision(conn) == (migrate.HEAD,)
    finally:
        engine.dispose()


def test_the_audit_log_is_append_only_after_migrating_from_base(store_url):
    engine = create_engine(store_url)
    try:
        with engine.begin() as conn:
            migrate.upgrade(conn, where="t", create=True, harken_version="")
            conn.exec_driver_sql("INSERT INTO audit_log (at, person, action) VALUES ('2026-01-01', 'ana', 'x')")
        for sql in ("UPDATE audit_log SET person = 'eve'", "DELETE FROM audit_log"):
            with pytest.raises(DBAPIError, match="the audit log is append-only"):
                with engine.begin() as conn:
                    conn.exec_driver_sql(sql)
        with engine.connect() as conn:
            assert conn.exec_driver_sql("SELECT person FROM audit_log").scalars().all() == ["ana"]
    finally:
        engine.dispose()


def test_downgrade_to_base_leaves_an_empty_database(store_url):
    engine = create_engine(store_url)
    try:
        with engine.begin() as conn:
            migrate.upgrade(conn, where="t", create=True, harken_version="")
            command.downgrade(migrate.alembic_config(connection=conn), "base")
            assert set(inspect(conn).get_table_names()) <= {"alembic_version"}
            assert _revision(conn) == ()
            if conn.dialect.name == "postgresql":
                assert conn.exec_driver_sql(
                    "SELECT count(*) FROM pg_proc WHERE proname = 'harken_audit_log_append_only'").scalar() == 0
    finally:
        engine.dispose()


def test_a_store_of_a_newer_harken_is_refused(store_url, tmp_path):
    Store.open(store_url, files_dir=tmp_path).close()
    engine = create_engine(store_url)
    with engine.begin() as conn:
        conn.exec_driver_sql("UPDATE alembic_version SET version_num = '9999'")
    engine.dispose()
    with pytest.raises(StoreError, match=rf"^{re.escape(safe_url(store_url))}: the store is at schema revision 9999, "
                                         rf"which this Harken does not know \(its newest is {migrate.HEAD}\); "
                                         r"it was made by a newer Harken, so upgrade Harken to open it$"):
        Store.open(store_url, files_dir=tmp_path)


def test_an_empty_database_is_refused_without_create(store_url, tmp_path):
    if store_url.startswith("sqlite"):
        Path(store_url.removeprefix("sqlite:///")).touch()  # an empty file is an empty SQLite database
    with pytest.raises(StoreError, match=rf"^{re.escape(safe_url(store_url))}: the database is empty \(not a Harken "
                                         r"store yet\)$"):
        Store.open(store_url, files_dir=tmp_path, create=False)
    engine = create_engine(store_url)
    with engine.connect() as conn:
        assert inspect(conn).get_table_names() == []  # nothing was made
    engine.dispose()


def test_a_store_that_lost_a_table_is_called_damaged(store_url, tmp_path):
    Store.open(store_url, files_dir=tmp_path).close()
    engine = create_engine(store_url)
    with engine.begin() as conn:
        conn.exec_driver_sql("DROP TABLE verdicts")
    engine.dispose()
    with pytest.raises(StoreError, match=rf": the store \(schema revision {migrate.HEAD}\) lacks table\(s\) verdicts "
                                         r"\(damaged\?\)$"):
        Store.open(store_url, files_dir=tmp_path)


def test_workers_opening_a_new_store_at_once_create_it_once(store_url, tmp_path):
    """Store.open's lock (PostgreSQL advisory lock, SQLite BEGIN IMMEDIATE) holds around Alembic's upgrade."""
    n = 4
    barrier = threading.Barrier(n)
    errors: list = []

    def open_it():
        barrier.wait()
        try:
            Store.open(store_url, files_dir=tmp_path).close()
        except Exception as exc:  # noqa: BLE001 - reported below
            errors.append(exc)

    threads = [threading.Thread(target=open_it) for _ in range(n)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []
    with Store.open(store_url, files_dir=tmp_path) as store:
        with store.read() as conn:
            assert _revision(conn) == (migrate.HEAD,)
            assert conn.exec_driver_sql("SELECT count(*) FROM store_info").scalar() == 3
            assert set(TABLES) <= set(inspect(conn).get_table_names())
