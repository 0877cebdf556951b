"""The hostile-input suite against the worker (tests/hostile.py makes the cases): every delivery ends as its case
says, with a reason that names the file and no server path, nothing is taken from outside the inbox, the worker
finishes its pass, and the store and its files are whole afterwards."""

from __future__ import annotations

import os

import pytest

from analysis.store import Store
from analysis.worker import run_worker
from tests.hostile import make_hostile_inbox, readme_table


@pytest.fixture
def hostile(tmp_path):
    return tmp_path, make_hostile_inbox(tmp_path)


@pytest.mark.parametrize("jobs", [1, 2])
def test_every_hostile_delivery_ends_as_its_case_says(store_url, hostile, jobs):
    folder, cases = hostile
    assert len(cases) >= 40 and len({c.key for c in cases}) == len(cases)
    inbox = folder / "inbox"
    files = folder / "files"
    summary = run_worker(inbox, store_url, once=True, jobs=jobs, files_dir=files)
    with Store.open(store_url, files_dir=files, create=False) as store:
        quarantined = store.quarantine().set_index("file")["reason"].to_dict()
        rows = store.export_actuations().set_index("file")
        analysed = set(rows.index)
        problems = store.check_integrity()
        sidecars = " ".join(str(t) for t in store.recordings().get("sidecar_json", []))
    for c in cases:
        if c.outcome == "quarantine":
            assert c.file in quarantined, (c.key, c.file)
            assert c.reason in quarantined[c.file], (c.key, quarantined[c.file])
            assert quarantined[c.file].startswith(c.file + ":"), (c.key, quarantined[c.file])
        elif c.outcome == "analysed":
            assert c.file in analysed, (c.key, c.file, quarantined.get(c.file))
            failed = rows.loc[c.file, "qc_failed"].split(",") if rows.loc[c.file, "qc_failed"] else []
            assert (c.check in failed) if c.check else failed == [], (c.key, failed)
        elif c.outcome == "duplicate":
            assert c.file not in analysed and c.file not in quarantined
            assert not (inbox / c.file).exists()
        else:  # skipped: left where it was, not in the store
            assert os.path.lexists(inbox / c.file) and c.file not in analysed and c.file not in quarantined
    assert len(quarantined) == sum(c.outcome == "quarantine" for c in cases)  # nothing else was refused
    twins = sum(c.outcome == "duplicate" for c in cases)  # the first of each pair is analysed
    assert (summary.analysed, summary.quarantined, summary.duplicates) == (
        sum(c.outcome == "analysed" for c in cases) + twins, len(quarantined), twins)
    for reason in quarantined.values():  # the server's own paths stay out of the store
        assert str(folder) not in reason and "Traceback" not in reason
    assert problems == []  # every row whole and matching its checksum; no orphan, nothing left half-copied
    # Nothing from outside the inbox: the link targets are where they were, unread and uncopied.
    assert (folder / "outside" / "secret.flac").exists() and (folder / "outside" / "passwords.txt").exists()
    kept = " ".join(p.read_bytes().decode("latin-1") for p in (files).rglob("*") if p.is_file())
    assert "hunter2" not in kept and "hunter2" not in sidecars
    assert not any(p.name.startswith(("secret", "inside")) for p in files.rglob("*"))
    # The inbox keeps only what is not taken (and the stray profile file, which is no recording).
    left = sorted(os.listdir(inbox))
    assert left == sorted([".partial.flac", ".partial.json", "folder.flac", "loose.toml"])


def test_a_second_pass_over_the_same_deliveries_changes_nothing(sqlite_url, hostile):
    folder, cases = hostile
    inbox = folder / "inbox"
    first = run_worker(inbox, sqlite_url, once=True, jobs=1, files_dir=folder / "files")
    again = run_worker(inbox, sqlite_url, once=True, jobs=1, files_dir=folder / "files")
    assert first.quarantined > 40 and (again.analysed, again.quarantined) == (0, 0)
    with Store.open(sqlite_url, files_dir=folder / "files") as store:
        assert store.check_integrity() == []


def test_the_readme_lists_every_case_of_the_suite(tmp_path):
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    table = readme_table(make_hostile_inbox(tmp_path))
    assert table in readme, "README's reliability section: paste tests.hostile.readme_table() there"
