"""The worker: inbox -> analysis -> store, with the original kept in the archive or the quarantine.

Per recording: hash the audio (SHA-256) and claim it in the store (the same content again, under any name, is a
no-op); analyse it in a process pool; copy the original and its sidecar into the content-addressed archive
(or, if it cannot be analysed, into the quarantine); commit every result of the recording in one transaction;
only then remove the inbox copy. A worker killed at any instant leaves at most a claim (taken up again once older
than the claim timeout) and an archive copy that the next attempt finds in place; never a half-written recording.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import socket
import sys
import threading
import time
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass, field
from multiprocessing import get_context
from pathlib import Path

from .errors import AnalysisError
from .inbox import (
    DEFAULT_POLL_S,
    DEFAULT_SETTLE_S,
    DEFAULT_SIDECAR_WAIT_S,
    Arrivals,
    InboxWatcher,
    find_inbox_files,
    inbox_states,
)
from .io import printable_name, sidecar_path

__all__ = ["IngestSummary", "ingest_paths", "run_worker", "process_files", "find_inbox_files", "content_hash",
           "make_pool", "jobs_or_cores", "outside_reason", "sweep_temporary", "DEFAULT_CLAIM_TIMEOUT_S",
           "DEFAULT_SETTLE_S", "DEFAULT_SIDECAR_WAIT_S", "DEFAULT_POLL_S"]

#: A claim older than this is taken to belong to a dead worker (analysis of one recording takes well under 1 s).
DEFAULT_CLAIM_TIMEOUT_S = 300.0
#: After a file-system event, wait this long before looking, so a burst of events (a file written in chunks, a
#: recording and then its sidecar) is one look, not many.
EVENT_GATHER_S = 0.05


@dataclass
class IngestSummary:
    """Counts of one pass: analysed, quarantined, duplicates (already stored), busy (claimed by another worker),
    lost (claim taken over by another worker while analysing), vanished (file gone before it was read)."""

    analysed: int = 0
    quarantined: int = 0
    duplicates: int = 0
    busy: int = 0
    lost: int = 0
    vanished: int = 0
    elapsed_s: float = 0.0
    errors: list = field(default_factory=list)  # (file, reason) of quarantined files

    @property
    def seen(self) -> int:
        return self.analysed + self.quarantined + self.duplicates + self.busy + self.lost + self.vanished

    def __str__(self):
        rate = self.analysed / self.elapsed_s if self.elapsed_s > 0 else 0.0
        text = (f"{self.analysed} analysed, {self.quarantined} quarantined, {self.duplicates} already stored, "
                f"{self.busy} claimed by another worker")
        if self.lost:
            text += f", {self.lost} taken over by another worker while analysed"
        if self.vanished:
            text += f", {self.vanished} gone from the inbox before they were read"
        return text + f" in {self.elapsed_s:.1f} s ({rate:.1f} recordings/s)"


def content_hash(path: Path) -> tuple[str, int]:
    """(SHA-256 hex of the file's bytes, size in bytes)."""
    h = hashlib.sha256()
    size = 0
    with open(path, "rb") as f:
        while chunk := f.read(1 << 20):
            h.update(chunk)
            size += len(chunk)
    return h.hexdigest(), size


def outside_reason(path: Path, root: Path | None) -> str | None:
    """Why a delivered file is refused without being read (a symbolic link, or a real path outside the inbox),
    or None. (A sidecar that is a link is refused by analysis.io.read_sidecar, unread; the recording beside it is
    then quarantined like any other.)"""
    if path.is_symlink():
        what = "a symbolic link to a folder" if path.is_dir() else "a symbolic link"
        return f"is {what}; only files delivered into the inbox are taken in (the link was not followed)"
    if root is not None:
        try:
            path.resolve().relative_to(Path(root).resolve())
        except ValueError:
            return "lies outside the inbox (a folder on its way is a symbolic link); it was not read"
    return None


def _analyse_task(path: str, profile_dirs: tuple[str, ...]):
    """Runs in a pool process: (result, None) or (None, reason). Never raises, so one bad file stops nothing."""
    from .pipeline import analyse_file

    try:
        return analyse_file(path, profile_dirs=profile_dirs), None
    except AnalysisError as exc:
        text = str(exc)
        return None, text if text.startswith(path) else f"{path}: {text}"  # every reason names its file
    except Exception as exc:  # a bug must not stop the worker: the file goes to quarantine with the error
        return None, (f"{path}: could not be analysed because of an internal error ({type(exc).__name__}: {exc}); "
                      "the file is kept in quarantine: tell the method owner")


def _place(src: Path, dest: Path, *, content_addressed: bool = True) -> None:
    """Copy ``src`` to ``dest`` atomically (temporary name, then rename). Under a content-addressed name an
    equal-size file already there is the same content (only whole files get that name) and stays."""
    dest.parent.mkdir(parents=True, exist_ok=True)
    if content_addressed and dest.exists() and dest.stat().st_size == src.stat().st_size:
        return
    tmp = dest.with_name(f".{dest.name}.{os.getpid()}.tmp")
    shutil.copyfile(src, tmp, follow_symlinks=False)
    _fsync(tmp)  # the copy's bytes on disk before its name, and its name before the store's commit points at it
    os.replace(tmp, dest)
    _fsync(dest.parent, folder=True)


def _fsync(path: Path, *, folder: bool = False) -> None:
    """Flush a file's (or a folder's entries') data to the disk. A folder cannot be opened for this on every
    platform (Windows): there the rename is as durable as the file system makes it."""
    try:
        fd = os.open(path, os.O_RDONLY | (getattr(os, "O_DIRECTORY", 0) if folder else 0))
    except OSError:
        if folder:
            return
        raise
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _remove_source(path: Path, root: Path | None) -> None:
    for p in (path, sidecar_path(path)):
        try:
            p.unlink()  # a symbolic link is removed itself, never its target
        except FileNotFoundError:
            pass
    if root is None:
        return
    parent = path.parent
    while parent != root and root in parent.parents:
        try:
            parent.rmdir()  # only if empty
        except OSError:
            break
        parent = parent.parent


def _public(reason: str, path: Path, name: str, root: Path | None) -> str:
    """A reason as it is stored and shown: the delivered name instead of the worker's own path to the file (no
    server path in the store), with bytes that are not UTF-8 and control characters escaped."""
    text = str(reason)
    side = sidecar_path(path)
    side_name = name[: -len(path.suffix)] + ".json" if path.suffix and name.endswith(path.suffix) else side.name
    for full, short in ((str(side), side_name), (str(path), name)):
        text = text.replace(full, short)
    if root is not None:
        text = text.replace(str(root).rstrip("/") + "/", "")
    return printable_name(text)


class ActiveModels:
    """The active models per profile, as the worker scores with them: loaded once, and loaded again when the
    store's active model ids change (checked at most every ``check_s``), so a recording analysed after a
    reference build or approval is scored with the new version even in a pass that was running."""

    def __init__(self, store, *, check_s: float = 2.0):
        self.store, self.check_s = store, float(check_s)
        self._models: dict[str, dict] = {}
        self._ids: dict[str, list[int]] = {}
        self._checked: dict[str, float] = {}

    def get(self, profile: str) -> dict:
        now = time.monotonic()
        if profile not in self._models or now - self._checked.get(profile, -1e9) >= self.check_s:
            ids = self.store.active_model_ids(profile)
            if profile not in self._models or ids != self._ids.get(profile):
                self._models[profile] = self.store.active_models(profile)
                self._ids[profile] = ids
            self._checked[profile] = now
        return self._models[profile]


class Heartbeat:
    """Renews a worker's live claims every ``interval_s`` in a thread of its own while a pass runs, so that a
    recording whose analysis takes longer than the claim timeout is not taken over by another worker; a worker
    that stops (killed) stops beating, and its claims age out. A failed beat is logged and tried again."""

    def __init__(self, store, worker_id: str, *, interval_s: float, log: Callable[[str], None] = lambda m: None):
        self.store, self.worker_id, self.interval_s, self.log = store, worker_id, float(interval_s), log
        self.beats = 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="harken-heartbeat", daemon=True)

    def _run(self) -> None:
        while not self._stop.wait(self.interval_s):
            try:
                self.store.refresh_claims(worker=self.worker_id)
                self.beats += 1
            except Exception as exc:  # noqa: BLE001 - a missed beat is not a reason to stop the worker
                self.log(f"heartbeat: could not renew the claims of {self.worker_id} ({exc})")

    def start(self) -> Heartbeat:
        self._thread.start()
        return self

    def stop(self) -> None:
        self._stop.set()
        self._thread.join(timeout=max(5.0, self.interval_s))

    def __enter__(self) -> Heartbeat:
        return self.start()

    def __exit__(self, *exc) -> None:
        self.stop()


def stopped_here(holder: str) -> bool:
    """True when a claim's holder ("HOST:PID", as workers name themselves) is a process on this host that no longer
    runs, so its claims need not wait out the claim timeout. Another host's worker, or a process that runs (or
    whose state this user may not see), is not known to have stopped. A PID reused by a new process reads as
    running: the claim then waits for its timeout, the safe side."""
    host, sep, pid = str(holder).rpartition(":")
    if not sep or host != socket.gethostname() or not pid.isdigit() or int(pid) == os.getpid():
        return False
    try:
        os.kill(int(pid), 0)
    except ProcessLookupError:
        return True
    except (OverflowError, OSError):  # not ours to see (PermissionError), or no such pid at all
        return False
    return False


def sweep_temporary(folder: Path, *, older_than_s: float) -> int:
    """Remove the temporary copies (``.NAME.PID.tmp``) a killed worker left in ``folder``; returns how many."""
    if not folder.is_dir():
        return 0
    now, n = time.time(), 0
    for p in folder.rglob(".*.tmp"):
        try:
            if p.is_file() and not p.is_symlink() and now - p.stat().st_mtime > older_than_s:
                p.unlink()
                n += 1
        except FileNotFoundError:
            pass
    return n


class _Progress:
    def __init__(self, total: int | None, enabled: bool, log: Callable[[str], None]):
        self.bar = None
        self.log = log
        if enabled:
            from tqdm import tqdm

            self.bar = tqdm(total=total, unit="rec", file=sys.stderr, dynamic_ncols=True)

    def line(self, msg: str) -> None:
        if self.bar is None:
            self.log(msg)

    def step(self) -> None:
        if self.bar is not None:
            self.bar.update(1)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def process_files(
    store, files: Iterable[tuple[Path, str]], *, jobs: int = 1, pool=None, worker_id: str | None = None,
    remove_source: bool = False, inbox_root: Path | None = None, claim_timeout_s: float = DEFAULT_CLAIM_TIMEOUT_S,
    profile_dirs: Iterable[str | Path] = (), log: Callable[[str], None] = lambda msg: None,
    progress: bool | None = None, total: int | None = None, batch_size: int = 16, batch_wait_s: float = 1.0,
) -> IngestSummary:
    """Register, analyse, archive (or quarantine) and store each (path, original name) of ``files``.

    ``pool``: a ProcessPoolExecutor to analyse in, made by the caller before it opened the store (see make_pool);
    None analyses in this process. ``jobs`` sizes the window of analyses in flight. ``remove_source``: delete each
    delivered file (and its sidecar) once its outcome is committed.
    Analysed recordings are committed in batches of up to ``batch_size`` (each recording whole; a batch waits at
    most ``batch_wait_s`` for more), so the store sees few, larger transactions. Whatever goes wrong with one
    recording (a name that is not UTF-8, a sidecar the store cannot hold, a bug) sends that recording to
    quarantine with its reason; the others go on. Only the store itself failing stops the pass (StoreError).
    """
    from .references import score_result
    from .store import Analysed, Claim, StoreError

    worker_id = worker_id or f"{socket.gethostname()}:{os.getpid()}"
    dirs = tuple(str(d) for d in profile_dirs)
    summary = IngestSummary()
    t0 = time.perf_counter()
    show = sys.stderr.isatty() if progress is None else progress
    bar = _Progress(total, show, log)
    models = ActiveModels(store)  # re-read when a reference build or approval changes them, mid-pass too

    buffer: list = []  # (Analysed, path, name, hash): archived and scored, waiting for the next batch commit
    buffered_since = [0.0]
    twins: list[Path] = []  # byte-identical copies of a file seen earlier in this pass: removed at its end
    retried: set[int] = set()  # recordings taken out of quarantine in this pass

    def commit(entries) -> None:
        try:
            ids = store.commit_analyses([e[0] for e in entries], worker=worker_id)
        except Exception as exc:  # noqa: BLE001 - one recording the store refuses must not lose its batchmates
            if len(entries) > 1:
                for e in entries:
                    commit([e])
                return
            item, path, name, h = entries[0]
            why = exc if isinstance(exc, StoreError) else f"{type(exc).__name__}: {exc}"
            to_quarantine(path, name, item.recording_id, h, f"{name}: analysed but could not be stored: {why}")
            return
        for (item, path, name, h), actuation_id in zip(entries, ids):
            if actuation_id is None:
                summary.lost += 1
                bar.line(f"lost       {name}: another worker took over its claim")
                continue
            summary.analysed += 1
            if item.recording_id in retried:  # analysed now: its earlier quarantined copy is no one's
                _drop_quarantine_copies(store.quarantine_dir, h)
            flagged = any(scored.flagged for _, scored in item.scored.values()) or not item.result.passed_qc
            bar.line(f"analysed   {name} -> actuation {actuation_id}"
                     + (" (flagged)" if flagged else "") + ("" if item.scored else " (no active model)"))
            if remove_source:
                _remove_source(path, inbox_root)

    def flush() -> None:
        if buffer:
            commit(list(buffer))
            buffer.clear()

    def vanished(recording_id, name, exc) -> None:
        summary.vanished += 1
        store.release_claim(recording_id, worker=worker_id)
        bar.line(f"vanished   {name}: {exc.strerror}")

    def finish(path: Path, name: str, claim, outcome) -> None:
        result, reason = outcome
        h = claim_hash[path]
        if result is None:
            to_quarantine(path, name, claim.recording_id, h, _public(reason, path, name, inbox_root))
            return
        try:
            archive = store.archive_dir / h[:2] / (h + path.suffix.lower())
            _place(path, archive)
            side = sidecar_path(path)
            if side.exists() and not side.is_symlink():
                _place(side, archive.with_suffix(".json"), content_addressed=False)
        except FileNotFoundError as exc:
            vanished(claim.recording_id, name, exc)
            return
        except OSError as exc:
            to_quarantine(path, name, claim.recording_id, h, f"{name}: could not be copied into the archive "
                                                              f"({exc.strerror or exc})")
            return
        try:
            if result.sidecar is None:
                raise AnalysisError(f"{name}: no sidecar, so no site, rig, lot or unit to store")
            scored = score_result(result, models.get(result.profile))
        except StoreError:
            raise
        except Exception as exc:  # noqa: BLE001 - a model that cannot score this recording: quarantine, go on
            why = exc if isinstance(exc, AnalysisError) else f"{type(exc).__name__}: {exc}"
            to_quarantine(path, name, claim.recording_id, h,
                          _public(f"{name}: analysed but could not be scored: {why}", path, name, inbox_root))
            return
        if not buffer:
            buffered_since[0] = time.monotonic()
        buffer.append((Analysed(claim.recording_id, result, str(archive), scored), path, name, h))
        if len(buffer) >= batch_size or time.monotonic() - buffered_since[0] > batch_wait_s:
            flush()

    def to_quarantine(path: Path, name: str, recording_id: int, h: str, reason: str, *, keep: bool = True) -> None:
        """Keep the file as delivered (a hash prefix keeps equal names apart; ``keep`` False: nothing is read,
        for links) and commit its reason. No copy of it stays in the archive."""
        qdir = store.quarantine_dir
        kept = qdir / f"{h[:12]}-{_safe_file_name(path.name)}"
        side = sidecar_path(path)
        sidecar_text = None
        if recording_id in retried:  # quarantined again: only this delivery's copy is kept
            _drop_quarantine_copies(qdir, h)
        try:
            if keep:
                _place(path, kept)
                if side.exists() and not side.is_symlink():
                    _place(side, qdir / f"{h[:12]}-{_safe_file_name(side.name)}", content_addressed=False)
                    with open(side, "rb") as f:
                        sidecar_text = f.read(100_000).decode("utf-8", errors="replace")
        except FileNotFoundError as exc:
            vanished(recording_id, name, exc)
            return
        for copy in (store.archive_dir / h[:2] / (h + path.suffix.lower()),):
            for p in (copy, copy.with_suffix(".json")):  # archived before it failed: no orphan stays behind
                try:
                    p.unlink()
                except FileNotFoundError:
                    pass
        if not store.commit_quarantine(recording_id, worker=worker_id, reason=printable_name(reason),
                                       quarantine_path=str(kept) if keep else None, sidecar_json=sidecar_text):
            summary.lost += 1
            return
        summary.quarantined += 1
        summary.errors.append((name, reason))
        bar.line(f"quarantined {name}: {reason}")
        # What was not kept is removed only when it is a link of the inbox's own: a file whose real path lies
        # outside the inbox is someone else's and stays where it is.
        if remove_source and (keep or path.is_symlink()):
            _remove_source(path, inbox_root)

    claim_hash: dict[Path, str] = {}

    def drain(limit: int) -> None:
        """Finish analyses as they complete until fewer than ``limit`` are pending."""
        while len(pending) >= limit:
            done, _ = wait(pending, return_when=FIRST_COMPLETED)
            for fut in done:
                p, n, c = pending.pop(fut)
                try:
                    outcome = fut.result()
                except Exception as exc:  # noqa: BLE001 - a pool process that died on this file
                    outcome = (None, f"{p}: could not be analysed: the analysis process failed "
                                     f"({type(exc).__name__}: {exc})")
                guarded(p, n, c, lambda p=p, n=n, c=c, o=outcome: finish(p, n, c, o))
                claim_hash.pop(p, None)
                bar.step()

    def guarded(path: Path, name: str, claim, step) -> None:
        """Run one recording's step; anything but the store failing sends that recording to quarantine."""
        try:
            step()
        except StoreError:
            raise
        except Exception as exc:  # noqa: BLE001 - the worker never stops on one input
            to_quarantine(path, name, claim.recording_id, claim_hash.get(path, "0" * 64),
                          f"{name}: could not be taken in because of an internal error ({type(exc).__name__}: "
                          f"{exc}); tell the method owner")

    def claim_all(entries):
        """Claims of (hash, name, size) entries, in one transaction; one at a time when that fails."""
        try:
            return store.claim_many(entries, worker=worker_id, claim_timeout_s=claim_timeout_s, gone=stopped_here)
        except StoreError:
            if len(entries) == 1:
                raise
            return [claim_all([e])[0] for e in entries]

    pending: dict = {}
    window = max(2, 2 * jobs)
    seen: dict[str, str] = {}  # content hash -> the name it was first seen under in this pass
    # live claims are renewed three times per claim timeout
    beat = Heartbeat(store, worker_id, interval_s=max(0.05, claim_timeout_s / 3.0), log=log).start()
    try:
        for chunk in _chunks(files, batch_size):
            hashed, refused = [], []
            for path, name in chunk:
                path, name = Path(path), printable_name(name)
                why = outside_reason(path, inbox_root)
                if why is not None:
                    link = os.readlink(path) if path.is_symlink() else str(path)  # the link itself, not its target
                    marker = hashlib.sha256(f"not taken in:{name}:{printable_name(link)}".encode()).hexdigest()
                    refused.append((path, name, marker, f"{name}: {why}"))
                    continue
                try:
                    h, size = content_hash(path)
                except FileNotFoundError:
                    summary.vanished += 1
                    continue
                if h in seen:
                    summary.duplicates += 1
                    bar.line(f"duplicate  {name}: same content as {seen[h]}, delivered in the same pass")
                    if remove_source:
                        twins.append(path)
                    bar.step()
                    continue
                seen[h] = name
                hashed.append((path, name, h, size))
            for path, name, marker, why in refused:
                c = claim_all([(marker, name, 0)])[0]
                if c.kind in ("new", "retry"):
                    claim_hash[path] = marker
                    to_quarantine(path, name, c.recording_id, marker, why, keep=False)
                    claim_hash.pop(path, None)
                elif remove_source and path.is_symlink():
                    _remove_source(path, inbox_root)  # refused before; the link itself goes
                bar.step()
            claims = claim_all([(h, name, size) for _, name, h, size in hashed]) if hashed else []
            for (path, name, h, _), claim in zip(hashed, claims):
                if claim.kind == "duplicate" and claim.status == "quarantined":
                    # Only a sidecar that is there now can be a corrected one: a sidecar that vanished meanwhile
                    # is another worker finishing this very file, not a new delivery.
                    side = sidecar_path(path)
                    try:
                        with open(side, "rb") as f:
                            text = f.read(100_000).decode("utf-8", errors="replace")
                    except FileNotFoundError:
                        text = None
                    if text is not None and path.exists() and store.reopen_quarantined(
                            claim.recording_id, worker=worker_id, sidecar_text=text):
                        claim = Claim("retry", claim.recording_id, "claimed", name)
                        retried.add(claim.recording_id)
                        bar.line(f"retry      {name}: was quarantined, delivered again with another sidecar")
                if claim.kind == "duplicate":
                    summary.duplicates += 1
                    bar.line(f"duplicate  {name}: same content as recording {claim.recording_id} "
                             f"({claim.original_name}, {claim.status})")
                    if remove_source:
                        _remove_source(path, inbox_root)
                    bar.step()
                    continue
                if claim.kind == "busy":
                    summary.busy += 1
                    bar.step()
                    continue
                claim_hash[path] = h
                if pool is None:
                    outcome = _analyse_task(str(path), dirs)
                    guarded(path, name, claim, lambda p=path, n=name, c=claim, o=outcome: finish(p, n, c, o))
                    claim_hash.pop(path, None)
                    bar.step()
                    continue
                pending[pool.submit(_analyse_task, str(path), dirs)] = (path, name, claim)
                drain(window)
        drain(1)
        flush()
        for path in twins:
            _remove_source(path, inbox_root)
    except KeyboardInterrupt:
        flush()  # what is analysed is kept; claims of the rest are taken up again after the claim timeout
        raise
    finally:
        beat.stop()
        bar.close()
    summary.elapsed_s = time.perf_counter() - t0
    return summary


def _drop_quarantine_copies(qdir: Path, h: str) -> None:
    """Remove the quarantined copies of the recording with content hash ``h`` (named ``<hash prefix>-...``)."""
    if qdir.is_dir():
        for p in qdir.glob(f"{h[:12]}-*"):
            try:
                p.unlink()
            except FileNotFoundError:
                pass


def _safe_file_name(name: str) -> str:
    """A file name that any file system takes: bytes that are not UTF-8 and control characters become '_'."""
    out = printable_name(name)
    return "".join(c if c.isprintable() and c not in "\\/" else "_" for c in out)[:200] or "_"


def _chunks(items, n: int):
    chunk = []
    for item in items:
        chunk.append(item)
        if len(chunk) >= n:
            yield chunk
            chunk = []
    if chunk:
        yield chunk


def _noop():
    return None


def make_pool(jobs: int) -> ProcessPoolExecutor:
    """A started pool of ``jobs`` analysis processes.

    Forked (children inherit the imported analysis modules: starting a fresh interpreter costs seconds of
    imports per process). Make it before opening a store, so no database connection is copied into a child;
    fork starts every process at the first submit, which happens here.
    """
    pool = ProcessPoolExecutor(max_workers=jobs, mp_context=get_context("fork"))
    pool.submit(_noop).result()
    return pool


def _expand(paths: Iterable[str | Path]) -> Iterator[tuple[Path, str]]:
    """(file, original name): a file given directly is named by its file name, one found in a folder by its path
    relative to that folder."""
    for p in map(Path, paths):
        if p.is_dir():
            for f in find_inbox_files(p):
                yield f, f.relative_to(p).as_posix()
        elif p.is_file():
            yield p, p.name
        else:
            raise AnalysisError(f"{p}: no such file or folder")


def ingest_paths(paths: Iterable[str | Path], store_url=None, jobs: int | None = None, *,
                 profile_dirs: Iterable[str | Path] = (), files_dir=None, claim_timeout_s=DEFAULT_CLAIM_TIMEOUT_S,
                 log: Callable[[str], None] = lambda msg: None, progress: bool | None = None) -> IngestSummary:
    """Ingest recordings named directly or found in folders into the store at ``store_url`` (default harken.db
    in the working folder) once. The given files stay where they are; the archive keeps its own copies."""
    from .store import Store

    files = list(_expand(paths))
    jobs = jobs_or_cores(jobs)
    pool = make_pool(jobs) if jobs > 1 and len(files) > 1 else None
    try:
        with Store.open(store_url, files_dir=files_dir) as store:
            _sweep(store, claim_timeout_s, log)
            return process_files(store, files, jobs=jobs, pool=pool, remove_source=False,
                                 claim_timeout_s=claim_timeout_s, profile_dirs=profile_dirs, log=log,
                                 progress=progress, total=len(files))
    finally:
        if pool is not None:
            pool.shutdown(cancel_futures=True)


def _sweep(store, older_than_s: float, log) -> None:
    """Temporary copies older than a claim are a killed worker's: remove them (a live copy is seconds old)."""
    n = sum(sweep_temporary(d, older_than_s=older_than_s) for d in (store.archive_dir, store.quarantine_dir))
    if n:
        log(f"removed {n} temporary file(s) a stopped worker left in the archive or quarantine")


def jobs_or_cores(jobs: int | None) -> int:
    """The number of analysis processes: ``jobs``, or every core when None."""
    return max(1, int(jobs or os.cpu_count() or 1))


def run_worker(inbox: str | Path, store_url=None, *, once: bool = False, jobs: int | None = None,
               poll_s: float = DEFAULT_POLL_S, watch: str = "auto", claim_timeout_s: float = DEFAULT_CLAIM_TIMEOUT_S,
               settle_s: float | None = None, sidecar_wait_s: float | None = None,
               profile_dirs: Iterable[str | Path] = (), files_dir=None, log: Callable[[str], None] = lambda msg: None,
               progress: bool | None = None, stop: threading.Event | None = None) -> IngestSummary:
    """Process the inbox: with ``once``, what is there now, then return; else watch it until interrupted
    (KeyboardInterrupt propagates once the recordings already analysed are committed) or ``stop`` is set.

    A recording is taken once complete (analysis.inbox.Arrivals): its size and mtime and its sidecar's unchanged
    over ``settle_s`` (default 2 s; 0 with ``once``) and its sidecar there, or ``sidecar_wait_s`` after it was
    first seen without one (default 60 s; 0 with ``once``), when it is quarantined for the missing sidecar as
    before. ``watch`` (analysis.inbox.WATCH_MODES): file-system events wake the worker at once ("auto": when the
    folder delivers them; "events": required); the inbox is scanned every ``poll_s`` seconds in any case.
    """
    from . import pipeline, references  # noqa: F401 - imported now (and into the pool), not on a file's clock
    from .store import Store

    inbox = Path(inbox)
    if not inbox.is_dir():
        raise AnalysisError(f"{inbox}: inbox folder does not exist")
    if not poll_s > 0:
        raise AnalysisError(f"poll interval must be a number of seconds > 0, got {poll_s!r}")
    jobs = jobs_or_cores(jobs)
    settle = (0.0 if once else DEFAULT_SETTLE_S) if settle_s is None else float(settle_s)
    side_wait = (0.0 if once else DEFAULT_SIDECAR_WAIT_S) if sidecar_wait_s is None else float(sidecar_wait_s)
    arrivals = Arrivals(settle_s=settle, sidecar_wait_s=side_wait, retry_s=poll_s)
    watcher = InboxWatcher(inbox, mode="poll" if once else watch, log=log)
    total = IngestSummary()
    worker_id = f"{socket.gethostname()}:{os.getpid()}"
    pool = make_pool(jobs) if jobs > 1 else None
    with Store.open(store_url, files_dir=files_dir) as store:
        _sweep(store, claim_timeout_s, log)
        try:
            watcher.start()
            if not once:
                log(f"watching {inbox} with {watcher.how} and a scan every {poll_s:g} s; a file is taken when it "
                    f"and its sidecar are unchanged for {settle:g} s (without a sidecar: after {side_wait:g} s)")
            first = None  # with once: the files there at the start, and no others
            while True:
                now = time.monotonic()
                states = inbox_states(inbox, only=first)
                arrivals.observe(states, now)
                if once and first is None:
                    first = list(states)
                files = arrivals.ready(now)
                if files:
                    if side_wait > 0:
                        for f in arrivals.without_sidecar(files):
                            log(f"{printable_name(f.relative_to(inbox).as_posix())}: no sidecar {side_wait:g} s "
                                "after the recording came; taken without one")
                    s = process_files(store, ((f, f.relative_to(inbox).as_posix()) for f in files), jobs=jobs,
                                      pool=pool, worker_id=worker_id, remove_source=True, inbox_root=inbox,
                                      claim_timeout_s=claim_timeout_s, profile_dirs=profile_dirs, log=log,
                                      progress=progress, total=len(files))
                    for k in ("analysed", "quarantined", "duplicates", "busy", "lost", "vanished"):
                        setattr(total, k, getattr(total, k) + getattr(s, k))
                    total.elapsed_s += s.elapsed_s
                    total.errors += s.errors
                    if not once:
                        log(f"pass: {s}")
                if once and arrivals.pending() == 0:
                    return total
                if stop is not None and stop.is_set():
                    return total
                due = arrivals.next_due_s(time.monotonic())
                timeout = poll_s if due is None else min(poll_s, due)
                if stop is not None:
                    timeout = min(timeout, 0.5)  # to notice ``stop`` soon
                if watcher.wait(timeout):
                    time.sleep(EVENT_GATHER_S)
        finally:
            watcher.stop()
            if pool is not None:
                pool.shutdown(cancel_futures=True)
