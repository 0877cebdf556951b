"""Crash safety and concurrency with real worker processes: SIGKILL mid-way, a reader polling during writes,
two workers on one inbox."""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd

from analysis.store import Store
from tests.conftest import sidecar_dict

REPO = Path(__file__).resolve().parents[3]
TIMEOUT_S = 180


def _fill_inbox(inbox: Path, scenario: Path, n_good: int) -> dict[str, str]:
    """Copy n_good scenario recordings (with sidecars) and three bad files into inbox; returns {hash: name}."""
    truth = pd.read_csv(scenario / "ground_truth.csv")
    inputs = {}
    for rel in truth["file"].iloc[:n_good]:
        src = scenario / rel
        dest = inbox / rel
        dest.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(src, dest)
        shutil.copyfile(src.with_suffix(".json"), dest.with_suffix(".json"))
    (inbox / "bad").mkdir()
    (inbox / "bad" / "empty.flac").write_bytes(b"")
    (inbox / "bad" / "junk.wav").write_bytes(b"RIFF\x00\x00\x00\x00WAVEjunk")
    (inbox / "bad" / "nosidecar.flac").write_bytes((scenario / truth["file"].iloc[-1]).read_bytes())
    for stem in ("empty", "junk"):
        (inbox / "bad" / f"{stem}.json").write_text(json.dumps(sidecar_dict()))
    for p in inbox.rglob("*"):
        if p.suffix in (".flac", ".wav"):
            inputs[hashlib.sha256(p.read_bytes()).hexdigest()] = p.relative_to(inbox).as_posix()
    return inputs


def _worker(inbox, url, files, *extra) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "analysis.cli", "worker", "--inbox", str(inbox), "--store", url, "--once",
         "--files", str(files), *map(str, extra)],
        cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )


def _count_done(store) -> int:
    df = store.recordings()
    return int(df["status"].isin(["analysed", "quarantined"]).sum()) if len(df) else 0


def _kill_after(proc, store, n_done: int) -> None:
    deadline = time.monotonic() + TIMEOUT_S
    while _count_done(store) < n_done:
        assert proc.poll() is None, f"worker ended before it was killed: {proc.communicate()}"
        assert time.monotonic() < deadline, "worker made no progress"
        time.sleep(0.02)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    assert proc.returncode == -signal.SIGKILL


def _check_outcome(store, inputs: dict[str, str], inbox: Path) -> None:
    recs = store.recordings().set_index("content_hash")
    assert sorted(recs.index) == sorted(inputs)  # nothing missing, nothing twice (content_hash is unique)
    assert set(recs["status"]) <= {"analysed", "quarantined"}
    acts = store.actuations()
    analysed = recs[recs["status"] == "analysed"]
    assert len(acts) == len(analysed) and acts["recording_id"].is_unique
    for h, row in analysed.iterrows():
        kept = Path(row["archive_path"])
        assert kept.parent.name == h[:2] and kept.stem == h
        assert hashlib.sha256(kept.read_bytes()).hexdigest() == h
    quarantined = recs[recs["status"] == "quarantined"]
    assert sorted(inputs[h] for h in quarantined.index) == ["bad/empty.flac", "bad/junk.wav", "bad/nosidecar.flac"]
    for _h, row in quarantined.iterrows():
        assert row["error"] and Path(row["archive_path"]).is_file()
    assert store.check_integrity() == []
    assert not [p for p in inbox.rglob("*") if p.suffix in (".flac", ".wav")]


def test_a_worker_killed_mid_way_leaves_no_half_recording_and_a_restart_finishes(store_url, small_scenario,
                                                                                 tmp_path):
    inbox, files = tmp_path / "inbox", tmp_path / "files"
    inputs = _fill_inbox(inbox, small_scenario, 30)
    store = Store.open(store_url, files_dir=files)
    try:
        for n_done in (4, 14):
            _kill_after(_worker(inbox, store_url, files, "--jobs", "1"), store, n_done)
            # Whole recordings only, even right after the kill. A copy the killed worker had put in the archive
            # before its commit may lie there with no row yet: the restart commits it (checked in _check_outcome).
            assert store.check_integrity(files=False) == []
        # The killed workers' claims are stale at once with a zero timeout: the last run takes them up.
        proc = _worker(inbox, store_url, files, "--jobs", "2", "--claim-timeout-s", "0")
        out, err = proc.communicate(timeout=TIMEOUT_S)
        assert proc.returncode == 0, err
        _check_outcome(store, inputs, inbox)
    finally:
        store.close()


def test_a_reader_polling_during_ingest_sees_only_whole_recordings(store_url, small_scenario, tmp_path):
    inbox, files = tmp_path / "inbox", tmp_path / "files"
    inputs = _fill_inbox(inbox, small_scenario, 60)
    store = Store.open(store_url, files_dir=files)
    try:
        proc = _worker(inbox, store_url, files, "--jobs", "2")
        polls, partial = 0, 0
        deadline = time.monotonic() + TIMEOUT_S
        while proc.poll() is None:
            assert time.monotonic() < deadline
            with store.read() as conn:  # one snapshot: the integrity check and the counts agree
                from analysis.store import queries

                assert queries.check_integrity(conn) == []
                n = len(queries.actuations(conn))
                recs = queries.recordings(conn)
            done = int(recs["status"].eq("analysed").sum()) if len(recs) else 0
            assert n == done
            polls += 1
            partial += 0 < n < 60
            time.sleep(0.01)
        assert proc.returncode == 0, proc.communicate()[1]
        assert polls >= 3 and partial >= 1  # the reader really ran while the worker wrote
        _check_outcome(store, inputs, inbox)
    finally:
        store.close()


def test_two_workers_on_one_inbox_analyse_each_file_once(store_url, small_scenario, tmp_path):
    inbox, files = tmp_path / "inbox", tmp_path / "files"
    inputs = _fill_inbox(inbox, small_scenario, 40)
    procs = [_worker(inbox, store_url, files, "--jobs", "1") for _ in range(2)]
    outs = [p.communicate(timeout=TIMEOUT_S) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], [o[1] for o in outs]
    analysed = [int(o[0].split(" analysed")[0].split()[-1]) for o in outs]
    lines = [line for o in outs for line in o[1].splitlines() if line.startswith(("analysed", "quarantined"))]
    assert sum(analysed) == 40 and len(lines) == 43  # 40 good + 3 bad files, each handled once across both
    with Store.open(store_url, files_dir=files) as store:
        _check_outcome(store, inputs, inbox)
