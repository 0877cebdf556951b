"""The worker: idempotent registration, archive, quarantine of bad files, one line per recording, the CLI."""

from __future__ import annotations

import hashlib
import json
import shutil

import numpy as np

from analysis.store import Store
from analysis.worker import find_inbox_files, ingest_paths, run_worker
from tests.analysis.conftest import run_cli
from tests.conftest import sidecar_dict, synth_actuation, write_recording


def sha256(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_the_same_file_twice_and_renamed_gives_one_recording(store_url, tmp_path):
    inbox = tmp_path / "inbox"
    first = write_recording(inbox, "a")
    h = sha256(first)
    s1 = run_worker(inbox, store_url, once=True, jobs=1, files_dir=tmp_path)
    assert (s1.analysed, s1.duplicates) == (1, 0)
    # The same bytes again, once under the same name and once renamed in a subfolder.
    write_recording(inbox, "a")
    renamed = inbox / "later" / "renamed.flac"
    renamed.parent.mkdir()
    shutil.copyfile(tmp_path / "harken-archive" / h[:2] / f"{h}.flac", renamed)
    (inbox / "later" / "renamed.json").write_text(json.dumps(sidecar_dict(lot="OTHER")))
    s2 = run_worker(inbox, store_url, once=True, jobs=1, files_dir=tmp_path)
    assert (s2.analysed, s2.duplicates, s2.quarantined) == (0, 2, 0)
    with Store.open(store_url, files_dir=tmp_path) as store:
        recs = store.recordings()
        acts = store.actuations()
    assert len(recs) == 1 and recs.loc[0, "content_hash"] == h and recs.loc[0, "original_name"] == "a.flac"
    assert len(acts) == 1 and acts.loc[0, "lot"] == "T001"  # the first delivery's metadata stays
    assert find_inbox_files(inbox) == [] and not (inbox / "later").exists()  # delivered copies removed


def test_the_original_and_its_sidecar_are_kept_in_a_content_addressed_archive(store_url, tmp_path):
    inbox = tmp_path / "inbox"
    src = write_recording(inbox / "Site" / "Rig", "r1", seed=4)
    data, side = src.read_bytes(), (src.with_suffix(".json")).read_text()
    h = hashlib.sha256(data).hexdigest()
    run_worker(inbox, store_url, once=True, jobs=1, files_dir=tmp_path)
    kept = tmp_path / "harken-archive" / h[:2] / f"{h}.flac"
    assert kept.read_bytes() == data and kept.with_suffix(".json").read_text() == side
    with Store.open(store_url, files_dir=tmp_path) as store:
        act = store.actuations()
    assert act.loc[0, "archive_path"] == str(kept) and act.loc[0, "file"] == "Site/Rig/r1.flac"
    assert not src.exists() and not src.with_suffix(".json").exists() and not (inbox / "Site").exists()


def test_ingest_keeps_the_given_files_and_names_them_relative_to_their_folder(sqlite_url, tmp_path):
    folder = tmp_path / "given"
    a = write_recording(folder / "sub", "x", seed=1)
    b = write_recording(tmp_path, "single", seed=2)
    s = ingest_paths([folder, b], sqlite_url, 1, files_dir=tmp_path, progress=False)
    assert s.analysed == 2 and a.exists() and b.exists()
    with Store.open(sqlite_url) as store:
        assert sorted(store.actuations()["file"]) == ["single.flac", "sub/x.flac"]


def _bad_inbox(inbox):
    """The bad inputs of tests/analysis/test_bad_input.py, each with the words its error must contain."""
    inbox.mkdir(parents=True)
    cases = {}
    (inbox / "empty.flac").write_bytes(b"")
    (inbox / "empty.json").write_text(json.dumps(sidecar_dict()))
    cases["empty.flac"] = "file is empty (0 bytes)"
    good = write_recording(inbox / "tmp", "good", seed=9)
    (inbox / "cut.flac").write_bytes(good.read_bytes()[: good.stat().st_size // 2])
    (inbox / "cut.json").write_text(json.dumps(sidecar_dict()))
    cases["cut.flac"] = "truncated"
    shutil.rmtree(inbox / "tmp")
    for i, suffix in enumerate([".flac", ".wav"]):
        (inbox / f"noise{i}{suffix}").write_bytes(np.random.default_rng(3 + i).bytes(20_000))
        (inbox / f"noise{i}.json").write_text(json.dumps(sidecar_dict()))
        cases[f"noise{i}{suffix}"] = "not a recognised audio file"
    mic, marker = synth_actuation()
    data = np.column_stack([mic, marker])
    data[1000, 0], data[2000, 0] = np.nan, np.inf
    write_recording(inbox, "nan", fmt="WAV", subtype="FLOAT", data=data)
    cases["nan.wav"] = "contains 2 non-finite sample(s) (NaN or infinity)"
    write_recording(inbox, "lonely", sidecar=False, seed=5)
    cases["lonely.flac"] = "sidecar metadata file is missing"
    write_recording(inbox, "badjson", seed=6)
    (inbox / "badjson.json").write_text("{not json")
    cases["badjson.flac"] = "sidecar is not valid JSON"
    write_recording(inbox, "noprofile", seed=7, sidecar=sidecar_dict(profile="no-such-device"))
    cases["noprofile.flac"] = "no device profile named 'no-such-device'"
    return cases


def test_every_bad_file_ends_in_quarantine_with_its_reason_and_the_worker_goes_on(store_url, tmp_path):
    inbox = tmp_path / "inbox"
    cases = _bad_inbox(inbox)
    write_recording(inbox, "zz_good", seed=11)
    write_recording(inbox, "one", data=np.array([[0.1, 0.0]]))  # readable: analysed, fails its quality checks
    s = run_worker(inbox, store_url, once=True, jobs=2, files_dir=tmp_path)
    assert (s.analysed, s.quarantined) == (2, len(cases))
    with Store.open(store_url, files_dir=tmp_path) as store:
        q = store.quarantine().set_index("file")
        acts = store.actuations().set_index("file")
        one_flags = store.flags(actuation_ids=[int(acts.loc["one.flac", "actuation_id"])])
        assert store.check_integrity() == []
    assert sorted(q.index) == sorted(cases)
    for name, words in cases.items():
        assert words in q.loc[name, "reason"], (name, q.loc[name, "reason"])
        kept = q.loc[name, "kept_at"]
        assert kept.endswith(name) and (tmp_path / "harken-quarantine").joinpath(kept.split("/")[-1]).is_file()
    assert sorted(acts.index) == ["one.flac", "zz_good.flac"]
    assert not bool(acts.loc["one.flac", "passed_qc"]) and bool(acts.loc["zz_good.flac", "passed_qc"])
    assert {"qc:duration", "qc:marker"} <= set(one_flags["statistic"])
    assert find_inbox_files(inbox) == []


def test_the_worker_logs_one_line_per_recording_when_not_in_a_terminal(sqlite_url, tmp_path):
    inbox = tmp_path / "inbox"
    for i in range(3):
        write_recording(inbox, f"r{i}", seed=20 + i)
    (inbox / "bad.flac").write_bytes(b"")
    (inbox / "bad.json").write_text(json.dumps(sidecar_dict()))
    code, out, err = run_cli("worker", "--inbox", inbox, "--store", sqlite_url, "--once", "--jobs", "1")
    assert code == 0, err
    lines = err.strip().splitlines()
    assert len(lines) == 4
    assert sorted(line.split()[0] for line in lines) == ["analysed"] * 3 + ["quarantined"]
    assert any(line.startswith("quarantined bad.flac: ") and "file is empty" in line for line in lines)
    assert out.strip().startswith("3 analysed, 1 quarantined, 0 already stored")


def test_ingest_command_and_a_missing_inbox(sqlite_url, tmp_path):
    a = write_recording(tmp_path / "in", "r", seed=30)
    code, out, err = run_cli("ingest", a, "--store", sqlite_url, "--jobs", "1")
    assert code == 0 and out.startswith("1 analysed"), err
    code, _, err = run_cli("worker", "--inbox", tmp_path / "nowhere", "--store", sqlite_url, "--once")
    assert code == 1 and err.strip() == f"harken: {tmp_path / 'nowhere'}: inbox folder does not exist"


def test_a_recording_the_store_refuses_is_quarantined_and_the_batch_goes_in(sqlite_url, tmp_path):
    from sqlalchemy import create_engine, text

    inbox = tmp_path / "inbox"
    # Sidecars are checked on read, so no sidecar gets a value the database refuses: a trigger makes the database
    # refuse one lot, as a constraint a site adds (or a full disk) would.
    Store.open(sqlite_url).close()
    engine = create_engine(sqlite_url)
    with engine.begin() as conn:
        conn.execute(text("CREATE TRIGGER refuse_lot BEFORE INSERT ON lots WHEN NEW.name = 'LREFUSED' "
                          "BEGIN SELECT RAISE(ABORT, 'lot refused by a site rule'); END"))
    engine.dispose()
    write_recording(inbox, "huge", sidecar=sidecar_dict(lot="LREFUSED"))
    for i in range(3):
        write_recording(inbox, f"ok{i}", seed=40 + i)
    s = run_worker(inbox, sqlite_url, once=True, jobs=1)
    assert (s.analysed, s.quarantined) == (3, 1)
    with Store.open(sqlite_url) as store:
        q = store.quarantine()
        assert store.check_integrity() == []
    assert list(q["file"]) == ["huge.flac"]
    assert q.loc[0, "reason"].startswith("huge.flac: analysed but could not be stored: ")
    assert "lot refused by a site rule" in q.loc[0, "reason"]


def test_without_once_the_worker_polls_until_interrupted(sqlite_url, tmp_path):
    import signal
    import subprocess
    import sys
    import time
    from pathlib import Path

    inbox = tmp_path / "inbox"
    inbox.mkdir()
    proc = subprocess.Popen(
        [sys.executable, "-m", "analysis.cli", "worker", "--inbox", str(inbox), "--store", sqlite_url,
         "--jobs", "1", "--interval-s", "0.2", "--settle-s", "0"],
        cwd=Path(__file__).resolve().parents[2], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    try:
        write_recording(inbox, "late", seed=50)  # delivered after the worker started
        deadline = time.monotonic() + 120
        while not (Path(sqlite_url[len("sqlite:///"):]).exists() and _n_actuations(sqlite_url) == 1):
            assert proc.poll() is None and time.monotonic() < deadline, proc.communicate()
            time.sleep(0.1)
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 130 and err.strip().endswith("harken: interrupted")
    assert "analysed   late.flac -> actuation 1" in err


def _n_actuations(url) -> int:
    with Store.open(url) as store:
        return len(store.actuations())


def test_a_quarantined_file_delivered_again_with_a_fixed_sidecar_is_analysed(store_url, tmp_path):
    inbox = tmp_path / "inbox"
    write_recording(inbox, "rec", seed=60)
    good_sidecar = (inbox / "rec.json").read_text()
    audio = (inbox / "rec.flac").read_bytes()
    (inbox / "rec.json").write_text("{not json")
    assert run_worker(inbox, store_url, once=True, jobs=1, files_dir=tmp_path).quarantined == 1
    (inbox / "rec.flac").write_bytes(audio)  # again, with the same broken sidecar: a plain duplicate
    (inbox / "rec.json").write_text("{not json")
    assert run_worker(inbox, store_url, once=True, jobs=1, files_dir=tmp_path).duplicates == 1
    (inbox / "rec.flac").write_bytes(audio)  # again, with the sidecar fixed
    (inbox / "rec.json").write_text(good_sidecar)
    s = run_worker(inbox, store_url, once=True, jobs=1, files_dir=tmp_path)
    assert (s.analysed, s.quarantined, s.duplicates) == (1, 0, 0)
    with Store.open(store_url, files_dir=tmp_path) as store:
        assert len(store.quarantine()) == 0 and len(store.actuations()) == 1 and len(store.recordings()) == 1
        assert list(store.audit_log()["action"]) == ["quarantine.retry"]
        assert store.check_integrity() == []


def test_the_pass_summary_names_every_count_that_is_not_zero():
    from analysis.worker import IngestSummary

    quiet = str(IngestSummary(analysed=3, elapsed_s=1.5))
    assert quiet.startswith("3 analysed, 0 quarantined, 0 already stored, 0 claimed by another worker in 1.5 s")
    assert "taken over" not in quiet and "gone" not in quiet
    loud = str(IngestSummary(analysed=1, lost=2, vanished=4, elapsed_s=1.0))
    assert "2 taken over by another worker while analysed" in loud
    assert "4 gone from the inbox before they were read" in loud


def test_archive_copies_reach_the_disk_before_the_commit_that_names_them(sqlite_url, tmp_path, monkeypatch):
    # The real os.fsync runs; the spy only notes which file or folder was flushed, and when the batch committed.
    import os

    import analysis.worker as worker
    from analysis.store import Store as RealStore

    events = []
    real_fsync, real_open = os.fsync, os.open
    opened = {}

    def spy_open(path, flags, *a, **k):
        fd = real_open(path, flags, *a, **k)
        opened[fd] = str(path)
        return fd

    def spy_fsync(fd):
        events.append(("fsync", opened.get(fd, "?")))
        return real_fsync(fd)

    real_commit = RealStore.commit_analyses

    def spy_commit(self, *a, **k):
        events.append(("commit", ""))
        return real_commit(self, *a, **k)

    monkeypatch.setattr(worker.os, "open", spy_open)
    monkeypatch.setattr(worker.os, "fsync", spy_fsync)
    monkeypatch.setattr(RealStore, "commit_analyses", spy_commit)
    inbox = tmp_path / "inbox"
    src = write_recording(inbox / "Site" / "Rig", "r1", seed=5)
    h = hashlib.sha256(src.read_bytes()).hexdigest()
    run_worker(inbox, sqlite_url, once=True, jobs=1, files_dir=tmp_path)
    folder = str(tmp_path / "harken-archive" / h[:2])
    commit = events.index(("commit", ""))
    flushed = [p for kind, p in events[:commit] if kind == "fsync"]
    assert any(p.endswith(f".{h}.flac.{os.getpid()}.tmp") for p in flushed), flushed  # the copy's bytes
    assert folder in flushed  # and the folder entry that names it
    assert (tmp_path / "harken-archive" / h[:2] / f"{h}.flac").exists()


def test_claims_of_a_stopped_worker_on_this_host_are_taken_over_at_once(sqlite_url, tmp_path):
    # Two recordings were claimed a moment ago: one by a process of this host that has ended (a worker killed
    # mid-batch), one by a process that still runs. A new worker takes the first at once, not after the 300 s
    # claim timeout, and leaves the second to its holder.
    import socket
    import subprocess
    import sys

    from analysis.worker import stopped_here

    host = socket.gethostname()
    ended = subprocess.Popen([sys.executable, "-c", "pass"])
    ended.wait()
    running = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        inbox = tmp_path / "inbox"
        a = write_recording(inbox / "S" / "R", "a", seed=11)
        b = write_recording(inbox / "S" / "R", "b", seed=12)
        with Store.open(sqlite_url, files_dir=tmp_path) as store:
            for path, pid in ((a, ended.pid), (b, running.pid)):
                data = path.read_bytes()
                c = store.claim(hashlib.sha256(data).hexdigest(), f"S/R/{path.name}", len(data),
                                worker=f"{host}:{pid}", claim_timeout_s=300)
                assert c.kind == "new"
        assert stopped_here(f"{host}:{ended.pid}") and not stopped_here(f"{host}:{running.pid}")
        assert not stopped_here(f"elsewhere.example:{ended.pid}") and not stopped_here("no-pid-here")
        run_worker(inbox, sqlite_url, once=True, jobs=1, files_dir=tmp_path)
        with Store.open(sqlite_url, files_dir=tmp_path) as store:
            recs = store.recordings().set_index("original_name")
        assert recs.at["S/R/a.flac", "status"] == "analysed"
        assert recs.at["S/R/b.flac", "status"] == "claimed"
    finally:
        running.kill()
        running.wait()


def test_a_heartbeat_keeps_live_claims_and_a_stopped_one_lets_them_go(store_url, tmp_path):
    # A claim timeout of 3 s and a heartbeat every 0.1 s (a real thread on the real store): while it beats for
    # 4 s, longer than the timeout, another worker finds the recording busy; once it stops, the claim ages out.
    import time

    from analysis.worker import Heartbeat

    with Store.open(store_url, files_dir=tmp_path) as store:
        first = store.claim("a" * 64, "x.flac", 10, worker="host-a:1", claim_timeout_s=3.0)
        other = store.claim("b" * 64, "y.flac", 10, worker="host-b:2", claim_timeout_s=3.0)
        assert first.kind == other.kind == "new"
        with Heartbeat(store, "host-a:1", interval_s=0.1) as beat:
            time.sleep(4.0)
            assert store.claim("a" * 64, "x.flac", 10, worker="host-c:3", claim_timeout_s=3.0).kind == "busy"
        assert beat.beats >= 5
        # the other worker's claim was not renewed by host-a's heartbeat: it has aged out
        assert store.claim("b" * 64, "y.flac", 10, worker="host-c:3", claim_timeout_s=3.0).kind == "retry"
        time.sleep(3.5)
        assert store.claim("a" * 64, "x.flac", 10, worker="host-c:3", claim_timeout_s=3.0).kind == "retry"


def test_the_worker_scores_with_a_reference_built_while_it_runs(store_copy):
    # The worker's model cache re-reads the active models when their ids change (checked every check_s): a
    # recording analysed after a build in the middle of a pass is scored with the new version.
    from analysis.references import build_reference
    from analysis.worker import ActiveModels

    with Store.open(store_copy, create=False) as store:
        fresh, lazy = ActiveModels(store, check_s=0.0), ActiveModels(store, check_s=3600.0)
        before = {e: mid for e, (mid, _) in fresh.get("demo-dpi").items()}
        assert {e: mid for e, (mid, _) in lazy.get("demo-dpi").items()} == before
        (made,) = build_reference(store, "demo-dpi", ["metering_click"], ["L2601", "L2602"])
        after = {e: mid for e, (mid, _) in fresh.get("demo-dpi").items()}
        assert after == {**before, "metering_click": made.model_id} and after != before
        # within its check interval the cache does not ask the store at all
        assert {e: mid for e, (mid, _) in lazy.get("demo-dpi").items()} == before
