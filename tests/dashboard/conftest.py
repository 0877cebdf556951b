"""An app on the session's filled store (tests/conftest.py: ``filled_store``), one per test, on its own cache."""

from __future__ import annotations

import pytest


@pytest.fixture
def app(filled_store, tmp_path):
    from dashboard import create_app

    url, _ = filled_store
    return create_app(url, cache_dir=tmp_path / "cache", open_reading=True)


@pytest.fixture
def ctx(app):
    return app.harken
