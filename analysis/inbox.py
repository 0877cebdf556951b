"""The inbox as the worker watches it: which delivered recordings are complete, and what wakes the worker.

A rig (or a copier) writes a recording and its sidecar over some time; the worker must not take a file while it
is still growing. The rule: a recording is taken once its size and modification time, and those of its sidecar,
were unchanged over ``settle_s`` of the worker's own clock (two looks, not the file's mtime against the clock: a
network folder stamps files with the server's clock) AND its sidecar is there. A recording whose sidecar has not
come ``sidecar_wait_s`` after it was first seen is taken without one, and quarantined for that as before.

What wakes the worker: file-system events (watchdog) where the folder delivers them, and a scan every ``poll_s``
in any case (a network folder mounted here delivers no events for files written by another machine).
"""

from __future__ import annotations

import os
import stat
import threading
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path

from .errors import AnalysisError
from .io import AUDIO_SUFFIXES, is_recording, sidecar_path

__all__ = ["FileState", "Arrivals", "InboxWatcher", "inbox_states", "find_inbox_files", "WATCH_MODES",
           "DEFAULT_SETTLE_S", "DEFAULT_SIDECAR_WAIT_S", "DEFAULT_POLL_S"]

#: A delivered recording (and its sidecar) must keep its size and mtime this long before it is taken.
DEFAULT_SETTLE_S = 2.0
#: A recording whose sidecar has not come this long after it was first seen is taken (and quarantined) without.
DEFAULT_SIDECAR_WAIT_S = 60.0
#: The inbox is scanned this often even when events are delivered (events can be lost or never come).
DEFAULT_POLL_S = 5.0
#: How the worker learns of new files: events with polling as fallback, events required, polling only.
WATCH_MODES = ("auto", "events", "poll")


def find_inbox_files(inbox: Path) -> list[Path]:
    """Recordings in the inbox tree (analysis.io.is_recording), by name, and the symbolic links among them (which
    the worker refuses: it takes in nothing from outside the inbox)."""
    out = []
    for p in sorted(Path(inbox).rglob("*")):
        if p.is_symlink():
            if not p.name.startswith(".") and (p.suffix.lower() in AUDIO_SUFFIXES or p.is_dir()):
                out.append(p)  # a recording or a folder of them by link: refused later, with its reason, unread
            continue
        if is_recording(p):
            out.append(p)
    return out


@dataclass(frozen=True)
class FileState:
    """What one look saw of a delivered recording: size (bytes) and mtime (ns) of the file itself (a link: of the
    link, never its target), and of its sidecar (None: no sidecar yet). A link needs no sidecar: it is refused."""

    size: int
    mtime_ns: int
    sidecar: tuple[int, int] | None
    link: bool = False


def _state(path: Path) -> FileState | None:
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        return None
    if stat.S_ISLNK(st.st_mode):
        return FileState(st.st_size, st.st_mtime_ns, None, link=True)
    try:
        side = os.lstat(sidecar_path(path))  # a sidecar that is a link counts as there: read_sidecar refuses it
        sidecar = (side.st_size, side.st_mtime_ns)
    except FileNotFoundError:
        sidecar = None
    return FileState(st.st_size, st.st_mtime_ns, sidecar)


def inbox_states(inbox: Path, only: Iterable[Path] | None = None) -> dict[Path, FileState]:
    """{recording: its FileState} of every delivered file in the inbox tree now (``only``: of those paths)."""
    paths = find_inbox_files(inbox) if only is None else list(only)
    out = {}
    for p in paths:
        s = _state(p)
        if s is not None:
            out[p] = s
    return out


@dataclass
class _Seen:
    state: FileState
    since_s: float  # when this state was first seen (the worker's monotonic clock)
    first_s: float  # when the file was first seen at all
    handed: FileState | None = None  # the state it had when it was last handed to the worker ...
    handed_s: float = 0.0  # ... and when


class Arrivals:
    """The complete-file rule over successive looks at the inbox (``observe``), on the caller's clock (s).

    ``ready`` returns the recordings to take now: stable for ``settle_s`` with their sidecar there, or stable and
    without a sidecar for ``sidecar_wait_s`` since first seen. A file handed over that is still in the inbox
    later (claimed by another worker) is handed again when it changes or after ``retry_s``.
    """

    def __init__(self, *, settle_s: float, sidecar_wait_s: float, retry_s: float):
        for name, v in (("settle_s", settle_s), ("sidecar_wait_s", sidecar_wait_s), ("retry_s", retry_s)):
            if not v >= 0:
                raise AnalysisError(f"{name} must be a number of seconds >= 0, got {v!r}")
        self.settle_s, self.sidecar_wait_s, self.retry_s = float(settle_s), float(sidecar_wait_s), float(retry_s)
        self._seen: dict[Path, _Seen] = {}

    def observe(self, states: dict[Path, FileState], now_s: float) -> None:
        """One look at the inbox: files not in ``states`` are gone and forgotten."""
        for p in list(self._seen):
            if p not in states:
                del self._seen[p]
        for p, s in states.items():
            seen = self._seen.get(p)
            if seen is None:
                self._seen[p] = _Seen(s, now_s, now_s)
            elif seen.state != s:
                seen.state, seen.since_s = s, now_s  # it changed: the settle interval starts again

    def _due_s(self, seen: _Seen) -> float:
        """When (on the caller's clock) the file may be taken, as far as the rule goes."""
        due = seen.since_s + self.settle_s
        if seen.state.sidecar is None and not seen.state.link:
            due = max(due, seen.first_s + self.sidecar_wait_s)
        if seen.handed is not None and seen.handed == seen.state:
            due = max(due, seen.handed_s + self.retry_s)
        return due

    def ready(self, now_s: float) -> list[Path]:
        """The recordings to take now, by name; each is marked as handed over."""
        out = []
        for p in sorted(self._seen):
            seen = self._seen[p]
            if self._due_s(seen) <= now_s:
                seen.handed, seen.handed_s = seen.state, now_s
                out.append(p)
        return out

    def without_sidecar(self, paths: Iterable[Path]) -> list[Path]:
        """Those of ``paths`` whose sidecar was not there at the last look (a link needs none)."""
        return [p for p in paths if p in self._seen and self._seen[p].state.sidecar is None
                and not self._seen[p].state.link]

    def next_due_s(self, now_s: float) -> float | None:
        """Seconds from ``now_s`` until the next file may be taken (0 when one may now), None when none waits."""
        dues = [self._due_s(s) for s in self._seen.values()]
        return max(0.0, min(dues) - now_s) if dues else None

    def pending(self) -> int:
        """Files seen and not handed over in their present state."""
        return sum(1 for s in self._seen.values() if s.handed != s.state)


class InboxWatcher:
    """File-system events under ``inbox`` (recursively) as a wake-up: ``wait(timeout_s)`` returns True as soon as
    a file was created, written, closed after writing, moved or removed there, False after the timeout.

    ``mode``: "events" needs native events (an error names the folder and why when they cannot be had);
    "auto" uses them when they can be had and otherwise only the timeout (polling); "poll" never starts them.
    ``how`` says which it is, for the log.
    """

    def __init__(self, inbox: Path, *, mode: str = "auto", log: Callable[[str], None] = lambda m: None):
        if mode not in WATCH_MODES:
            raise AnalysisError(f"watch mode must be one of {', '.join(WATCH_MODES)}, got {mode!r}")
        self.inbox, self.mode, self.log = Path(inbox), mode, log
        self.how = "polling"
        self._wake = threading.Event()
        self._observer = None

    def start(self) -> InboxWatcher:
        if self.mode == "poll":
            return self
        try:
            self._observer = self._start_observer()
            self.how = f"file-system events ({type(self._observer).__name__})"
        except (OSError, RuntimeError, AnalysisError) as exc:
            if self.mode == "events":
                raise AnalysisError(f"{self.inbox}: cannot watch the inbox with file-system events ({exc}); "
                                    "use --watch poll for this folder") from None
            self.log(f"{self.inbox}: no file-system events ({exc}); polling instead")
        return self

    def _start_observer(self):
        from watchdog.events import (
            EVENT_TYPE_CLOSED,
            EVENT_TYPE_CREATED,
            EVENT_TYPE_DELETED,
            EVENT_TYPE_MODIFIED,
            EVENT_TYPE_MOVED,
            FileSystemEventHandler,
        )
        from watchdog.observers import Observer
        from watchdog.observers.polling import PollingObserver

        # Opened and closed-without-writing are left out: the worker's own reads of a file would wake it again.
        wanted = {EVENT_TYPE_CREATED, EVENT_TYPE_MODIFIED, EVENT_TYPE_CLOSED, EVENT_TYPE_MOVED, EVENT_TYPE_DELETED}
        wake = self._wake

        class _Wake(FileSystemEventHandler):
            def on_any_event(self, event):
                if event.event_type in wanted:
                    wake.set()

        observer = Observer()
        if isinstance(observer, PollingObserver):  # watchdog's own stand-in where the platform has no events
            raise AnalysisError("this platform delivers no file-system events to watchdog")
        observer.schedule(_Wake(), str(self.inbox), recursive=True)
        observer.start()
        return observer

    @property
    def events(self) -> bool:
        return self._observer is not None

    def wait(self, timeout_s: float) -> bool:
        """Block until an event or ``timeout_s``; True when an event woke it (and clears it)."""
        woke = self._wake.wait(max(0.0, timeout_s))
        self._wake.clear()
        return woke

    def stop(self) -> None:
        if self._observer is not None:
            self._observer.stop()
            self._observer.join(timeout=5.0)
            self._observer = None

    def __enter__(self) -> InboxWatcher:
        return self.start()

    def __exit__(self, *exc) -> None:
        self.stop()
