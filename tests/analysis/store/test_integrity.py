"""Store.check_integrity and `harken check integrity` on a real store filled by the worker: the checksums of
reference models, flag sets and QC result sets catch a row changed behind Harken's back, and the archive is
compared with what the store says it keeps."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from sqlalchemy import create_engine, text

from analysis.references import build_reference
from analysis.store import Store
from analysis.worker import ingest_paths
from tests.analysis.conftest import run_cli
from tests.conftest import sidecar_dict, synth_actuation, write_recording

DIFFERS = "content differs from its checksum (changed after it was written)"


@pytest.fixture(scope="module")
def recordings(tmp_path_factory):
    """Twelve recordings: eight of lot R1, four of lot T1 of which one is clipped and one noisy."""
    inbox = tmp_path_factory.mktemp("integrity-inbox")
    paths = [write_recording(inbox, f"r{i:02d}", seed=i, sidecar=sidecar_dict(lot="R1" if i < 8 else "T1",
                                                                            unit=f"U{i:02d}")) for i in range(10)]
    mic, marker = synth_actuation(seed=20)
    paths.append(write_recording(inbox, "clipped", data=np.column_stack([np.clip(mic * 10, -1, 1), marker]),
                                 sidecar=sidecar_dict(lot="T1", unit="U20")))
    mic, marker = synth_actuation(seed=21, noise_rms=0.02)
    paths.append(write_recording(inbox, "noisy", data=np.column_stack([mic, marker]),
                                 sidecar=sidecar_dict(lot="T1", unit="U21")))
    return paths


@pytest.fixture
def filled(store_url, tmp_path, recordings):
    """(url, files_dir) of a new store holding the twelve recordings analysed by the worker, with reference models
    fitted on lot R1 and every actuation scored: there are QC flags (the clipped one) and model flags."""
    files = tmp_path / "files"
    summary = ingest_paths(recordings, store_url, 1, files_dir=files, progress=False)
    assert summary.analysed == 12
    with Store.open(store_url, files_dir=files) as store:
        build_reference(store, "demo-dpi", None, ["R1"], created_by="integrity-test")
    return store_url, files


def _sql(url, statement, **params):
    """Run one statement on the store's database directly, outside Harken; returns the rows of a SELECT."""
    engine = create_engine(url)
    try:
        with engine.begin() as conn:
            result = conn.execute(text(statement), params)
            return result.all() if result.returns_rows else result.rowcount
    finally:
        engine.dispose()


def _check(url, files_dir, **options) -> list[str]:
    with Store.open(url, files_dir=files_dir, create=False) as store:
        return store.check_integrity(**options)


def _model(url, event="metering_click"):
    return _sql(url, "SELECT id, version FROM reference_models WHERE event = :e", e=event)[0]


def _model_flag(url):
    """(flag id, actuation id, event, model id) of one flag a model raised."""
    return _sql(url, "SELECT id, actuation_id, event, model_id FROM flags WHERE model_id IS NOT NULL "
                     "ORDER BY id")[0]


def _qc_flag(url):
    return _sql(url, "SELECT f.id, f.actuation_id, a.recording_id FROM flags f JOIN actuations a "
                     "ON a.id = f.actuation_id WHERE f.model_id IS NULL ORDER BY f.id")[0]


def test_a_store_filled_by_the_worker_is_whole(filled):
    url, files = filled
    # what the changes below rely on: models, model flags and QC flags are there, every row has its checksum
    assert _sql(url, "SELECT count(*) FROM reference_models WHERE content_sha256 IS NOT NULL")[0][0] == 2
    assert _sql(url, "SELECT count(*) FROM trajectories WHERE flags_sha256 IS NOT NULL")[0][0] == 24
    assert _sql(url, "SELECT count(*) FROM actuations WHERE qc_sha256 IS NOT NULL")[0][0] == 12
    assert _sql(url, "SELECT count(*) FROM flags WHERE model_id IS NOT NULL")[0][0] > 0
    assert [r.statistic for r in _sql(url, "SELECT statistic FROM flags WHERE model_id IS NULL")] == ["qc:clipping"]
    assert _check(url, files) == []


@pytest.mark.parametrize("change", [
    "t2_limit = t2_limit * 1.5",
    "reference_lots = '[\"R1\", \"T1\"]'",
    "created_by = 'someone else'",
    "model_json = model_json || ' '",
])
def test_a_changed_model_row_is_listed_by_id(filled, change):
    url, files = filled
    model_id, version = _model(url)
    assert _sql(url, f"UPDATE reference_models SET {change} WHERE id = :i", i=model_id) == 1
    assert _check(url, files) == [f"reference model {model_id} (demo-dpi/metering_click version {version}): "
                                  f"{DIFFERS}"]


def test_a_changed_model_blob_is_listed(filled):
    url, files = filled
    model_id, version = _model(url, "dose_release")
    (npz,) = _sql(url, "SELECT model_npz FROM reference_models WHERE id = :i", i=model_id)[0]
    flipped = bytes(npz[:-1]) + bytes([npz[-1] ^ 1])  # one bit of the arrays file
    _sql(url, "UPDATE reference_models SET model_npz = :b WHERE id = :i", b=flipped, i=model_id)
    assert _check(url, files) == [f"reference model {model_id} (demo-dpi/dose_release version {version}): {DIFFERS}"]


def test_a_model_row_without_checksum_and_a_status_change(filled):
    url, files = filled
    model_id, version = _model(url)
    # the status is outside the checksum: activating or retiring a version is a change of its own (audited)
    _sql(url, "UPDATE reference_models SET status = 'retired' WHERE id = :i", i=model_id)
    assert _check(url, files) == []
    _sql(url, "UPDATE reference_models SET content_sha256 = NULL WHERE id = :i", i=model_id)
    assert _check(url, files) == [f"reference model {model_id} (demo-dpi/metering_click version {version}): no "
                                  "checksum (the row was written or changed outside Harken)"]


@pytest.mark.parametrize("statement", [
    "UPDATE flags SET value = value * 0.5 WHERE id = :f",
    "DELETE FROM flags WHERE id = :f",
    "UPDATE trajectories SET t2_max = t2_max + 1 WHERE actuation_id = :a AND event = :e AND model_id = :m",
    "UPDATE trajectories SET flagged = NOT flagged WHERE actuation_id = :a AND event = :e AND model_id = :m",
    "UPDATE trajectories SET t2_f32 = NULL WHERE actuation_id = :a AND event = :e AND model_id = :m",
])
def test_a_changed_flag_set_is_listed_by_actuation_event_and_model(filled, statement):
    url, files = filled
    flag_id, actuation_id, event, model_id = _model_flag(url)
    assert _sql(url, statement, f=flag_id, a=actuation_id, e=event, m=model_id) == 1
    assert _check(url, files) == [f"actuation {actuation_id}, event {event!r} under model {model_id}: statistics and "
                                  f"their flags: {DIFFERS}"]


def test_a_flag_added_outside_harken_is_listed(filled):
    url, files = filled
    _, actuation_id, _, model_id = _model_flag(url)
    _sql(url, "INSERT INTO flags (actuation_id, model_id, event, statistic, value, limit_value, reason, created_at) "
              "VALUES (:a, :m, 'invented_event', 't2', 9.0, 1.0, 'planted', '2026-01-01 00:00:00')",
         a=actuation_id, m=model_id)
    assert _check(url, files) == [f"actuation {actuation_id}, event 'invented_event' under model {model_id}: 1 "
                                  "flag(s) with no statistics row (added outside Harken?)"]


@pytest.mark.parametrize("statement", [
    "UPDATE qc_results SET value = value + 1 WHERE recording_id = :r AND check_name = 'snr'",
    "UPDATE qc_results SET passed = NOT passed WHERE recording_id = :r AND check_name = 'dc_offset'",
    "DELETE FROM qc_results WHERE recording_id = :r AND check_name = 'silence'",
    "UPDATE actuations SET passed_qc = NOT passed_qc WHERE id = :a",
    "DELETE FROM flags WHERE id = :f",
])
def test_a_changed_qc_result_set_is_listed_by_actuation(filled, statement):
    url, files = filled
    flag_id, actuation_id, recording_id = _qc_flag(url)
    assert _sql(url, statement, f=flag_id, a=actuation_id, r=recording_id) == 1
    assert _check(url, files) == [f"actuation {actuation_id}: quality-check results and their flags: {DIFFERS}"]


def test_a_write_that_leaves_the_values_as_they_were_is_no_change(filled):
    url, files = filled
    model_id, _ = _model(url)
    _, actuation_id, recording_id = _qc_flag(url)
    _sql(url, "UPDATE reference_models SET t2_limit = t2_limit WHERE id = :i", i=model_id)
    _sql(url, "UPDATE qc_results SET value = value WHERE recording_id = :r", r=recording_id)
    _sql(url, "UPDATE trajectories SET t2_max = t2_max WHERE actuation_id = :a", a=actuation_id)
    assert _check(url, files) == []


def test_changes_to_several_kinds_of_row_are_each_listed(filled):
    url, files = filled
    model_id, version = _model(url)
    flag_id, actuation_id, event, flag_model = _model_flag(url)
    _, qc_actuation, qc_recording = _qc_flag(url)
    _sql(url, "UPDATE reference_models SET spe_limit = spe_limit + 1 WHERE id = :i", i=model_id)
    _sql(url, "UPDATE flags SET value = value + 1 WHERE id = :f", f=flag_id)
    _sql(url, "UPDATE qc_results SET value = value + 1 WHERE recording_id = :r AND check_name = 'duration'",
         r=qc_recording)
    problems = _check(url, files)
    assert sorted(problems) == sorted([
        f"reference model {model_id} (demo-dpi/metering_click version {version}): {DIFFERS}",
        f"actuation {actuation_id}, event {event!r} under model {flag_model}: statistics and their flags: {DIFFERS}",
        f"actuation {qc_actuation}: quality-check results and their flags: {DIFFERS}",
    ])
    assert _check(url, files, checksums=False) == []


def _archived(url):
    """(recording id, archived copy path) of one analysed recording."""
    return _sql(url, "SELECT id, archive_path FROM recordings WHERE status = 'analysed' ORDER BY id")[0]


def test_a_file_in_the_archive_that_no_recording_points_to_is_an_orphan(filled):
    url, files = filled
    with Store.open(url, files_dir=files, create=False) as store:
        archive = store.archive_dir
    stray = archive / "ab" / "stray.flac"
    stray.parent.mkdir(parents=True, exist_ok=True)
    write_recording(stray.parent, "stray", sidecar=False, seed=99)
    (archive / "ab" / "stray.json").write_text("{}")
    assert sorted(_check(url, files)) == [
        f"{archive.name}/ab/stray.flac: no recording in the store points to this file (an orphan)",
        f"{archive.name}/ab/stray.json: no recording in the store points to this file (an orphan)",
    ]
    assert _check(url, files, files=False) == []


def test_a_temporary_copy_left_in_the_archive_is_listed(filled):
    url, files = filled
    with Store.open(url, files_dir=files, create=False) as store:
        archive = store.archive_dir
    (archive / "00").mkdir(exist_ok=True)
    (archive / "00" / ".half.flac.tmp").write_bytes(b"RIFF")
    assert _check(url, files) == [f"{archive.name}/00/.half.flac.tmp: a temporary copy left by a stopped worker "
                                  "(the next worker removes it)"]


def test_a_deleted_archive_file_is_listed_as_missing(filled):
    url, files = filled
    recording_id, archive_path = _archived(url)
    with Store.open(url, files_dir=files, create=False) as store:
        shown = str(Path(archive_path).relative_to(store.files_dir))
    Path(archive_path).unlink()
    assert _check(url, files) == [f"recording {recording_id} (analysed): its kept copy {shown} is missing"]
    assert _check(url, files, files=False) == []


def test_a_deleted_archived_sidecar_is_listed_as_missing(filled):
    url, files = filled
    recording_id, archive_path = _archived(url)
    side = Path(archive_path).with_suffix(".json")
    with Store.open(url, files_dir=files, create=False) as store:
        shown = str(side.relative_to(store.files_dir))
    side.unlink()
    assert _check(url, files) == [f"recording {recording_id} (analysed): its archived sidecar {shown} is missing"]


def test_an_archived_recording_changed_in_place_is_found_by_hashing_it_again(filled):
    import hashlib

    url, files = filled
    recording_id, archive_path = _archived(url)
    kept = Path(archive_path)
    filed_as = kept.stem
    assert _check(url, files, contents=True) == []
    data = bytearray(kept.read_bytes())
    data[-1] ^= 0xFF  # one bit pattern in the last byte: same size, same name
    kept.write_bytes(bytes(data))
    now = hashlib.sha256(bytes(data)).hexdigest()  # the standard library's SHA-256 as the outside check
    assert _check(url, files) == []  # without contents only presence is checked
    problems = _check(url, files, contents=True)
    assert len(problems) == 1 and problems[0].startswith(f"recording {recording_id} (analysed): its archived copy ")
    assert f"SHA-256 {now[:12]}…, filed as {filed_as[:12]}…" in problems[0]
    code, out, _ = run_cli("check", "integrity", "--store", url, "--files", files, "--contents")
    assert code == 1 and "has changed" in out


def test_the_command_exits_0_on_a_whole_store_and_1_listing_what_changed(filled):
    url, files = filled
    code, out, err = run_cli("check", "integrity", "--store", url, "--files", files)
    assert (code, err) == (0, "")
    assert out.strip().endswith("12 recordings checked, 0 problem(s): every row matches its checksum and every kept "
                                "file is in place")

    model_id, version = _model(url)
    _, qc_actuation, qc_recording = _qc_flag(url)
    recording_id, archive_path = _archived(url)
    _sql(url, "UPDATE reference_models SET t2_limit = t2_limit * 2 WHERE id = :i", i=model_id)
    _sql(url, "UPDATE qc_results SET value = value + 1 WHERE recording_id = :r AND check_name = 'snr'",
         r=qc_recording)
    Path(archive_path).unlink()
    code, out, err = run_cli("check", "integrity", "--store", url, "--files", files)
    lines = out.strip().splitlines()
    assert code == 1 and err == ""
    assert set(lines[:-1]) == {
        f"reference model {model_id} (demo-dpi/metering_click version {version}): {DIFFERS}",
        f"actuation {qc_actuation}: quality-check results and their flags: {DIFFERS}",
        f"recording {recording_id} (analysed): its kept copy "
        f"{Path(archive_path).relative_to(files)} is missing",
    }
    assert lines[-1].endswith(": 12 recordings checked, 3 problem(s)")

    code, out, _ = run_cli("check", "integrity", "--store", url, "--files", files, "--no-files")
    assert code == 1 and "is missing" not in out and out.strip().endswith("2 problem(s)")
