"""A results store filled once per session from the demo's small scenario, with its reference models built.

Tests must not write to it; a test that writes (a reference build) copies it first with ``store_copy``.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from .fill import fill_store


@pytest.fixture(scope="session")
def filled_store(small_scenario, tmp_path_factory):
    """(store URL, info) of a SQLite store holding the small scenario, analysed and scored."""
    folder = tmp_path_factory.mktemp("dash-store")
    url = f"sqlite:///{folder / 'harken.db'}"
    info = fill_store(small_scenario, url, jobs=1)
    info["folder"] = folder
    return url, info


@pytest.fixture
def store_copy(filled_store, tmp_path):
    """A private copy of the filled store (database and archive) that a test may write to."""
    url, info = filled_store
    src: Path = info["folder"]
    dst = tmp_path / "copy"
    shutil.copytree(src, dst, ignore=shutil.ignore_patterns("*-dashboard-cache"))
    return f"sqlite:///{dst / 'harken.db'}"


@pytest.fixture
def app(filled_store, tmp_path):
    from dashboard import create_app

    url, _ = filled_store
    return create_app(url, cache_dir=tmp_path / "cache")


@pytest.fixture
def ctx(app):
    return app.harken
