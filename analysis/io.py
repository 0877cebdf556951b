"""The audio reader and the sidecar metadata: the only place in analysis/ that reads recordings.

Audio goes through libsndfile (via soundfile), so any format it knows (FLAC, WAV, AIFF, OGG, ...) is read; samples
come out as float32 in full-scale units, shape (frames, channels). A time range can be read alone (a seek, not a
decode of the whole file).

A recording's metadata lives in a sidecar JSON file beside it, ``<recording stem>.json``: Harken's own format,
described in the README ("Sidecar metadata").
"""

from __future__ import annotations

import json
import math
import os
import unicodedata
import warnings
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np
import soundfile as sf

from .errors import AudioError, SidecarError

__all__ = [
    "AudioInfo",
    "Audio",
    "Sidecar",
    "SidecarWarning",
    "audio_info",
    "read_audio",
    "sidecar_path",
    "is_recording",
    "AUDIO_SUFFIXES",
    "printable_name",
    "MAX_SIDECAR_BYTES",
    "MAX_NAME_CHARS",
    "MAX_NOTES_CHARS",
    "read_sidecar",
    "parse_sidecar",
    "SIDECAR_FIELDS",
]


@dataclass(frozen=True)
class AudioInfo:
    """What a recording's header says: sample rate (Hz), channel count, frames, duration (s), container, encoding."""

    path: str
    sample_rate_hz: int
    channels: int
    frames: int
    duration_s: float
    format: str
    subtype: str
    size_bytes: int


@dataclass(frozen=True, eq=False)
class Audio:
    """Decoded samples, float32 in full-scale units, shape (frames, channels), starting at ``start_s``."""

    samples: np.ndarray
    sample_rate_hz: int
    start_s: float
    info: AudioInfo

    @property
    def path(self) -> str:
        return self.info.path

    @property
    def n_channels(self) -> int:
        return int(self.samples.shape[1])

    @property
    def n_frames(self) -> int:
        return int(self.samples.shape[0])

    def channel(self, index: int) -> np.ndarray:
        """One channel as a 1-D float32 array; an index beyond the file's channels is an AudioError."""
        if not 0 <= index < self.n_channels:
            raise AudioError(
                self.path, f"channel {index} requested but the file has {self.n_channels} channel(s)"
            )
        return self.samples[:, index]


#: How the formats Harken takes from folders begin (RIFF/RIFX/RF64/BW64 WAV, FLAC (also after an ID3 tag), AIFF,
#: Ogg, Wave64, CAF): a file with one of these endings that starts otherwise is not handed to libsndfile, whose
#: guess at such a file is a misleading message (and, for MPEG, a decoder warning on the terminal).
_MAGIC = (b"RIFF", b"RIFX", b"RF64", b"BW64", b"fLaC", b"ID3", b"FORM", b"OggS", b"riff", b"caff")


def _check_file(path: Path) -> int:
    if not path.exists():
        raise AudioError(path, "file does not exist")
    if not path.is_file():
        raise AudioError(path, "not a regular file")
    size = path.stat().st_size
    if size == 0:
        raise AudioError(path, "file is empty (0 bytes)")
    if path.suffix.lower() in AUDIO_SUFFIXES:
        with open(path, "rb") as f:
            head = f.read(4)
        if not any(head.startswith(m[: len(head)]) and len(head) >= len(m) for m in _MAGIC):
            raise AudioError(path, "not a recognised audio file: it does not start with a FLAC, WAV, AIFF, Ogg, "
                                   f"Wave64 or CAF header (its first bytes are {head.hex(' ') or 'none'})")
    return size


def _open_error(path: Path, exc: Exception) -> AudioError:
    text = str(exc).strip() or type(exc).__name__
    # libsndfile's message repeats the path; keep the reason only.
    for shown in (repr(os.fsencode(path)), repr(str(path))):  # soundfile names it as bytes or as text
        text = text.replace(f"Error opening {shown}: ", "")
    text = text.replace(str(path), "<file>")
    return AudioError(path, f"not a readable audio file ({text})")


def _info_from(handle: sf.SoundFile, path: Path, size: int) -> AudioInfo:
    if handle.samplerate <= 0 or handle.channels <= 0:
        raise AudioError(path, f"header is invalid (sample rate {handle.samplerate}, channels {handle.channels})")
    return AudioInfo(
        path=str(path),
        sample_rate_hz=int(handle.samplerate),
        channels=int(handle.channels),
        frames=int(handle.frames),
        duration_s=float(handle.frames) / float(handle.samplerate),
        format=str(handle.format),
        subtype=str(handle.subtype),
        size_bytes=int(size),
    )


def _open(path: Path) -> sf.SoundFile:
    try:
        return sf.SoundFile(os.fsencode(path))  # bytes: a name that is not UTF-8 opens too
    except (sf.LibsndfileError, RuntimeError, TypeError, ValueError) as exc:
        raise _open_error(path, exc) from None


def audio_info(path) -> AudioInfo:
    """Read a recording's header only. Raises AudioError naming the file and the reason."""
    path = Path(path)
    size = _check_file(path)
    with _open(path) as handle:
        return _info_from(handle, path, size)


def read_audio(path, *, start_s: float | None = None, stop_s: float | None = None) -> Audio:
    """Decode a recording (or only ``start_s``..``stop_s``, seconds from its start) to float32 (frames, channels).

    Raises AudioError for an empty, unreadable or truncated file, and for NaN or infinite samples.
    """
    path = Path(path)
    size = _check_file(path)
    with _open(path) as handle:  # one open for header and samples: opening costs as much as decoding here
        info = _info_from(handle, path, size)
        return _decode(handle, info, path, start_s, stop_s)


def _decode(handle: sf.SoundFile, info: AudioInfo, path: Path, start_s, stop_s) -> Audio:
    fs = info.sample_rate_hz
    first = 0 if start_s is None else int(round(float(start_s) * fs))
    last = info.frames if stop_s is None else int(round(float(stop_s) * fs))
    if start_s is not None and (not math.isfinite(start_s) or start_s < 0):
        raise AudioError(path, f"start_s must be a finite time >= 0 s, got {start_s!r}")
    if stop_s is not None and (not math.isfinite(stop_s) or stop_s <= (start_s or 0.0)):
        raise AudioError(path, f"stop_s must be after start_s, got start_s={start_s!r}, stop_s={stop_s!r}")
    first = min(first, info.frames)
    last = min(max(last, first), info.frames)
    wanted = last - first
    if first:
        try:
            handle.seek(first)
        except (sf.LibsndfileError, RuntimeError, TypeError, ValueError) as exc:
            raise AudioError(path, f"cannot seek to {first / fs:.6g} s (frame {first} of the {info.frames} its "
                                   f"header promises): {exc}; the file may be truncated") from None
    as_integers = _INTEGER_READS.get(info.subtype)
    try:
        if as_integers is None:
            samples = handle.read(wanted, dtype="float32", always_2d=True)
        else:
            dtype, full_scale = as_integers
            samples = handle.read(wanted, dtype=dtype, always_2d=True).astype(np.float32)
            samples *= np.float32(1.0 / full_scale)
    except (sf.LibsndfileError, RuntimeError, TypeError, ValueError) as exc:
        raise AudioError(path, f"decoding failed after the header was read ({exc}); "
                               "the file may be truncated") from None
    if samples.shape[0] < wanted:
        raise AudioError(
            path,
            f"truncated: the header promises {info.frames} frames but only {first + samples.shape[0]} "
            "could be decoded",
        )
    if as_integers is None and samples.size and not np.isfinite(samples).all():  # integers are always finite
        bad = int(np.count_nonzero(~np.isfinite(samples)))
        raise AudioError(path, f"contains {bad} non-finite sample(s) (NaN or infinity)")
    return Audio(samples=samples, sample_rate_hz=fs, start_s=first / fs, info=info)


#: Integer PCM that libsndfile decodes faster to integers than to floats: read as (dtype, full scale) and scaled
#: here, which gives the float32 samples libsndfile's own conversion gives (k / 2^15 and k·2^8 / 2^31 are exact
#: in float32).
_INTEGER_READS = {"PCM_16": ("int16", 2.0**15), "PCM_24": ("int32", 2.0**31)}


# --------------------------------------------------------------------------------------------------- sidecar

#: field -> (required, description). The one definition of the sidecar format.
SIDECAR_FIELDS: dict[str, tuple[bool, str]] = {
    "site": (True, "site name (text)"),
    "rig": (True, "rig name (text)"),
    "lot": (True, "lot number (text)"),
    "unit": (True, "unit (one device) identifier (text)"),
    "actuation": (True, "actuation number within the unit (integer, 1-based)"),
    "recorded_at": (True, "time of recording, ISO 8601 with UTC offset"),
    "profile": (True, "device profile name (text)"),
    "channels": (False, 'channel map, e.g. {"mic": 0, "marker": 1}'),
    "markers_s": (False, "marker times in seconds from the recording start (list of numbers)"),
    "notes": (False, "free text"),
}
_CHANNEL_ROLES = ("mic", "marker")


class SidecarWarning(UserWarning):
    """A sidecar has fields Harken does not know; they are kept."""


@dataclass(frozen=True)
class Sidecar:
    """A recording's metadata, validated. ``extra`` keeps unknown fields; ``warnings`` says what was odd."""

    path: str
    site: str
    rig: str
    lot: str
    unit: str
    actuation: int
    recorded_at: datetime
    profile: str
    channels: dict[str, int] | None = None
    markers_s: tuple[float, ...] | None = None
    notes: str | None = None
    extra: dict[str, Any] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()

    def to_json(self) -> dict[str, Any]:
        """The sidecar as JSON-ready data, in the file's own field names."""
        out: dict[str, Any] = {
            "site": self.site,
            "rig": self.rig,
            "lot": self.lot,
            "unit": self.unit,
            "actuation": self.actuation,
            "recorded_at": self.recorded_at.isoformat(),
            "profile": self.profile,
        }
        if self.channels is not None:
            out["channels"] = dict(self.channels)
        if self.markers_s is not None:
            out["markers_s"] = list(self.markers_s)
        if self.notes is not None:
            out["notes"] = self.notes
        out.update(self.extra)
        return out


#: File name endings taken for recordings when folders are searched (any libsndfile format can be named directly).
AUDIO_SUFFIXES = (".flac", ".wav", ".aif", ".aiff", ".ogg", ".w64", ".caf")


def is_recording(path) -> bool:
    """Whether a file found in a folder is taken for a recording: a regular file with an audio ending whose name
    does not start with a dot (hidden files are partial uploads or a copier's temporary files)."""
    p = Path(path)
    return p.suffix.lower() in AUDIO_SUFFIXES and not p.name.startswith(".") and p.is_file()


def printable_name(name) -> str:
    """A file name (or any text) as it may be stored and shown: bytes that are not UTF-8 (which Python keeps as
    lone surrogates) and control characters are written as escapes, e.g. ``a\\xffb.flac`` for the bytes
    61 ff 62; everything else is kept."""
    text = os.fsdecode(name) if isinstance(name, bytes) else str(name)
    try:
        raw = os.fsencode(text)
    except UnicodeEncodeError:  # a surrogate that no file name decoding made: keep its code point visible
        raw = text.encode("utf-8", "backslashreplace")
    out = raw.decode("utf-8", "backslashreplace")
    return "".join(c if unicodedata.category(c) != "Cc" else f"\\x{ord(c):02x}" for c in out)


def sidecar_path(recording_path) -> Path:
    """The sidecar that belongs to a recording: ``<stem>.json`` in the same folder."""
    p = Path(recording_path)
    return p.with_name(p.stem + ".json")


#: A sidecar holds a few short fields; anything larger is not one (and would be kept whole in the store).
MAX_SIDECAR_BYTES = 64 * 1024
#: Longest site, rig, lot and unit name, and longest notes (characters).
MAX_NAME_CHARS = 200
MAX_NOTES_CHARS = 10_000
#: Most marker times a sidecar may list.
MAX_MARKERS = 64
#: Longest recorded_at text (an ISO 8601 time with microseconds and offset is 32 characters).
MAX_TIME_CHARS = 64
#: Highest actuation number of a unit (a device fired more often than this is not a test rig's).
MAX_ACTUATION = 10_000_000
#: Deepest nesting of objects and lists in a sidecar's unknown fields.
MAX_SIDECAR_DEPTH = 16


def read_sidecar(path) -> Sidecar:
    """Read and validate a sidecar JSON file (give the JSON's path, or the recording's: its sidecar is found).

    A symbolic link is refused without being followed; so is a file over MAX_SIDECAR_BYTES."""
    path = Path(path)
    if path.suffix.lower() != ".json":
        path = sidecar_path(path)
    if path.is_symlink():
        raise SidecarError(path, "sidecar is a symbolic link; only a file delivered beside the recording is read")
    if not path.exists():
        raise SidecarError(path, "sidecar metadata file is missing (expected beside the recording)")
    try:
        with open(path, "rb") as f:
            data = f.read(MAX_SIDECAR_BYTES + 1)
    except OSError as exc:
        raise SidecarError(path, f"sidecar cannot be read ({exc.strerror or exc})") from None
    if len(data) > MAX_SIDECAR_BYTES:
        raise SidecarError(path, f"sidecar is larger than {MAX_SIDECAR_BYTES // 1024} KiB; a sidecar holds a few "
                                 "short fields")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise SidecarError(path, f"sidecar is not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    try:
        obj = json.loads(text)
    except json.JSONDecodeError as exc:
        raise SidecarError(path, f"sidecar is not valid JSON ({exc.msg} at line {exc.lineno} "
                                 f"column {exc.colno})") from None
    except RecursionError:
        raise SidecarError(path, f"sidecar nests objects or lists more than {MAX_SIDECAR_DEPTH} deep") from None
    return parse_sidecar(obj, source=path)


def _bad_character(value: str, *, allow: str = "") -> str | None:
    """Why ``value`` is not acceptable text (a lone surrogate, which is no Unicode character, or a control or
    format character other than those in ``allow``), or None."""
    if value.isprintable():  # no control, format or surrogate character: the usual case, without the loop
        return None
    for i, c in enumerate(value):
        cp = ord(c)
        if 0xD800 <= cp <= 0xDFFF:
            return f"holds U+{cp:04X} at character {i}, which is not a Unicode character"
        if c in allow:
            continue
        cat = unicodedata.category(c)
        if cat in ("Cc", "Cf"):
            kind = "control" if cat == "Cc" else "invisible formatting"
            return f"holds the {kind} character U+{cp:04X} at character {i}"
    return None


def _check_extra(value, source, key: str, depth: int = 0) -> None:
    """Unknown fields are kept as they are: their text must be text and their nesting shallow (at most
    MAX_SIDECAR_DEPTH objects or lists one inside the other)."""
    if isinstance(value, (dict, list)) and depth >= MAX_SIDECAR_DEPTH:
        raise SidecarError(source, f"field {key!r} nests objects or lists more than {MAX_SIDECAR_DEPTH} deep",
                           field=key)
    if isinstance(value, str):
        why = _bad_character(value, allow="\t\n")
        if why:
            raise SidecarError(source, f"field {key!r} {why}", field=key)
    elif isinstance(value, dict):
        for k, v in value.items():
            why = _bad_character(k)
            if why:
                raise SidecarError(source, f"a key inside field {key!r} {why}", field=key)
            _check_extra(v, source, key, depth + 1)
    elif isinstance(value, list):
        for v in value:
            _check_extra(v, source, key, depth + 1)


def _text(obj: dict, name: str, source, *, max_chars: int = MAX_NAME_CHARS) -> str:
    value = obj[name]
    if not isinstance(value, str) or not value.strip():
        raise SidecarError(source, f"field {name!r} must be non-empty text, got {_short_repr(value)}", field=name)
    why = _bad_character(value)
    if why:
        raise SidecarError(source, f"field {name!r} {why}", field=name)
    value = value.strip()
    if len(value) > max_chars:
        raise SidecarError(source, f"field {name!r} is {len(value):,} characters long; at most {max_chars} are "
                                   "allowed", field=name)
    return value


def _short_repr(value, limit: int = 80) -> str:
    text = repr(value)
    return text if len(text) <= limit else text[:limit] + "…"


def parse_sidecar(obj: Any, *, source) -> Sidecar:
    """Validate sidecar data already parsed from JSON. Errors name the field and ``source``."""
    if not isinstance(obj, dict):
        raise SidecarError(source, f"sidecar must be a JSON object, got {type(obj).__name__}")
    for key in obj:
        why = _bad_character(key)
        if why:
            raise SidecarError(source, f"a field name {why}")
    for name, (required, what) in SIDECAR_FIELDS.items():
        if required and name not in obj:
            raise SidecarError(source, f"required field {name!r} is missing ({what})", field=name)
    site, rig, lot, unit, profile = (_text(obj, k, source) for k in ("site", "rig", "lot", "unit", "profile"))

    actuation = obj["actuation"]
    if isinstance(actuation, bool) or not isinstance(actuation, int) or not 1 <= actuation <= MAX_ACTUATION:
        raise SidecarError(
            source, f"field 'actuation' must be an integer from 1 to {MAX_ACTUATION:,} (1-based within the unit), "
                    f"got {_short_repr(actuation)}", field="actuation",
        )

    raw_time = obj["recorded_at"]
    if isinstance(raw_time, str) and len(raw_time) > MAX_TIME_CHARS:
        raise SidecarError(source, f"field 'recorded_at' is {len(raw_time):,} characters long; at most "
                                   f"{MAX_TIME_CHARS} are allowed", field="recorded_at")
    if not isinstance(raw_time, str):
        raise SidecarError(source, f"field 'recorded_at' must be ISO 8601 text, got {_short_repr(raw_time)}",
                           field="recorded_at")
    try:
        recorded_at = datetime.fromisoformat(raw_time.strip())
    except ValueError:
        raise SidecarError(
            source, f"field 'recorded_at' is not an ISO 8601 time: {raw_time!r}", field="recorded_at"
        ) from None
    if recorded_at.tzinfo is None or recorded_at.utcoffset() is None:
        raise SidecarError(
            source,
            f"field 'recorded_at' must carry a UTC offset (e.g. 2026-03-02T09:14:05+01:00), got {raw_time!r}",
            field="recorded_at",
        )
    if not 1970 <= recorded_at.year <= 2200:
        raise SidecarError(source, f"field 'recorded_at' must be a time between 1970 and 2200, got {raw_time!r}",
                           field="recorded_at")

    channels = None
    if obj.get("channels") is not None:
        raw = obj["channels"]
        if not isinstance(raw, dict):
            raise SidecarError(source, "field 'channels' must be an object like {\"mic\": 0}, got "
                                       f"{_short_repr(raw)}", field="channels")
        channels = {}
        for role, index in raw.items():
            if role not in _CHANNEL_ROLES:
                raise SidecarError(
                    source, f"field 'channels' has unknown role {role!r} (allowed: {', '.join(_CHANNEL_ROLES)})",
                    field="channels",
                )
            if isinstance(index, bool) or not isinstance(index, int) or index < 0:
                raise SidecarError(
                    source, f"field 'channels': {role!r} must be a channel index >= 0, got {index!r}", field="channels"
                )
            channels[role] = index
        if "mic" not in channels:
            raise SidecarError(source, "field 'channels' must name the 'mic' channel", field="channels")
        if len(set(channels.values())) != len(channels):
            raise SidecarError(source, f"field 'channels' maps two roles to one channel: {raw!r}", field="channels")

    markers = None
    if obj.get("markers_s") is not None:
        raw = obj["markers_s"]
        if not isinstance(raw, list) or not all(
            isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) and v >= 0 for v in raw
        ):
            raise SidecarError(
                source, f"field 'markers_s' must be a list of times in seconds >= 0, got {_short_repr(raw)}",
                field="markers_s"
            )
        if any(b <= a for a, b in zip(raw, raw[1:])):
            raise SidecarError(source, f"field 'markers_s' must be increasing, got {_short_repr(raw)}",
                               field="markers_s")
        if len(raw) > MAX_MARKERS:
            raise SidecarError(source, f"field 'markers_s' holds {len(raw):,} times; a recording has at most "
                                       f"{MAX_MARKERS} markers", field="markers_s")
        markers = tuple(float(v) for v in raw)

    notes = obj.get("notes")
    if notes is not None:
        if not isinstance(notes, str):
            raise SidecarError(source, f"field 'notes' must be text, got {_short_repr(notes)}", field="notes")
        why = _bad_character(notes, allow="\t\n")
        if why:
            raise SidecarError(source, f"field 'notes' {why} (tab and newline are the only control characters "
                                       "allowed there)", field="notes")
        if len(notes) > MAX_NOTES_CHARS:
            raise SidecarError(source, f"field 'notes' is {len(notes):,} characters long; at most "
                                       f"{MAX_NOTES_CHARS:,} are allowed", field="notes")

    extra = {k: v for k, v in obj.items() if k not in SIDECAR_FIELDS}
    for k, v in extra.items():
        _check_extra(v, source, k)
    notes_out: tuple[str, ...] = ()
    if extra:
        msg = f"{source}: unknown sidecar field(s) kept but not used: {', '.join(sorted(extra))}"
        warnings.warn(msg, SidecarWarning, stacklevel=2)
        notes_out = (msg,)

    return Sidecar(
        path=str(source),
        site=site,
        rig=rig,
        lot=lot,
        unit=unit,
        actuation=actuation,
        recorded_at=recorded_at,
        profile=profile,
        channels=channels,
        markers_s=markers,
        notes=notes,
        extra=extra,
        warnings=notes_out,
    )
