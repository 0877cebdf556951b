"""The hostile-input suite's one generator: an inbox of bad, odd and crafted deliveries, each with what must
become of it, and the table of cases the README's reliability section shows.

``make_hostile_inbox(folder)`` writes every case into ``folder/inbox`` (and the targets of its links into
``folder/outside``) and returns the cases. A case ends as

- ``quarantine``: refused; the store keeps the reason, which must contain ``reason`` and name the file;
- ``analysed``: stored (its odd names shown as text wherever they appear; QC may flag it);
- ``duplicate``: a byte-identical copy of another delivery of the same pass: not stored twice, removed;
- ``skipped``: not taken (a hidden partial upload, a folder named like a recording): left where it is.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import soundfile as sf

from tests.conftest import FS, sidecar_dict, synth_actuation

__all__ = ["Case", "make_hostile_inbox", "HTML_RIG", "SQL_LOT", "readme_table"]

HTML_RIG = '<a href="https://evil.example/">R9</a><b>bold</b><img src=x onerror=alert(1)>'
SQL_LOT = "L1'; DROP TABLE actuations; --"


@dataclass(frozen=True)
class Case:
    key: str  # short id, also in the README's table
    what: str  # what is delivered, in words
    file: str  # the recording's name relative to the inbox ('' when the case is not one file)
    outcome: str  # quarantine | analysed | duplicate | skipped
    reason: str = ""  # words the stored reason must contain (quarantine)
    check: str = ""  # the quality check an analysed recording must fail ('' when it passes them all)


def _good(seed: int):
    mic, marker = synth_actuation(seed=seed)
    return np.column_stack([mic, marker]).astype(np.float32)


def _write(inbox: Path, name: str, *, data=None, sidecar=None, seed=0, fmt="FLAC", subtype="PCM_24",
           fs: int = FS, raw_sidecar: bytes | None = None) -> Path:
    path = inbox / name
    path.parent.mkdir(parents=True, exist_ok=True)
    sf.write(str(path), _good(seed) if data is None else data, fs, format=fmt, subtype=subtype)
    side = path.with_name(path.stem + ".json")
    if raw_sidecar is not None:
        side.write_bytes(raw_sidecar)
    elif sidecar is not False:
        side.write_text(json.dumps(sidecar if sidecar is not None else sidecar_dict(unit=f"U{seed:03d}"),
                                   ensure_ascii=False), encoding="utf-8", errors="surrogatepass")
    return path


def _side(**over) -> dict:
    return sidecar_dict(**over)


def make_hostile_inbox(folder: Path) -> list[Case]:
    """Write every case into ``folder/inbox``; returns the cases (the good ones are cases too)."""
    inbox, outside = folder / "inbox", folder / "outside"
    inbox.mkdir(parents=True, exist_ok=True)
    outside.mkdir(parents=True, exist_ok=True)
    cases: list[Case] = []

    def add(key, what, file, outcome, reason="", check=""):
        cases.append(Case(key, what, file, outcome, reason, check))

    rng = np.random.default_rng(42)
    # --- the audio itself -----------------------------------------------------------------------------------
    _write(inbox, "good_a.flac", seed=1)
    add("good", "a good recording with its sidecar", "good_a.flac", "analysed")
    (inbox / "empty.flac").write_bytes(b"")
    (inbox / "empty.json").write_text(json.dumps(_side()))
    add("empty", "a 0-byte .flac", "empty.flac", "quarantine", "file is empty (0 bytes)")
    good = _write(folder / "scratch", "cut.flac", seed=2)
    (inbox / "cut.flac").write_bytes(good.read_bytes()[: good.stat().st_size // 2])
    (inbox / "cut.json").write_text(json.dumps(_side()))
    add("truncated", "a FLAC cut in half", "cut.flac", "quarantine", "truncated")
    for key, name in (("random-flac", "noise.flac"), ("random-wav", "noise2.wav")):
        (inbox / name).write_bytes(rng.bytes(20_000))
        (inbox / name).with_suffix(".json").write_text(json.dumps(_side()))
        add(key, f"random bytes named {name}", name, "quarantine", "not a recognised audio file")
    (inbox / "text.wav").write_text("hello, this is not audio\n" * 50)
    (inbox / "text.json").write_text(json.dumps(_side()))
    add("text-as-wav", "a text file named .wav", "text.wav", "quarantine", "not a recognised audio file")
    (inbox / "png.flac").write_bytes(b"\x89PNG\r\n\x1a\n" + rng.bytes(3000))
    (inbox / "png.json").write_text(json.dumps(_side()))
    add("image-as-flac", "a PNG image named .flac", "png.flac", "quarantine", "not a recognised audio file")
    (inbox / "header.wav").write_bytes(b"RIFF\x24\x00\x00\x00WAVEfmt ")
    (inbox / "header.json").write_text(json.dumps(_side()))
    add("header-only", "a WAV that stops inside its header", "header.wav", "quarantine", "not a readable audio file")
    nan = _good(3)
    nan[1000, 0], nan[2000, 0] = np.nan, np.inf
    _write(inbox, "nan.wav", data=nan, fmt="WAV", subtype="FLOAT", sidecar=_side(unit="U003"))
    add("nan-samples", "a float WAV with NaN and infinite samples", "nan.wav", "quarantine", "non-finite sample")
    _write(inbox, "one_hz.wav", data=np.zeros((4, 2), np.float32), fmt="WAV", subtype="PCM_16", fs=1,
           sidecar=_side(unit="U004"))
    add("1-hz", "a WAV whose header says 1 Hz", "one_hz.wav", "quarantine", "sample rate of 1 Hz is too low")
    _write(inbox, "low_rate.wav", data=np.zeros((9600, 2), np.float32), fmt="WAV", subtype="PCM_16", fs=8000,
           sidecar=_side(unit="U005"))
    add("8-khz", "an 8 kHz recording (the profile wants 44.1 to 96 kHz)", "low_rate.wav", "analysed",
        check="sample_rate")
    _write(inbox, "one_sample.wav", data=np.zeros((1, 2), np.float32), fmt="WAV", subtype="PCM_16",
           sidecar=_side(unit="U006"))
    add("1-sample", "a recording of one sample", "one_sample.wav", "analysed", check="duration")
    _write(inbox, "silent.flac", data=np.zeros((FS, 2), np.float32), sidecar=_side(unit="U007"))
    add("silent", "a second of digital silence", "silent.flac", "analysed", check="silence")
    _write(inbox, "mono.flac", data=_good(8)[:, :1], sidecar=_side(unit="U008"))
    add("mono", "a mono file whose sidecar names a marker on channel 1", "mono.flac", "analysed",
        check="marker")
    # --- names of files ------------------------------------------------------------------------------------
    _write(inbox, "odd.flac", seed=9, sidecar=_side(unit="U009"))
    os.rename(inbox / "odd.flac", os.fsencode(inbox) + b"/a\xffb.flac")  # soundfile writes only UTF-8 names
    os.rename(inbox / "odd.json", os.fsencode(inbox) + b"/a\xffb.json")
    add("non-utf8-name", "a file name with a byte that is not UTF-8 (a\\xffb.flac)", "a\\xffb.flac", "analysed")
    _write(inbox, "line\nbreak.flac", seed=10, sidecar=_side(unit="U010"))
    add("newline-name", "a file name with a newline", "line\\x0abreak.flac", "analysed")
    _write(inbox, "<b>bold</b>.flac", seed=11, sidecar=_side(unit="U011"))
    add("html-name", "a file name with HTML in it", "<b>bold</b>.flac", "analysed")
    long_name = "L" * 200 + ".flac"
    _write(inbox, long_name, seed=12, sidecar=_side(unit="U012"))
    add("long-name", "a 205-character file name", long_name, "analysed")
    # --- links and things that are not recordings ----------------------------------------------------------
    target = _write(outside, "secret.flac", seed=13, sidecar=_side(unit="U013"))
    os.symlink(target, inbox / "linked.flac")
    os.symlink(target.with_suffix(".json"), inbox / "linked.json")
    add("symlink-recording", "a symbolic link to a recording outside the inbox", "linked.flac", "quarantine",
        "is a symbolic link")
    _write(inbox, "link_side.flac", seed=14, sidecar=False)
    (outside / "passwords.txt").write_text('{"site": "x", "secret": "hunter2"}')
    os.symlink(outside / "passwords.txt", inbox / "link_side.json")
    add("symlink-sidecar", "a recording whose sidecar is a link to a file outside the inbox", "link_side.flac",
        "quarantine", "sidecar is a symbolic link")
    (outside / "folder").mkdir()
    _write(outside / "folder", "inside.flac", seed=15, sidecar=_side(unit="U015"))
    os.symlink(outside / "folder", inbox / "linked_dir")
    add("symlink-folder", "a symbolic link to a folder of recordings outside the inbox", "linked_dir", "quarantine",
        "symbolic link to a folder")
    _write(inbox, ".partial.flac", seed=16)
    add("hidden", "a hidden file (a partial upload)", ".partial.flac", "skipped")
    (inbox / "folder.flac").mkdir()
    add("folder-named-flac", "a folder named like a recording", "folder.flac", "skipped")
    twin = _write(inbox, "twin_a.flac", seed=17, sidecar=_side(unit="U017"))
    (inbox / "twin_b.flac").write_bytes(twin.read_bytes())
    (inbox / "twin_b.json").write_text(json.dumps(_side(unit="U017")))
    add("twins", "two byte-identical copies in one delivery", "twin_b.flac", "duplicate")
    # --- sidecars ------------------------------------------------------------------------------------------
    def bad_side(key, what, stem, reason, *, sidecar=None, raw=None, outcome="quarantine", seed=20):
        _write(inbox, f"{stem}.flac", seed=seed + len(cases), sidecar=sidecar, raw_sidecar=raw)
        add(key, what, f"{stem}.flac", outcome, reason)

    bad_side("no-sidecar", "a recording without its sidecar", "lonely", "sidecar metadata file is missing",
             sidecar=False)
    bad_side("not-json", "a sidecar that is not JSON", "notjson", "sidecar is not valid JSON", raw=b"{not json")
    bad_side("json-array", "a sidecar that is a JSON array [1, 2, 3]", "array", "sidecar must be a JSON object",
             raw=b"[1, 2, 3]")
    bad_side("json-string", "a sidecar that is a JSON string", "string", "sidecar must be a JSON object",
             raw=b'"site"')
    bad_side("huge-sidecar", "a sidecar of 1 MB (an object nested 200,000 deep)", "deep",
             "sidecar is larger than 64 KiB", raw=b'{"a":' * 200_000 + b"1" + b"}" * 200_000)
    bad_side("deep-sidecar", "a sidecar nested 10,000 deep within 64 KiB", "deeper", "nests objects or lists",
             raw=b'{"site":"S","extra":' + b"[" * 10_000 + b"]" * 10_000 + b"}")
    nested = {"x": 1}
    for _ in range(20):
        nested = {"n": nested}
    bad_side("nested-extra", "an unknown field nested 20 deep", "nested", "nests objects or lists more than 16 deep",
             sidecar=_side(extra=nested))
    bad_side("not-utf8-sidecar", "a sidecar in Latin-1, not UTF-8", "latin", "sidecar is not UTF-8 text",
             raw=json.dumps(_side(site="Zürich"), ensure_ascii=False).encode("latin-1"))
    bad_side("lone-surrogate", 'a lot holding a lone surrogate ("LOT\\ud800X", valid JSON)', "surrogate",
             "is not a Unicode character", raw=b'{"site":"S","rig":"R","lot":"LOT\\ud800X","unit":"U",'
                                              b'"actuation":1,"recorded_at":"2026-03-02T09:14:05+01:00",'
                                              b'"profile":"demo-dpi"}')
    bad_side("control-char", "a rig name with a BEL control character", "bell", "control character U+0007",
             sidecar=_side(rig="R\x07"))
    bad_side("bidi-override", "a site name with a right-to-left override", "bidi", "invisible formatting character",
             sidecar=_side(site="\u202eedisekaL"))
    bad_side("long-site", "a 60,000-character site name", "longsite", "at most 200 are allowed",
             raw=json.dumps(_side(site="S" * 60_000)).encode())
    bad_side("long-notes", "notes of 20,000 characters", "longnotes", "at most 10,000 are allowed",
             sidecar=_side(notes="n" * 20_000))
    bad_side("escape-in-notes", "notes with a terminal escape sequence", "ansi", "control character U+001B",
             sidecar=_side(notes="done \x1b[31mred"))
    bad_side("blank-unit", "a unit that is only spaces", "blank", "field 'unit' must be non-empty text",
             sidecar=_side(unit="   "))
    bad_side("profile-path", "a profile given as a path (/etc/passwd)", "ppath", "is not a device profile name",
             sidecar=_side(profile="/etc/passwd"))
    loose = inbox / "loose.toml"
    loose.write_text("[profile]\nname = 'loose'\n[quality]\nmax_clipped_fraction = 1.0\n")
    bad_side("profile-file", "a profile given as a .toml path delivered beside it", "ptoml",
             "is not a device profile name", sidecar=_side(profile=str(loose)))
    bad_side("profile-dots", "a profile name that climbs folders (../x)", "pdots", "is not a device profile name",
             sidecar=_side(profile="../demo_data/profiles/demo-dpi"))
    bad_side("profile-unknown", "a profile name that is not there", "pnone", "no device profile named 'nosuch'",
             sidecar=_side(profile="nosuch"))
    bad_side("actuation-bool", "actuation true", "abool", "field 'actuation' must be an integer",
             sidecar=_side(actuation=True))
    bad_side("actuation-huge", "actuation 10^30 (beyond any database integer)", "ahuge",
             "field 'actuation' must be an integer", sidecar=_side(actuation=10**30))
    bad_side("actuation-negative", "actuation -1", "aneg", "field 'actuation' must be an integer",
             sidecar=_side(actuation=-1))
    bad_side("time-no-offset", "recorded_at without a UTC offset", "tnaive", "must carry a UTC offset",
             sidecar=_side(recorded_at="2026-03-02T09:14:05"))
    bad_side("time-garbage", "recorded_at that is not a time", "tbad", "is not an ISO 8601 time",
             sidecar=_side(recorded_at="yesterday"))
    bad_side("time-far", "recorded_at in the year 9999", "tfar", "between 1970 and 2200",
             sidecar=_side(recorded_at="9999-12-31T23:59:59-05:00"))
    bad_side("markers-nan", "marker times with NaN", "mnan", "field 'markers_s' must be a list",
             raw=json.dumps(_side(markers_s=[0.3, float("nan")])).encode())
    bad_side("markers-backwards", "marker times going backwards", "mback", "must be increasing",
             sidecar=_side(markers_s=[0.4, 0.3]))
    bad_side("channel-beyond", "a channel map naming channel 7 of a 2-channel file", "chan",
             "channel 7 requested", sidecar=_side(channels={"mic": 7, "marker": 1}))
    bad_side("key-control", "an unknown field whose name holds a control character", "keyctl",
             "a field name holds the control character", sidecar={**_side(), "x\x01": 1})
    bad_side("html-rig", "a rig name that is HTML with a link and a script", "htmlrig", "",
             sidecar=_side(rig=HTML_RIG), outcome="analysed")
    bad_side("sql-lot", "a lot name that is SQL", "sqllot", "", sidecar=_side(lot=SQL_LOT), outcome="analysed")
    bad_side("unicode-names", "names in other scripts (Zürich, 東京, Ελλάδα)", "uni", "",
             sidecar=_side(site="Zürich 東京", rig="Ελλάδα-R1"), outcome="analysed")
    return cases


def readme_table(cases: list[Case]) -> str:
    """The README's table of the cases and what becomes of them."""
    rows = ["| case | delivered | outcome |", "|---|---|---|"]
    for c in cases:
        end = {"quarantine": f"quarantined: \"…{c.reason}…\"" if c.reason else "quarantined",
               "analysed": f"analysed; fails the `{c.check}` check, so flagged" if c.check
               else "analysed; names stored as given and shown as text",
               "duplicate": "stored once; the copy is removed", "skipped": "left in the inbox, not taken"}[c.outcome]
        rows.append(f"| {c.key} | {c.what} | {end} |")
    return "\n".join(rows)
