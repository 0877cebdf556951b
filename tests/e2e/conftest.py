"""Browser tests: the dashboard served in a thread on a store filled from the small scenario, driven by
Playwright with Debian's Chromium (/usr/bin/chromium; no downloaded browser). Skipped when either is missing.
Screenshots go to test-artifacts/dashboard/ (not committed)."""

from __future__ import annotations

import contextlib
import os
import shutil
import threading
from pathlib import Path

import pytest

# filled_store and store_copy (tests/conftest.py): a session store from the small scenario, and a private copy

ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts" / "dashboard"
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]


def chromium_binary() -> str | None:
    for c in (os.environ.get("HARKEN_CHROMIUM"), "/usr/bin/chromium", shutil.which("chromium")):
        if c and Path(c).exists():
            return c
    return None


@contextlib.contextmanager
def _serving(store_url, cache_dir, *, refresh_s: float = 3600):
    """The dashboard on store_url, served by werkzeug in a thread on a free port; yields its base URL."""
    from werkzeug.serving import make_server

    from dashboard import create_app

    app = create_app(store_url, cache_dir=cache_dir, refresh_s=refresh_s, open_reading=True)
    srv = make_server("127.0.0.1", 0, app.server, threaded=True)
    thread = threading.Thread(target=srv.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{srv.server_port}"
    finally:
        srv.shutdown()
        thread.join(timeout=10)


@pytest.fixture(scope="session")
def server(filled_store, tmp_path_factory):  # noqa: F811
    url, _ = filled_store
    with _serving(url, tmp_path_factory.mktemp("e2e-cache")) as base:
        yield base


@pytest.fixture(scope="session")
def browser():
    required = os.environ.get("HARKEN_REQUIRE_BROWSER") == "1"  # CI: a missing browser fails, never skips
    try:
        from playwright import sync_api
    except ImportError:
        if required:
            pytest.fail("HARKEN_REQUIRE_BROWSER=1 but the playwright package is not installed")
        pytest.skip("the playwright package is not installed")
    binary = chromium_binary()
    if binary is None:
        if required:
            pytest.fail("HARKEN_REQUIRE_BROWSER=1 but Debian's chromium is not installed (run .ci/browser.sh)")
        pytest.skip("Debian's chromium is not installed (run .ci/browser.sh)")
    with sync_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=binary, args=CHROMIUM_ARGS)
        yield b
        b.close()


@pytest.fixture
def page(browser):
    """A fresh page; page.errors collects console errors and uncaught page errors."""
    context = browser.new_context(viewport={"width": 1400, "height": 1000})
    pg = context.new_page()
    pg.errors = []
    pg.on("console", lambda m: pg.errors.append(m.text) if m.type == "error" else None)
    pg.on("pageerror", lambda e: pg.errors.append(f"page error: {e}"))
    pg.set_default_timeout(20_000)
    yield pg
    context.close()


@pytest.fixture(scope="session")
def artifacts():
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    return ARTIFACTS


PASSWORD = "e2e password of the tests"
PEOPLE = (("vic", "viewer", "Vic Viewer"), ("tom", "technician", "Tom Tech"), ("ada", "method_owner", "Ada Tester"))


@pytest.fixture
def writable_server(store_copy, tmp_path):  # noqa: F811
    """The dashboard on a private copy of the filled store (a test here may build references), with a viewer
    (vic), a technician (tom) and a method owner (ada), all with PASSWORD."""
    from tests.conftest import add_people

    add_people(store_copy, PEOPLE, password=PASSWORD)
    with _serving(store_copy, tmp_path / "cache") as base:
        yield base


def sign_in(page, base: str, name: str, password: str = PASSWORD, next_path: str = "/"):
    """Sign in through the sign-in page; returns the page after the redirect."""
    page.goto(f"{base}/signin?next={next_path}")
    page.fill("#signin-user", name)
    page.fill("#signin-password", password)
    page.click("#signin-submit")
    return page
