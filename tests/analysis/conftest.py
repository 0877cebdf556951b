"""Fixtures for the tests of analysis: a fresh store per test on SQLite and, when a server is reachable, on
PostgreSQL; the small scenario ingested into a shared store per backend; running `harken` in this process.

PostgreSQL: the URL of a server where we may create databases comes from HARKEN_TEST_PG_URL (read at test time;
``.ci/postgres.sh`` starts one and sets it). Each test gets its own new database, dropped afterwards.
"""

from __future__ import annotations

import os
import shutil
import uuid

import pytest

BACKENDS = ["sqlite", "postgresql"]


def _unavailable(reason: str):
    """Skip locally; fail where PostgreSQL is required (CI sets HARKEN_REQUIRE_PG=1), so a skip never passes."""
    if os.environ.get("HARKEN_REQUIRE_PG") == "1":
        pytest.fail(f"PostgreSQL is required here (HARKEN_REQUIRE_PG=1) but: {reason}")
    pytest.skip(f"PostgreSQL tests skipped: {reason}")


def pg_admin_url() -> str:
    url = os.environ.get("HARKEN_TEST_PG_URL", "").strip()
    if not url:
        _unavailable("HARKEN_TEST_PG_URL is not set (run `. .ci/postgres.sh` first)")
    return url


def _pg_engine(url):
    from sqlalchemy import create_engine

    return create_engine(url, isolation_level="AUTOCOMMIT", connect_args={"connect_timeout": 5})


def make_pg_database() -> str:
    """A new, empty database on the test server; returns its URL (skips when no server is reachable)."""
    from sqlalchemy.engine import make_url
    from sqlalchemy.exc import OperationalError

    admin = pg_admin_url()
    name = f"harken_t_{uuid.uuid4().hex[:10]}"
    engine = _pg_engine(admin)
    try:
        with engine.connect() as conn:
            conn.exec_driver_sql(f'CREATE DATABASE "{name}"')
    except OperationalError as exc:
        _unavailable(f"no server reachable at {make_url(admin).render_as_string()} "
                     f"({str(exc.orig).strip().splitlines()[0]})")
    finally:
        engine.dispose()
    return make_url(admin).set(database=name).render_as_string(hide_password=False)


def drop_pg_database(url: str) -> None:
    from sqlalchemy.engine import make_url

    engine = _pg_engine(pg_admin_url())
    try:
        with engine.connect() as conn:
            conn.exec_driver_sql(f'DROP DATABASE IF EXISTS "{make_url(url).database}" WITH (FORCE)')
    finally:
        engine.dispose()


def new_store_url(backend: str, folder) -> str:
    if backend == "sqlite":
        return f"sqlite:///{folder / 'harken.db'}"
    return make_pg_database()


@pytest.fixture(params=BACKENDS)
def store_url(request, tmp_path):
    """A URL of a fresh, empty store (files go to tmp_path): once on SQLite, once on PostgreSQL."""
    url = new_store_url(request.param, tmp_path)
    yield url
    if request.param == "postgresql":
        drop_pg_database(url)


@pytest.fixture
def sqlite_url(tmp_path):
    return f"sqlite:///{tmp_path / 'harken.db'}"


@pytest.fixture(scope="session")
def small_stores(small_scenario, tmp_path_factory):
    """get(backend) -> (url, files_dir): the small scenario ingested into a store of that backend, with reference
    models built from its reference lots; made on first use, shared by the session's tests (they only read it)."""
    from analysis.references import build_reference
    from analysis.store import Store
    from analysis.worker import ingest_paths

    made: dict = {}

    def get(backend):
        if backend not in made:
            files = tmp_path_factory.mktemp(f"small-store-{backend}")
            url = new_store_url(backend, files)
            ingest_paths([small_scenario], url, 2, files_dir=files, progress=False)
            with Store.open(url, files_dir=files) as store:
                build_reference(store, "demo-dpi", None, ["L2601", "L2602", "L2603"], created_by="fixture")
            made[backend] = (url, files)
        return made[backend]

    yield get
    for backend, (url, files) in made.items():
        if backend == "postgresql":
            drop_pg_database(url)
        shutil.rmtree(files, ignore_errors=True)


@pytest.fixture(params=BACKENDS)
def small_store(request, small_stores):
    """(url, files_dir) of the shared small-scenario store, once per backend."""
    return small_stores(request.param)


def run_cli(*argv) -> tuple[int, str, str]:
    """Run a `harken` command in this process: (exit code, stdout, stderr)."""
    import contextlib
    import io

    from analysis.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(list(map(str, argv)))
    return code, out.getvalue(), err.getvalue()
