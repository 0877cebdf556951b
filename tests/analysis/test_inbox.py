"""The complete-file rule (Arrivals, on an explicit clock), the inbox's file states, and the event watcher."""

from __future__ import annotations

import os
import threading
from pathlib import Path

import pytest

from analysis.errors import AnalysisError
from analysis.inbox import Arrivals, FileState, InboxWatcher, inbox_states
from tests.conftest import write_recording

A, B = Path("in/a.flac"), Path("in/b.flac")
WITH = (10, 1)  # a sidecar of 10 bytes, mtime 1 ns


def _rule(**over) -> Arrivals:
    kw = {"settle_s": 2.0, "sidecar_wait_s": 60.0, "retry_s": 5.0} | over
    return Arrivals(**kw)


def test_a_file_is_taken_only_after_it_kept_its_size_and_time_for_the_settle_interval():
    rule = _rule()
    rule.observe({A: FileState(100, 1, WITH)}, 0.0)
    assert rule.ready(0.0) == [] and rule.next_due_s(0.0) == pytest.approx(2.0)
    rule.observe({A: FileState(200, 2, WITH)}, 1.5)  # it grew: the interval starts again
    assert rule.ready(3.0) == [] and rule.next_due_s(3.0) == pytest.approx(0.5)
    rule.observe({A: FileState(200, 3, WITH)}, 3.4)  # same size, new mtime (written in place): again
    assert rule.ready(5.0) == []
    rule.observe({A: FileState(200, 3, WITH)}, 5.4)
    assert rule.ready(5.4) == [A]
    assert rule.ready(5.5) == [] and rule.pending() == 0  # handed over once


def test_a_sidecar_written_after_the_recording_restarts_the_interval_and_a_changing_one_holds_it():
    rule = _rule()
    rule.observe({A: FileState(100, 1, None)}, 0.0)
    assert rule.ready(10.0) == []  # no sidecar yet: it waits (up to sidecar_wait_s)
    rule.observe({A: FileState(100, 1, (5, 1))}, 10.0)
    assert rule.ready(11.0) == []
    rule.observe({A: FileState(100, 1, (9, 2))}, 11.0)  # the sidecar still being written
    assert rule.ready(12.9) == []
    assert rule.ready(13.0) == [A]


def test_a_recording_whose_sidecar_never_comes_is_taken_after_the_sidecar_wait():
    rule = _rule(sidecar_wait_s=30.0)
    rule.observe({A: FileState(100, 1, None)}, 0.0)
    assert rule.ready(29.9) == [] and rule.next_due_s(0.0) == pytest.approx(30.0)
    assert rule.ready(30.0) == [A]
    assert rule.without_sidecar([A]) == [A]


def test_a_link_needs_no_sidecar_it_is_refused_anyway():
    rule = _rule(settle_s=0.0)
    rule.observe({A: FileState(12, 1, None, link=True), B: FileState(12, 1, None)}, 0.0)
    assert rule.ready(0.0) == [A] and rule.without_sidecar([A]) == []


def test_a_file_left_in_the_inbox_is_handed_again_after_the_retry_interval_or_when_it_changes():
    rule = _rule(settle_s=0.0, retry_s=5.0)
    rule.observe({A: FileState(1, 1, WITH), B: FileState(1, 1, WITH)}, 0.0)
    assert rule.ready(0.0) == [A, B]
    rule.observe({A: FileState(1, 1, WITH), B: FileState(2, 2, WITH)}, 1.0)  # B delivered again, changed
    assert rule.ready(1.0) == [B]
    assert rule.ready(4.9) == []
    assert rule.ready(5.0) == [A]  # still there (claimed by another worker): tried again


def test_a_file_gone_from_the_inbox_is_forgotten():
    rule = _rule(settle_s=0.0)
    rule.observe({A: FileState(1, 1, WITH)}, 0.0)
    rule.observe({}, 1.0)
    assert rule.ready(1.0) == [] and rule.next_due_s(1.0) is None and rule.pending() == 0


@pytest.mark.parametrize("name", ["settle_s", "sidecar_wait_s", "retry_s"])
def test_a_negative_interval_is_refused_by_name(name):
    with pytest.raises(AnalysisError, match=f"{name} must be a number of seconds >= 0, got -1"):
        _rule(**{name: -1})


def test_inbox_states_see_a_growing_file_and_its_sidecar(tmp_path):
    rec = write_recording(tmp_path / "inbox" / "rig", "r1", sidecar=False)
    first = inbox_states(tmp_path / "inbox")
    assert list(first) == [rec] and first[rec].sidecar is None and first[rec].size == rec.stat().st_size
    with open(rec, "ab") as f:
        f.write(b"\0" * 1000)
    rec.with_suffix(".json").write_text("{}")
    second = inbox_states(tmp_path / "inbox")[rec]
    assert second.size == first[rec].size + 1000 and second.sidecar == (2, rec.with_suffix(".json").stat().st_mtime_ns)


def test_inbox_states_count_a_sidecar_that_is_a_link_and_see_a_link_itself(tmp_path):
    inbox = tmp_path / "inbox"
    rec = write_recording(inbox, "r1", sidecar=False)
    (tmp_path / "outside.json").write_text("{}")
    rec.with_suffix(".json").symlink_to(tmp_path / "outside.json")
    outside = write_recording(tmp_path / "elsewhere", "x")
    (inbox / "link.flac").symlink_to(outside)
    states = inbox_states(inbox)
    assert states[rec].sidecar is not None and not states[rec].link
    assert states[inbox / "link.flac"].link and states[inbox / "link.flac"].size == len(os.fsencode(outside))


def test_the_watcher_wakes_on_a_rename_into_a_subfolder_and_not_on_reading(tmp_path):
    inbox = tmp_path / "inbox"
    (inbox / "rig").mkdir(parents=True)
    src = write_recording(tmp_path, "src")
    with InboxWatcher(inbox, mode="events") as w:
        assert w.events and "InotifyObserver" in w.how
        tmp = inbox / "rig" / ".r1.flac.part"
        tmp.write_bytes(src.read_bytes())
        assert w.wait(10.0)
        while w.wait(0.7):  # the events of the write, until they are over
            pass
        os.replace(tmp, inbox / "rig" / "r1.flac")
        assert w.wait(10.0)
        while w.wait(0.7):
            pass
        (inbox / "rig" / "r1.flac").read_bytes()  # the worker's own reads must not wake it again
        assert not w.wait(0.7)


def test_the_watcher_in_poll_mode_starts_no_events_and_an_unknown_mode_is_refused(tmp_path):
    with InboxWatcher(tmp_path, mode="poll") as w:
        assert not w.events and w.how == "polling"
        (tmp_path / "x.flac").write_bytes(b"1")
        assert not w.wait(0.3)
    with pytest.raises(AnalysisError, match="watch mode must be one of auto, events, poll, got 'inotify'"):
        InboxWatcher(tmp_path, mode="inotify")


def test_events_mode_names_the_folder_when_events_cannot_be_had(tmp_path):
    missing = tmp_path / "not-there"
    with pytest.raises(AnalysisError, match=f"{missing}: cannot watch the inbox with file-system events"):
        InboxWatcher(missing, mode="events").start()
    lines = []
    w = InboxWatcher(missing, mode="auto", log=lines.append).start()
    assert not w.events and w.how == "polling" and "polling instead" in lines[0]
    w.stop()


def test_the_watcher_stops_its_thread(tmp_path):
    before = threading.active_count()
    w = InboxWatcher(tmp_path, mode="events").start()
    assert threading.active_count() > before
    w.stop()
    assert threading.active_count() == before
