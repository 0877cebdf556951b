"""Three worker processes on one PostgreSQL store and one inbox; one is killed with SIGKILL mid-batch. Every
recording must end up stored exactly once (the claims of the killed worker are taken over at once by the
others on the same host; its half-done batch left nothing behind)."""

from __future__ import annotations

import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from analysis.store import Store, summaries
from tests.analysis.conftest import drop_pg_database, make_pg_database, run_cli
from tests.conftest import sidecar_dict, write_recording

ROOT = Path(__file__).resolve().parents[2]
N = 600


@pytest.fixture
def pg_url():
    url = make_pg_database()
    yield url
    drop_pg_database(url)


def _counts(url) -> tuple[int, int]:
    with Store.open(url, create=False) as store, store.read() as conn:
        rec = conn.exec_driver_sql("SELECT count(*) FROM recordings WHERE status = 'analysed'").scalar()
        act = conn.exec_driver_sql("SELECT count(DISTINCT recording_id) FROM actuations").scalar()
    return int(rec), int(act)


def test_three_workers_one_killed_store_every_recording_exactly_once(pg_url, tmp_path):
    inbox = tmp_path / "inbox"
    for i in range(N):
        write_recording(inbox / f"R{i % 4}", f"u{i // 10:03d}_{i % 10}", seed=1000 + i, subtype="PCM_16",
                        sidecar=sidecar_dict(rig=f"TF-R{i % 4}", unit=f"U{i // 10:03d}", actuation=i % 10 + 1))
    Store.open(pg_url, files_dir=tmp_path).close()  # the schema once, before the workers race for it
    cmd = [sys.executable, "-m", "analysis.cli", "worker", "--inbox", str(inbox), "--store", pg_url, "--jobs", "1",
           "--interval-s", "0.3", "--settle-s", "0", "--files", str(tmp_path)]
    procs = [subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
             for _ in range(3)]
    try:
        deadline = time.monotonic() + 300
        while _counts(pg_url)[0] < N // 5:
            assert time.monotonic() < deadline and all(p.poll() is None for p in procs), "workers too slow"
            time.sleep(0.2)
        procs[0].send_signal(signal.SIGKILL)  # mid-batch: it holds claims and perhaps an open transaction
        procs[0].wait(timeout=30)
        while _counts(pg_url)[0] < N:
            assert time.monotonic() < deadline, f"only {_counts(pg_url)} of {N} stored"
            assert all(p.poll() is None for p in procs[1:]), [p.stderr.read() for p in procs[1:]
                                                              if p.poll() is not None]
            time.sleep(0.3)
    finally:
        for p in procs[1:]:
            if p.poll() is None:
                p.send_signal(signal.SIGINT)
        for p in procs:
            try:
                p.wait(timeout=60)
            except subprocess.TimeoutExpired:
                p.kill()
    analysed, distinct = _counts(pg_url)
    assert (analysed, distinct) == (N, N)
    with Store.open(pg_url, create=False) as store, store.read() as conn:
        assert conn.exec_driver_sql("SELECT count(*) FROM recordings").scalar() == N
        assert conn.exec_driver_sql("SELECT count(*) FROM actuations").scalar() == N  # none twice
        assert conn.exec_driver_sql("SELECT count(*) FROM recordings WHERE status <> 'analysed'").scalar() == 0
    # The per-day summaries three workers kept concurrently (cells shared between them, one killed mid-batch)
    # are what the raw rows give, and the command a lab runs says so.
    with Store.open(pg_url, create=False) as store, store.read() as conn:
        assert summaries.differences(conn) == []
        assert conn.exec_driver_sql("SELECT sum(n_all) FROM cell_counts").scalar() == N
    rc, out, _ = run_cli("check", "summaries", "--store", pg_url)
    assert rc == 0 and "0 difference(s)" in out
    assert not list(inbox.rglob("*.flac"))  # every delivered file was taken in and removed
    assert len(list((tmp_path / "harken-archive").rglob("*.flac"))) == N


def test_a_claim_held_by_another_transaction_is_skipped_not_waited_for(pg_url, tmp_path):
    # SELECT ... FOR UPDATE SKIP LOCKED: while one worker's transaction holds a recording's row (it is taking
    # over or committing it), another worker's claim of the same content comes back "busy" at once.
    from sqlalchemy import create_engine, text

    with Store.open(pg_url, files_dir=tmp_path) as store:
        first = store.claim("c" * 64, "z.flac", 10, worker="host-a:1", claim_timeout_s=300.0)
        assert first.kind == "new"
        engine = create_engine(pg_url)
        try:
            with engine.connect() as holder:
                holder.execute(text("BEGIN"))
                holder.execute(text("SELECT id FROM recordings WHERE id = :i FOR UPDATE"), {"i": first.recording_id})
                # stale for this caller (timeout 0): without SKIP LOCKED it would wait for the holder's commit
                got = []
                t = threading.Thread(target=lambda: got.append(
                    store.claim("c" * 64, "z.flac", 10, worker="host-b:2", claim_timeout_s=0.0)))
                t.start()
                t.join(timeout=10.0)
                blocked = t.is_alive()
                holder.execute(text("ROLLBACK"))  # frees a claim that waited, so the thread ends either way
                t.join(timeout=30.0)
        finally:
            engine.dispose()
        assert not blocked, "the claim waited for the row's lock instead of skipping it"
        assert got[0].kind == "busy"
        # once the row is free the stale claim is taken over as before
        assert store.claim("c" * 64, "z.flac", 10, worker="host-b:2", claim_timeout_s=0.0).kind == "retry"
