"""The audio reader and the sidecar format, on real files through libsndfile."""

from __future__ import annotations

import json

import numpy as np
import pytest
import soundfile as sf

from analysis.errors import AudioError, SidecarError
from analysis.io import SidecarWarning, audio_info, read_audio, read_sidecar, sidecar_path
from tests.conftest import FS, sidecar_dict, write_recording


@pytest.mark.parametrize("fmt,subtype", [("FLAC", "PCM_16"), ("FLAC", "PCM_24"), ("WAV", "PCM_16"), ("WAV", "FLOAT")])
def test_reads_flac_and_wav_as_float32_full_scale(tmp_path, fmt, subtype):
    t = np.arange(FS // 10) / FS
    x = 0.5 * np.sin(2 * np.pi * 1000 * t)
    data = np.column_stack([x, -x])
    path = write_recording(tmp_path, fmt=fmt, subtype=subtype, data=data)
    audio = read_audio(path)
    assert audio.samples.dtype == np.float32
    assert audio.samples.shape == (FS // 10, 2)
    assert audio.sample_rate_hz == FS
    # 16-bit quantisation step is 2**-15 (full scale 1.0)
    np.testing.assert_allclose(audio.samples[:, 0], x, atol=2.0**-15)
    np.testing.assert_allclose(audio.samples[:, 1], -x, atol=2.0**-15)
    info = audio_info(path)
    assert (info.channels, info.frames, info.format) == (2, FS // 10, fmt)


def test_time_range_reads_only_that_range(tmp_path):
    ramp = (np.arange(FS, dtype=np.float64) / FS) * 0.9
    path = write_recording(tmp_path, fmt="WAV", subtype="FLOAT", data=ramp[:, None])
    part = read_audio(path, start_s=0.25, stop_s=0.5)
    assert part.samples.shape == (FS // 4, 1)
    assert part.start_s == pytest.approx(0.25)
    np.testing.assert_allclose(part.samples[:, 0], ramp[FS // 4 : FS // 2], rtol=0, atol=1e-7)


def test_range_past_the_end_is_clipped_to_the_file(tmp_path):
    path = write_recording(tmp_path, fmt="WAV", subtype="FLOAT", data=np.zeros((100, 1)) + 0.1)
    assert read_audio(path, start_s=0.0, stop_s=10.0).n_frames == 100


def test_channel_out_of_range_names_the_file(tmp_path):
    path = write_recording(tmp_path, data=np.zeros((1000, 1)) + 0.01)
    with pytest.raises(AudioError, match=r"rec\.flac: channel 3 requested but the file has 1 channel"):
        read_audio(path).channel(3)


def test_sidecar_round_trip(tmp_path):
    path = write_recording(tmp_path, sidecar=sidecar_dict(markers_s=[0.3, 0.38], notes="first run"))
    s = read_sidecar(sidecar_path(path))
    assert (s.site, s.rig, s.lot, s.unit, s.actuation, s.profile) == ("Testfield", "TF-R1", "T001", "U01", 1,
                                                                       "demo-dpi")
    assert s.recorded_at.utcoffset().total_seconds() == 3600
    assert s.markers_s == (0.3, 0.38)
    assert s.channels == {"mic": 0, "marker": 1}
    assert s.notes == "first run"
    assert read_sidecar(path).unit == "U01"  # the recording's path finds its sidecar


def test_unknown_sidecar_fields_are_kept_and_warned(tmp_path):
    path = write_recording(tmp_path, sidecar=sidecar_dict(operator="kim", humidity_pct=41))
    with pytest.warns(SidecarWarning, match="unknown sidecar field.*humidity_pct, operator"):
        s = read_sidecar(path)
    assert s.extra == {"operator": "kim", "humidity_pct": 41}
    assert s.to_json()["operator"] == "kim"


@pytest.mark.parametrize(
    "change,match",
    [
        ({"lot": None}, r"required field 'lot' is missing"),
        ({"actuation": 0}, r"field 'actuation' must be an integer >= 1"),
        ({"actuation": "3"}, r"field 'actuation' must be an integer >= 1.*'3'"),
        ({"actuation": True}, r"field 'actuation' must be an integer"),
        ({"recorded_at": "2026-03-02T09:14:05"}, r"field 'recorded_at' must carry a UTC offset"),
        ({"recorded_at": "yesterday"}, r"field 'recorded_at' is not an ISO 8601 time"),
        ({"site": 12}, r"field 'site' must be non-empty text, got 12"),
        ({"channels": {"mic": 0, "speaker": 1}}, r"field 'channels' has unknown role 'speaker'"),
        ({"channels": {"marker": 1}}, r"field 'channels' must name the 'mic' channel"),
        ({"markers_s": [0.4, 0.3]}, r"field 'markers_s' must be increasing"),
        ({"markers_s": "0.3"}, r"field 'markers_s' must be a list of times"),
    ],
)
def test_bad_sidecar_fields_name_the_field_and_the_file(tmp_path, change, match):
    path = write_recording(tmp_path, sidecar=sidecar_dict(**change))
    with pytest.raises(SidecarError, match=match) as info:
        read_sidecar(path)
    assert str(info.value).startswith(str(tmp_path / "rec.json"))


def test_missing_and_malformed_sidecar(tmp_path):
    path = write_recording(tmp_path, sidecar=False)
    with pytest.raises(SidecarError, match=r"rec\.json: sidecar metadata file is missing"):
        read_sidecar(path)
    (tmp_path / "rec.json").write_text('{"site": "A", ')
    with pytest.raises(SidecarError, match=r"rec\.json: sidecar is not valid JSON"):
        read_sidecar(path)
    (tmp_path / "rec.json").write_text(json.dumps([1, 2]))
    with pytest.raises(SidecarError, match=r"sidecar must be a JSON object, got list"):
        read_sidecar(path)


def test_nan_in_float_wav_is_rejected_with_the_count(tmp_path):
    data = np.zeros((1000, 1), dtype=np.float32)
    data[10] = np.nan
    data[20] = np.inf
    path = tmp_path / "nan.wav"
    sf.write(str(path), data, FS, subtype="FLOAT")
    with pytest.raises(AudioError, match=r"nan\.wav: contains 2 non-finite sample\(s\)"):
        read_audio(path)
