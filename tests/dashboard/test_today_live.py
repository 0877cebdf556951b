"""Today refreshing by itself: the cheap question (queries.today_changes) answers the same while nothing changes
and otherwise not; the page's look callback passes on only a change; a recording that a real `harken worker`
process takes from its inbox shows in Today's data and its rendering. Real SQLite store, the app's own server."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

from analysis.store import Store, queries
from dashboard import create_app
from dashboard.views import today
from tests.conftest import sidecar_dict, write_recording

ROOT = Path(__file__).resolve().parents[2]
DEADLINE_S = 60.0  # far above a pick-up; reached only when the recording never shows


def _look(client, seen):
    """The look callback through the app's own server: (status, new key or None)."""
    body = {"output": "today-changes.data", "outputs": {"id": "today-changes", "property": "data"},
            "inputs": [{"id": "today-interval", "property": "n_intervals", "value": 7}],
            "state": [{"id": "today-changes", "property": "data", "value": seen}],
            "changedPropIds": ["today-interval.n_intervals"]}
    r = client.post("/_dash-update-component", json=body)
    if r.status_code == 204:  # nothing to send: every output left as it is
        return 204, None
    assert r.status_code == 200, r.get_data(as_text=True)[:300]
    return 200, r.get_json()["response"]["today-changes"]["data"]


def _refresh(client, key, per_rig="10") -> str:
    body = {"output": "today-body.children", "outputs": {"id": "today-body", "property": "children"},
            "inputs": [{"id": "today-changes", "property": "data", "value": key},
                       {"id": "today-per-rig", "property": "value", "value": per_rig}],
            "changedPropIds": ["today-changes.data"]}
    r = client.post("/_dash-update-component", json=body)
    assert r.status_code == 200, r.get_data(as_text=True)[:300]
    return r.get_data(as_text=True)


def test_the_question_is_the_same_while_nothing_changes_and_moves_with_a_quarantine(store_copy, tmp_path):
    with Store.open(store_copy, create=False) as s:
        with s.read() as conn:
            before = queries.today_changes(conn)
        with s.read() as conn:
            assert queries.today_changes(conn) == before
        c = s.claim("e" * 64, "broken.flac", 10, worker="t", claim_timeout_s=60)
        with s.read() as conn:
            claimed = queries.today_changes(conn)
        s.commit_quarantine(c.recording_id, worker="t", reason="not a readable audio file (truncated)",
                            quarantine_path=str(tmp_path / "broken.flac"))
        with s.read() as conn:
            quarantined = queries.today_changes(conn)
    assert claimed != before and quarantined != claimed  # the quarantine itself moves it, not only the claim
    assert _part(quarantined, "quarantined")[1] == _part(before, "quarantined")[1] + 1


def _part(stamp, name):
    return next(x for x in stamp if x[0] == name)


def test_a_recording_taken_by_a_running_worker_shows_on_today_without_a_reload(store_copy, tmp_path):
    app = create_app(store_copy, cache_dir=tmp_path / "cache", open_reading=True, refresh_s=1.0)
    client = app.server.test_client()
    status, key = _look(client, None)
    assert status == 200 and key
    assert _look(client, key) == (204, None)  # unchanged: nothing is sent, nothing re-renders
    assert "looks for new results every 1 s" in _refresh(client, key)

    inbox, err = tmp_path / "inbox", tmp_path / "worker.err"
    inbox.mkdir()
    now = datetime.now(UTC).isoformat(timespec="seconds")
    src = write_recording(tmp_path / "src", "live", seed=11,
                          sidecar=sidecar_dict(site="Northfield", rig="NF-R1", lot="L2699", unit="L2699-01",
                                               recorded_at=now))
    cmd = [sys.executable, "-m", "analysis.cli", "worker", "--inbox", str(inbox), "--store", store_copy,
           "--jobs", "1", "--watch", "events", "--settle-s", "0.3"]
    with open(err, "w") as e:
        proc = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=e,
                                env=os.environ | {"PYTHONPATH": str(ROOT)})
    try:
        end = time.monotonic() + DEADLINE_S
        while "watching" not in err.read_text():
            assert proc.poll() is None and time.monotonic() < end, err.read_text()
            time.sleep(0.05)
        os.replace(src.with_suffix(".json"), inbox / "live.json")
        os.replace(src, inbox / "live.flac")
        mine, looks = [], 0
        while not len(mine):  # as the page does: each change re-renders (a claim moves the answer too)
            assert proc.poll() is None and time.monotonic() < end, err.read_text()
            time.sleep(0.1)
            status, new = _look(client, key)
            if new is not None:
                key, looks = new, looks + 1
                rows = today.today_data(app.harken.store, per_rig=10)["rows"]
                mine = rows[rows["file"] == "live.flac"]
    finally:
        proc.terminate()
        proc.wait(timeout=30)
    assert len(mine) == 1 and mine.iloc[0]["lot"] == "L2699" and looks >= 1
    rendered = json.loads(_refresh(client, key))
    assert f"/actuation/{int(mine.iloc[0]['actuation_id'])}" in json.dumps(rendered)
    assert _look(client, key) == (204, None)
