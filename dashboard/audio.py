"""``/audio/<actuation_id>.wav[?event=NAME]``: an actuation's archived recording as WAV, with HTTP Range support.

The file is found by the actuation id in the store (never from a path in the request); an ``event`` must be one
of that actuation's found events. The WAV is made once per recording and event and kept in the cache folder
(named by the recording's content hash), then served with ``flask.send_file(conditional=True)``, which answers
Range requests with 206 so a browser can seek.
"""

from __future__ import annotations

import os
from pathlib import Path

import flask

from analysis.errors import AnalysisError
from analysis.store import queries

from .drill import EVENT_PAD_S, wav_bytes
from .safety import MAX_ID

__all__ = ["register", "audio_url", "wav_file"]


def audio_url(actuation_id: int, event: str | None = None) -> str:
    from urllib.parse import quote

    return f"/audio/{int(actuation_id)}.wav" + (f"?event={quote(event)}" if event else "")


def wav_file(ctx, actuation_id: int, event: str | None = None) -> Path:
    """The cached WAV of an actuation (or of one of its events); raises LookupError when there is none."""
    with ctx.store.read() as conn:
        d = queries.actuation_detail(conn, actuation_id)
    if d is None:
        raise LookupError(f"no actuation {actuation_id}")
    if not d["archive_path"] or not Path(d["archive_path"]).is_file():
        raise LookupError(f"the archived recording of actuation {actuation_id} is missing")
    start = stop = None
    tag = "all"
    if event:
        ev = d["events"]
        row = ev[(ev["name"] == event) & ev["found"].astype(bool)]
        if not len(row):
            raise LookupError(f"actuation {actuation_id} has no found event {event!r}")
        r = row.iloc[0]
        start = max(0.0, float(r["onset_s"]) - EVENT_PAD_S)
        stop = min(float(d["duration_s"] or 1e9), float(r["end_s"]) + EVENT_PAD_S)
        tag = f"e{int(r['event_id'])}"
    folder = ctx.cache_dir / "audio"
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{d['content_hash']}-{tag}.wav"
    if not path.exists():
        data = wav_bytes(d["archive_path"], sidecar=d["sidecar"], start_s=start, stop_s=stop)
        tmp = path.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_bytes(data)
        os.replace(tmp, path)  # atomic: a concurrent request never reads half a file
    return path


def register(server: flask.Flask, ctx) -> None:
    @server.route("/audio/<int:actuation_id>.wav")
    def harken_audio(actuation_id: int):
        event = flask.request.args.get("event") or None
        if not 1 <= actuation_id <= MAX_ID:
            flask.abort(404, description="no such actuation (the id is out of range)")
        if event is not None and (len(event) > 200 or not event.isprintable()):
            flask.abort(404, description="no such event")
        try:
            path = wav_file(ctx, actuation_id, event)
        except LookupError as exc:
            flask.abort(404, description=str(exc))
        except AnalysisError as exc:
            # the reason without the server's own path to the archived file
            why = getattr(exc, "reason", None) or "it could not be decoded"
            flask.abort(410, description=f"the archived recording of actuation {actuation_id} cannot be read: {why}")
        return flask.send_file(path, mimetype="audio/wav", conditional=True, max_age=3600,
                               download_name=f"actuation-{actuation_id}{'-' + event if event else ''}.wav")
