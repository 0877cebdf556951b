"""Today in the browser picks up a recording stored after the page was opened, without a reload."""

from __future__ import annotations

from datetime import UTC, datetime

from analysis.worker import ingest_paths
from tests.conftest import sidecar_dict, write_recording
from tests.e2e.conftest import _serving


def test_today_shows_a_new_recording_without_a_reload(page, store_copy, tmp_path):
    with _serving(store_copy, tmp_path / "cache", refresh_s=0.5) as base:
        page.goto(base + "/")
        page.wait_for_selector("#today-body .rig-block")
        page.evaluate("window.__sameLoad = 'yes'")  # gone if the page were loaded again
        assert page.locator("text=L2698").count() == 0
        src = write_recording(tmp_path / "src", "live", seed=12, sidecar=sidecar_dict(
            site="Northfield", rig="NF-R1", lot="L2698", unit="L2698-01",
            recorded_at=datetime.now(UTC).isoformat(timespec="seconds")))
        assert ingest_paths([src], store_copy, jobs=1).analysed == 1
        page.wait_for_selector("text=L2698", timeout=20_000)
        assert page.evaluate("window.__sameLoad") == "yes"
        assert page.locator("tr", has_text="L2698").locator("a[href^='/actuation/']").count() >= 1
        assert page.errors == []
