"""The audio reader and the sidecar format, on real files through libsndfile."""

from __future__ import annotations

import json
import os

import numpy as np
import pytest
import soundfile as sf

from analysis.errors import AudioError, SidecarError
from analysis.io import SidecarWarning, audio_info, printable_name, read_audio, read_sidecar, sidecar_path
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


@pytest.mark.parametrize("fmt,subtype", [("FLAC", "PCM_16"), ("FLAC", "PCM_24"), ("WAV", "PCM_16"),
                                         ("WAV", "PCM_24"), ("WAV", "FLOAT")])
def test_a_time_range_holds_the_samples_of_a_full_read(tmp_path, fmt, subtype):
    # Reference: soundfile.read of the whole file as float32 (libsndfile's own conversion); the reader's full
    # decode and every range it seeks to must hold exactly those samples.
    rng = np.random.default_rng(3)
    data = np.clip(rng.normal(0, 0.3, (FS, 2)), -1, 1)
    data[:, 1] = np.where(np.arange(FS) % 4800 < 480, 0.8, 0.0)
    path = write_recording(tmp_path, fmt=fmt, subtype=subtype, data=data, sidecar=False)
    full, fs = sf.read(str(path), dtype="float32", always_2d=True)
    assert fs == FS
    np.testing.assert_array_equal(read_audio(path).samples, full)
    for start_s, stop_s in ((0.25, 0.5), (0.0, 0.01), (0.3001, 0.7777), (0.9, None), (None, 0.1)):
        part = read_audio(path, start_s=start_s, stop_s=stop_s)
        first = 0 if start_s is None else round(start_s * FS)
        last = FS if stop_s is None else round(stop_s * FS)
        assert part.samples.dtype == np.float32 and part.start_s == first / FS
        np.testing.assert_array_equal(part.samples, full[first:last])


def test_a_seek_that_fails_names_the_file_and_the_reason(tmp_path):
    # A FLAC cut short: its header still promises 2 s, so a seek into the missing second half fails.
    data = np.random.default_rng(4).normal(0, 0.1, (2 * FS, 2))
    path = write_recording(tmp_path, stem="cut", data=data, sidecar=False)
    with open(path, "r+b") as f:
        f.truncate(path.stat().st_size // 3)
    with pytest.raises(AudioError, match=r"cut\.flac: cannot seek to 1\.5 s \(frame 72000 of the 96000 its header "
                                         r"promises\): .+; the file may be truncated"):
        read_audio(path, start_s=1.5, stop_s=1.9)
    with pytest.raises(AudioError, match=r"cut\.flac: (truncated|decoding failed)"):  # the full decode fails too
        read_audio(path)


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
        ({"actuation": 0}, r"field 'actuation' must be an integer from 1 to 10,000,000"),
        ({"actuation": "3"}, r"field 'actuation' must be an integer from 1 to 10,000,000.*'3'"),
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


# ------------------------------------------------------------------------------------------- sidecar limits

TIME = "2026-03-02T09:14:05+01:00"


def _nested(depth: int, leaf):
    """``leaf`` inside ``depth`` lists."""
    for _ in range(depth):
        leaf = [leaf]
    return leaf


def _limit_cases():
    for name in ("site", "rig", "lot", "unit", "profile"):
        yield {name: "x" * 201}, name, rf"field '{name}' is 201 characters long; at most 200 are allowed$"
    yield {"site": " " + "x" * 201}, "site", r"field 'site' is 201 characters long"  # counted after stripping
    yield ({"notes": "n" * 10_001}, "notes",
           r"field 'notes' is 10,001 characters long; at most 10,000 are allowed$")
    for bad in (0, -1, 10_000_001):
        yield ({"actuation": bad}, "actuation",
               rf"field 'actuation' must be an integer from 1 to 10,000,000 \(1-based within the unit\), got {bad}$")
    yield {"actuation": 10**90}, "actuation", r"got 1000000000000000000000000000000000000000000000000000000000000000"
    yield {"actuation": 2.0}, "actuation", r"field 'actuation' must be an integer from 1 to 10,000,000.*got 2\.0$"
    padded = TIME + " " * (65 - len(TIME))  # 65 characters; it would parse once stripped
    yield ({"recorded_at": padded}, "recorded_at",
           r"field 'recorded_at' is 65 characters long; at most 64 are allowed$")
    yield {"recorded_at": "x" * 5000}, "recorded_at", r"is 5,000 characters long; at most 64 are allowed$"
    yield {"recorded_at": 20260302}, "recorded_at", r"must be ISO 8601 text, got 20260302$"
    for bad in ("1969-12-31T23:59:59+00:00", "2201-01-01T00:00:00+00:00", "0001-01-01T00:00:00+00:00"):
        yield ({"recorded_at": bad}, "recorded_at",
               rf"field 'recorded_at' must be a time between 1970 and 2200, got '{bad[:19]}\+00:00'$")
    yield ({"markers_s": [0.01 * i for i in range(65)]}, "markers_s",
           r"field 'markers_s' holds 65 times; a recording has at most 64 markers$")
    yield {"site": "\ud800A"}, "site", r"field 'site' holds U\+D800 at character 0, which is not a Unicode character$"
    yield {"rig": "R\x07"}, "rig", r"field 'rig' holds the control character U\+0007 at character 1$"
    yield {"lot": "L\u202e1"}, "lot", r"field 'lot' holds the invisible formatting character U\+202E at character 1$"
    yield {"unit": "U\n1"}, "unit", r"field 'unit' holds the control character U\+000A at character 1$"  # one line
    yield {"unit": "U1\t"}, "unit", r"field 'unit' holds the control character U\+0009 at character 2$"
    yield {"profile": "demo\u200bdpi"}, "profile", r"field 'profile' holds the invisible formatting character U\+200B"
    for notes, cp, at in (("a\x00b", "0000", 1), ("line\r\n", "000D", 4), ("\udcff", "DCFF", 0),
                          ("ok\u2066", "2066", 2)):
        yield {"notes": notes}, "notes", rf"field 'notes' holds .*U\+{cp} at character {at}"
    yield ({"notes": "a\x1bb"}, "notes", r"field 'notes' holds the control character U\+001B at character 1 \(tab "
                                         r"and newline are the only control characters allowed there\)$")
    yield {"operator": "k\x1bim"}, "operator", r"field 'operator' holds the control character U\+001B at character 1$"
    yield {"operator": ["ok", {"x": "\ud83d"}]}, "operator", r"field 'operator' holds U\+D83D at character 0"
    yield ({"rig_info": {"na\x00me": 1}}, "rig_info",
           r"a key inside field 'rig_info' holds the control character U\+0000 at character 2$")
    yield {"deep": _nested(17, 1)}, "deep", r"field 'deep' nests objects or lists more than 16 deep$"
    yield {"deep": _nested(16, [])}, "deep", r"field 'deep' nests objects or lists more than 16 deep$"  # 17 lists
    deep_obj: object = 1
    for _ in range(17):
        deep_obj = {"a": deep_obj}
    yield {"deep": deep_obj}, "deep", r"field 'deep' nests objects or lists more than 16 deep$"


LIMIT_CASES = list(_limit_cases())


@pytest.mark.parametrize("change,field,match", LIMIT_CASES,
                         ids=[f"{i}-{field}" for i, (_, field, _) in enumerate(LIMIT_CASES)])
def test_sidecar_limits_name_the_file_the_field_and_the_value(tmp_path, change, field, match):
    path = write_recording(tmp_path, sidecar=sidecar_dict(**change))
    with pytest.raises(SidecarError, match=match) as info:
        read_sidecar(path)
    assert str(info.value).startswith(f"{tmp_path / 'rec.json'}: field '{field}' ") or (
        str(info.value).startswith(f"{tmp_path / 'rec.json'}: a key inside field '{field}' "))
    assert info.value.field == field
    assert len(str(info.value)) < 400  # a huge bad value is shortened, never echoed whole


@pytest.mark.parametrize("change,attribute,expected", [
    ({"site": "S" * 200}, "site", "S" * 200),
    ({"rig": "R" * 200}, "rig", "R" * 200),
    ({"lot": "L" * 200}, "lot", "L" * 200),
    ({"unit": "U" * 200}, "unit", "U" * 200),
    ({"unit": "  " + "U" * 200 + " "}, "unit", "U" * 200),  # the limit applies to the stripped text
    ({"site": "Prüfstand Nord – Halle 3 ✓"}, "site", "Prüfstand Nord – Halle 3 ✓"),  # letters and symbols are text
    ({"notes": "line\tnine\n" * 1000}, "notes", "line\tnine\n" * 1000),  # 10,000 characters with tabs and newlines
    ({"actuation": 1}, "actuation", 1),
    ({"actuation": 10_000_000}, "actuation", 10_000_000),
    ({"markers_s": [0.01 * i for i in range(64)]}, "markers_s", tuple(0.01 * i for i in range(64))),
])
def test_values_just_inside_the_sidecar_limits_are_taken(tmp_path, change, attribute, expected):
    if "notes" in change:
        assert len(change["notes"]) == 10_000
    path = write_recording(tmp_path, sidecar=sidecar_dict(**change))
    assert getattr(read_sidecar(path), attribute) == expected


@pytest.mark.parametrize("text,year", [
    ("1970-01-01T00:00:00+00:00", 1970),
    ("2200-12-31T23:59:59+00:00", 2200),
    ("2026-03-02T09:14:05+01:00" + " " * 39, 2026),  # 64 characters: the longest taken
])
def test_recorded_at_just_inside_its_limits_is_taken(tmp_path, text, year):
    path = write_recording(tmp_path, sidecar=sidecar_dict(recorded_at=text))
    s = read_sidecar(path)
    assert s.recorded_at.year == year and s.recorded_at.utcoffset() is not None


@pytest.mark.parametrize("value", [_nested(16, "leaf"), _nested(15, []), _nested(15, {})])
def test_unknown_field_nested_16_deep_is_kept(tmp_path, value):
    path = write_recording(tmp_path, sidecar=sidecar_dict(deep=value))
    with pytest.warns(SidecarWarning, match="deep"):
        s = read_sidecar(path)
    assert s.extra == {"deep": value}


def test_a_field_name_with_a_control_character_is_refused(tmp_path):
    path = write_recording(tmp_path, sidecar=sidecar_dict(**{"op\x01erator": "kim"}))
    with pytest.raises(SidecarError, match=r"rec\.json: a field name holds the control character U\+0001 at "
                                           r"character 2$"):
        read_sidecar(path)


def test_a_sidecar_nested_past_the_parsers_recursion_limit_is_refused(tmp_path):
    path = write_recording(tmp_path, sidecar=False)
    base = json.dumps(sidecar_dict())[:-1]
    text = base + ', "deep": ' + "[" * 25_000 + "]" * 25_000 + "}"
    assert len(text.encode()) < 64 * 1024  # under the size limit: the nesting is what is refused
    (tmp_path / "rec.json").write_text(text)
    with pytest.raises(SidecarError, match=r"^.*rec\.json: sidecar nests objects or lists more than 16 deep$"):
        read_sidecar(path)


def _sidecar_of_size(n_bytes: int) -> bytes:
    base = json.dumps(sidecar_dict(pad=""))
    pad = n_bytes - len(base.encode())
    data = json.dumps(sidecar_dict(pad="p" * pad)).encode()
    assert len(data) == n_bytes
    return data


def test_a_sidecar_over_64_kib_is_refused_and_one_of_64_kib_is_read(tmp_path):
    path = write_recording(tmp_path, sidecar=False)
    (tmp_path / "rec.json").write_bytes(_sidecar_of_size(64 * 1024))
    with pytest.warns(SidecarWarning, match="pad"):
        assert len(read_sidecar(path).extra["pad"]) > 60_000
    (tmp_path / "rec.json").write_bytes(_sidecar_of_size(64 * 1024 + 1))
    with pytest.raises(SidecarError) as info:
        read_sidecar(path)
    assert str(info.value) == (f"{tmp_path / 'rec.json'}: sidecar is larger than 64 KiB; a sidecar holds a few "
                               "short fields")


@pytest.mark.parametrize("dangling", [False, True])
def test_a_sidecar_that_is_a_symbolic_link_is_refused_unread(tmp_path, dangling):
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    target = elsewhere / "real.json"
    if not dangling:
        target.write_text(json.dumps(sidecar_dict()))  # a valid sidecar: the link, not its content, is refused
    path = write_recording(tmp_path / "inbox", sidecar=False)
    os.symlink(target, tmp_path / "inbox" / "rec.json")
    with pytest.raises(SidecarError) as info:
        read_sidecar(path)
    assert str(info.value) == (f"{tmp_path / 'inbox' / 'rec.json'}: sidecar is a symbolic link; only a file "
                               "delivered beside the recording is read")
    assert str(target) not in str(info.value)


# ------------------------------------------------------------------------------------- names and audio headers

def test_printable_name_escapes_undecodable_bytes_and_control_characters(tmp_path):
    raw = os.fsencode(tmp_path) + b"/a\xffb.flac"
    with open(raw, "wb") as f:
        f.write(b"x")
    (listed,) = os.listdir(tmp_path)
    assert listed == os.fsdecode(b"a\xffb.flac") == "a\udcffb.flac"  # how Python hands such a name over
    assert printable_name(listed) == "a\\xffb.flac"
    assert printable_name(b"a\xffb.flac") == "a\\xffb.flac"
    assert printable_name("line\nbreak\x7f.flac") == "line\\x0abreak\\x7f.flac"
    assert printable_name("\ud800.flac") == "\\ud800.flac"  # a surrogate no file name decoding makes
    assert printable_name("Prüfstand – ✓.flac") == "Prüfstand – ✓.flac"
    for name in (listed, "line\nbreak.flac", "\ud800.flac"):
        printable_name(name).encode("utf-8")  # always storable text: this raises if a surrogate is left


@pytest.mark.parametrize("name", ["noise.flac", "noise.wav", "NOISE.FLAC", "noise.ogg", "noise.aiff"])
def test_random_bytes_with_an_audio_ending_are_refused_before_decoding(tmp_path, name):
    data = b"\x00\x13" + np.random.default_rng(7).bytes(20_000)
    path = tmp_path / name
    path.write_bytes(data)
    want = (f"{path}: not a recognised audio file: it does not start with a FLAC, WAV, AIFF, Ogg, Wave64 or CAF "
            f"header (its first bytes are {data[:4].hex(' ')})")
    for reader in (read_audio, audio_info):
        with pytest.raises(AudioError) as info:
            reader(path)
        assert str(info.value) == want


def test_a_file_shorter_than_any_header_is_refused(tmp_path):
    path = tmp_path / "tiny.flac"
    path.write_bytes(b"fL")
    with pytest.raises(AudioError, match=r"tiny\.flac: not a recognised audio file: .*its first bytes are 66 4c\)$"):
        read_audio(path)


def test_a_known_header_with_garbage_after_it_goes_on_to_the_decoder(tmp_path):
    path = tmp_path / "fake.flac"
    path.write_bytes(b"fLaC" + np.random.default_rng(8).bytes(5000))
    with pytest.raises(AudioError, match=r"fake\.flac: not a readable audio file") as info:
        read_audio(path)
    assert "not a recognised" not in str(info.value)


@pytest.mark.parametrize("fmt,subtype,suffix", [
    ("FLAC", "PCM_16", ".flac"), ("WAV", "PCM_16", ".wav"), ("WAVEX", "FLOAT", ".wav"), ("RF64", "PCM_16", ".wav"),
    ("AIFF", "PCM_16", ".aif"), ("AIFF", "PCM_24", ".aiff"), ("W64", "PCM_16", ".w64"), ("CAF", "PCM_16", ".caf"),
    ("OGG", "VORBIS", ".ogg"),
])
def test_every_format_taken_from_folders_passes_the_header_check(tmp_path, fmt, subtype, suffix):
    x = 0.25 * np.sin(2 * np.pi * 440.0 * np.arange(FS // 10) / FS)
    path = tmp_path / f"tone{suffix}"
    sf.write(str(path), x[:, None], FS, format=fmt, subtype=subtype)
    audio = read_audio(path)
    assert audio.samples.shape == (FS // 10, 1) and audio.sample_rate_hz == FS


def test_the_printable_shortcut_of_the_sidecar_text_check_lets_nothing_through():
    # The check skips its per-character loop for text str.isprintable() accepts; no printable code point may be a
    # control (Cc), format (Cf) or surrogate (Cs) character, or the shortcut would pass what the loop rejects.
    import sys
    import unicodedata

    from analysis.io import _bad_character

    leaks = [cp for cp in range(sys.maxunicode + 1)
             if chr(cp).isprintable() and unicodedata.category(chr(cp)) in ("Cc", "Cf", "Cs")]
    assert leaks == []
    assert _bad_character("L2601-01") is None and _bad_character("Zoë Ng") is None
    assert _bad_character("a\u200bb") == "holds the invisible formatting character U+200B at character 1"
    assert _bad_character("a\tb", allow="\t\n") is None and _bad_character("a\tb") is not None
