"""The worker watching its inbox: woken by file-system events, or polling with events off; a file still being
written is not taken; a recording waits for its sidecar, and is quarantined without it after the sidecar wait.
Real files, a real SQLite store, the worker in a thread of this process or as a `harken worker` process."""

from __future__ import annotations

import hashlib
import os
import subprocess
import sys
import threading
import time
from contextlib import contextmanager
from pathlib import Path

from analysis.store import Store
from analysis.worker import run_worker
from tests.conftest import write_recording

ROOT = Path(__file__).resolve().parents[2]
DEADLINE_S = 60.0  # far above what a pick-up takes; only a worker that never takes the file reaches it


def _wait_for(what, cond, timeout_s: float = DEADLINE_S):
    end = time.monotonic() + timeout_s
    while True:
        out = cond()
        if out is not None and out is not False:
            return out
        assert time.monotonic() < end, f"{what}: not within {timeout_s:g} s"
        time.sleep(0.05)


def _recordings(url):
    with Store.open(url, create=False) as store:
        return store.recordings()


def _done(url, n: int):
    """The recordings once ``n`` of them are analysed or quarantined (no longer only claimed), else None."""
    recs = _recordings(url)
    return recs if (recs["status"] != "claimed").sum() >= n else None


@contextmanager
def _worker_thread(inbox: Path, url: str, files: Path, **kw):
    """run_worker in a thread until the block ends; yields its log lines (the first says how it watches)."""
    lines: list[str] = []
    stop = threading.Event()
    out = {}

    def run():
        try:
            out["summary"] = run_worker(inbox, url, jobs=1, files_dir=files, log=lines.append, stop=stop, **kw)
        except BaseException as exc:  # noqa: BLE001 - reported by the test below
            out["error"] = exc

    th = threading.Thread(target=run, daemon=True)
    th.start()
    _wait_for("worker started", lambda: any(m.startswith("watching") for m in lines) or "error" in out)
    try:
        yield lines
    finally:
        stop.set()
        th.join(timeout=30)
    assert not th.is_alive() and "error" not in out, out.get("error")


def _deliver(src: Path, dest: Path) -> None:
    """As a rig does: the sidecar, then the recording under a temporary name, renamed when whole."""
    dest.parent.mkdir(parents=True, exist_ok=True)
    os.replace(src.with_suffix(".json"), dest.with_suffix(".json"))
    tmp = dest.with_name(f".{dest.name}.part")
    tmp.write_bytes(src.read_bytes())
    os.replace(tmp, dest)


def test_events_wake_the_worker_without_a_poll(tmp_path):
    inbox, url = tmp_path / "inbox", f"sqlite:///{tmp_path / 'h.db'}"
    inbox.mkdir()
    src = write_recording(tmp_path / "rig", "r1", seed=3)
    data = src.read_bytes()
    # poll_s of an hour: only an event can make this worker look before the deadline.
    with _worker_thread(inbox, url, tmp_path, watch="events", poll_s=3600.0, settle_s=0.3) as lines:
        assert "file-system events" in lines[0]
        _deliver(src, inbox / "Site" / "R1" / "r1.flac")
        recs = _wait_for("analysed", lambda: _done(url, 1))
    assert recs.loc[0, "status"] == "analysed" and recs.loc[0, "original_name"] == "Site/R1/r1.flac"
    assert recs.loc[0, "content_hash"] == hashlib.sha256(data).hexdigest()
    assert not (inbox / "Site").exists()


def test_with_events_off_the_worker_polls(tmp_path):
    inbox, url = tmp_path / "inbox", f"sqlite:///{tmp_path / 'h.db'}"
    inbox.mkdir()
    src = write_recording(tmp_path / "rig", "r1", seed=4)
    with _worker_thread(inbox, url, tmp_path, watch="poll", poll_s=0.2, settle_s=0.3) as lines:
        assert " with polling " in lines[0]
        _deliver(src, inbox / "r1.flac")
        _wait_for("analysed", lambda: _done(url, 1))
    assert _recordings(url).loc[0, "status"] == "analysed"


def test_a_recording_waits_for_its_sidecar(tmp_path):
    inbox, url = tmp_path / "inbox", f"sqlite:///{tmp_path / 'h.db'}"
    inbox.mkdir()
    late = write_recording(tmp_path / "src", "late", seed=5)
    side = late.with_suffix(".json").read_text()
    late.with_suffix(".json").unlink()
    other = write_recording(tmp_path / "src", "other", seed=6)
    with _worker_thread(inbox, url, tmp_path, watch="events", poll_s=0.5, settle_s=0.2, sidecar_wait_s=3600.0):
        os.replace(late, inbox / "late.flac")  # without its sidecar
        _deliver(other, inbox / "other.flac")  # delivered after it, whole
        _wait_for("the other analysed", lambda: _done(url, 1))
        time.sleep(1.0)  # passes go on (poll_s 0.5): the one without a sidecar still waits
        recs = _recordings(url)
        assert list(recs["original_name"]) == ["other.flac"] and (inbox / "late.flac").exists()
        (inbox / "late.json").write_text(side)
        _wait_for("late analysed", lambda: _done(url, 2))
    recs = _recordings(url).set_index("original_name")
    assert recs.loc["late.flac", "status"] == "analysed" and not (inbox / "late.flac").exists()


def test_a_recording_whose_sidecar_never_comes_is_quarantined_after_the_wait(tmp_path):
    inbox, url = tmp_path / "inbox", f"sqlite:///{tmp_path / 'h.db'}"
    inbox.mkdir()
    rec = write_recording(tmp_path / "src", "alone", sidecar=False, seed=7)
    with _worker_thread(inbox, url, tmp_path, watch="events", poll_s=0.5, settle_s=0.2,
                        sidecar_wait_s=0.5) as lines:
        os.replace(rec, inbox / "alone.flac")
        _wait_for("quarantined", lambda: _done(url, 1))
    recs = _recordings(url)
    assert recs.loc[0, "status"] == "quarantined"
    assert "sidecar metadata file is missing" in recs.loc[0, "error"]  # the reason it had before the wait
    assert any(m == "alone.flac: no sidecar 0.5 s after the recording came; taken without one" for m in lines)


def test_a_file_written_slowly_is_taken_only_when_complete(tmp_path):
    """A real `harken worker` process; the recording is written in place in 20 chunks, 0.1 s apart, well within
    the 3 s settle interval: taken early, it would be stored with another hash (or quarantined as truncated)."""
    inbox, db = tmp_path / "inbox", tmp_path / "h.db"
    inbox.mkdir()
    url = f"sqlite:///{db}"
    src = write_recording(tmp_path / "src", "slow", seed=8)
    data = src.read_bytes()
    err = tmp_path / "worker.err"
    cmd = [sys.executable, "-m", "analysis.cli", "worker", "--inbox", str(inbox), "--store", url, "--files",
           str(tmp_path), "--jobs", "1", "--watch", "events", "--poll-s", "0.5", "--settle-s", "3"]
    with open(err, "w") as e:
        proc = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=e,
                                env=os.environ | {"PYTHONPATH": str(ROOT)})
    try:
        _wait_for("worker started", lambda: "watching" in err.read_text() or proc.poll() is not None)
        assert proc.poll() is None, err.read_text()
        os.replace(src.with_suffix(".json"), inbox / "slow.json")
        step = len(data) // 20 + 1
        with open(inbox / "slow.flac", "wb") as f:
            for i in range(0, len(data), step):
                f.write(data[i:i + step])
                f.flush()
                time.sleep(0.1)
                assert len(_recordings(url)) == 0, "taken while it was being written"
        recs = _wait_for("analysed", lambda: _done(url, 1))
    finally:
        proc.terminate()
        proc.wait(timeout=30)
    assert recs.loc[0, "status"] == "analysed", recs.loc[0, "error"]
    assert recs.loc[0, "content_hash"] == hashlib.sha256(data).hexdigest() and recs.loc[0, "size_bytes"] == len(data)
