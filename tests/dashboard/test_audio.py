"""The audio route: WAV by actuation id, one event's span, HTTP Range (RFC 9110 §14), no paths from requests."""

from __future__ import annotations

import io

import numpy as np
import pytest
import soundfile as sf

from analysis.store import queries


@pytest.fixture
def client(app):
    return app.server.test_client()


def _some_actuation(ctx):
    with ctx.store.read() as conn:
        d = queries.actuation_detail(conn, 7)
    return d


def test_whole_actuation_is_the_archived_microphone_channel(client, ctx):
    d = _some_actuation(ctx)
    r = client.get("/audio/7.wav")
    assert r.status_code == 200 and r.mimetype == "audio/wav"
    assert r.headers["Accept-Ranges"] == "bytes"
    x, fs = sf.read(io.BytesIO(r.data), dtype="float32")
    orig, fs0 = sf.read(d["archive_path"], dtype="float32", always_2d=True)
    assert fs == fs0 and x.ndim == 1 and x.size == orig.shape[0]
    # 16-bit PCM of the recorded samples: equal within one quantisation step (2^-15 full scale)
    np.testing.assert_allclose(x, orig[:, d["sidecar"]["channels"]["mic"]], atol=2.0**-15)


def test_range_request_answers_206_with_those_bytes(client):
    full = client.get("/audio/7.wav").data
    r = client.get("/audio/7.wav", headers={"Range": "bytes=0-43"})
    assert r.status_code == 206
    assert r.headers["Content-Range"] == f"bytes 0-43/{len(full)}"
    assert r.data == full[:44] and r.data[:4] == b"RIFF" and r.data[8:12] == b"WAVE"
    tail = client.get("/audio/7.wav", headers={"Range": "bytes=1000-"})
    assert tail.status_code == 206 and tail.data == full[1000:]
    bad = client.get("/audio/7.wav", headers={"Range": f"bytes={len(full) + 10}-"})
    assert bad.status_code == 416


def test_event_audio_is_the_event_span_with_padding(client, ctx):
    d = _some_actuation(ctx)
    ev = d["events"].set_index("name").loc["metering_click"]
    r = client.get("/audio/7.wav?event=metering_click")
    assert r.status_code == 200
    x, fs = sf.read(io.BytesIO(r.data))
    from dashboard.drill import EVENT_PAD_S

    want = round((ev["end_s"] + EVENT_PAD_S) * fs) - round(max(0.0, ev["onset_s"] - EVENT_PAD_S) * fs)
    assert abs(x.size - want) <= 1


def test_unknown_ids_events_and_paths_are_refused(client):
    assert client.get("/audio/999999.wav").status_code == 404
    assert client.get("/audio/7.wav?event=nonsense").status_code == 404
    # Anything but an integer id is not the audio route at all (Dash answers with its page, never a file).
    for path in ("/audio/..%2F..%2Fetc%2Fpasswd.wav", "/audio/abc.wav", "/audio/7.wav/../../x"):
        r = client.get(path)
        assert r.mimetype != "audio/wav" and b"root:" not in r.data
