"""Device profiles: what events a device type has and how to analyse them (Harken's own TOML schema, version 1).

A profile named NAME is the file ``NAME.toml``, looked up in the folders given by the caller (``--profiles DIR``,
in order), then in the shipped ``demo_data/profiles/``. ``find_profile`` takes a name only: what a recording's
sidecar or a dashboard request names is never read as a path. ``load_profile`` (the command line's
``--profile``) also takes a path to a ``.toml`` file. Every key is validated once, on load; an error names the
file, the key and the bad value. A loaded profile carries its ``version`` (``[profile] version``) and the
SHA-256 of its file, which the store records with every analysis. The README documents the schema.
"""

from __future__ import annotations

import hashlib
import math
import re
import tomllib
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .errors import ProfileError
from .signal.bands import FRACTIONS
from .signal.events import DETECTORS
from .signal.quality import MAX_BIN_WIDTH, MAX_PEAK_TOLERANCE, PEAK_TOLERANCE

__all__ = [
    "BandSpec",
    "EventSpec",
    "QualityLimits",
    "DeviceProfile",
    "SCHEMA_VERSION",
    "load_profile",
    "find_profile",
    "is_profile_name",
    "parse_profile",
    "profile_search_dirs",
    "shipped_profiles_dir",
]

SCHEMA_VERSION = 1


@dataclass(frozen=True)
class BandSpec:
    """Band layout: ``third_octave`` (IEC 61260-1 base-10) between fmin and fmax, ``fractional_octave`` (1/b
    octave, b = ``fraction``: 6, 12 or 24), or ``n_bands`` linear bands."""

    kind: str
    fmin_hz: float
    fmax_hz: float
    n_bands: int | None = None
    weighting: str = "none"
    fraction: int | None = None


@dataclass(frozen=True)
class EventSpec:
    """One named event of an actuation and how it is found and analysed (times in s)."""

    name: str
    find: str  # "marker" or "onset"
    marker: int | None  # 1-based marker number, for find = "marker"
    window_s: tuple[float, float] | None  # onset search window relative to the marker
    search_s: tuple[float, float]  # onset search window from the recording start (or from `after`'s onset)
    after: str | None  # name of an earlier event that `search_s` is relative to
    length_s: float
    slice_window_s: float
    slice_hop_s: float
    bands: BandSpec
    detector: str = "flux"  # "flux" (spectral flux: strikes, clicks) or "energy" (level rise: swelling sounds)
    resonances_hz: tuple[tuple[float, float], ...] = ()  # (low, high) Hz ranges, one resonance of the device each

    @property
    def n_slices(self) -> int:
        """Slices on the event's fixed grid."""
        return int(math.floor((self.length_s - self.slice_window_s) / self.slice_hop_s + 1e-9)) + 1


@dataclass(frozen=True)
class QualityLimits:
    """Limits of the recording quality checks (full-scale units, s, dB)."""

    clip_level: float = 0.999
    clip_min_run: int = 3
    max_clipped_fraction: float = 1e-4
    clip_peak_tolerance: float = PEAK_TOLERANCE  # FS: within this of the recording's own peak counts as at it
    clip_bin_width: float = 0.01                 # histogram bin for a pile-up, as a fraction of the own peak
    clip_pileup_ratio: float = 3.0               # end bin over the nearest occupied bin below that is a pile-up
    max_dropout_s: float = 0.002
    max_dc_offset: float = 0.01
    min_rms_dbfs: float = -70.0
    min_snr_db: float = 10.0
    background_max_s: float = 0.25


@dataclass(frozen=True)
class DeviceProfile:
    """A validated device profile. ``source`` is the file it came from."""

    name: str
    description: str
    sample_rate_min_hz: float
    sample_rate_max_hz: float
    min_duration_s: float
    channels: dict[str, int]
    bands: BandSpec
    quality: QualityLimits
    events: tuple[EventSpec, ...]
    source: str
    version: int = 1
    sha256: str = ""  # of the profile file's bytes ("" for a profile made from data in memory)

    def event(self, name: str) -> EventSpec:
        for ev in self.events:
            if ev.name == name:
                return ev
        raise ProfileError(
            self.source, f"profile {self.name!r} has no event {name!r} (events: {', '.join(self.event_names)})"
        )

    @property
    def event_names(self) -> tuple[str, ...]:
        return tuple(ev.name for ev in self.events)

    @property
    def n_markers(self) -> int:
        """Markers a recording of this device carries (the highest marker number any event uses)."""
        return max((ev.marker or 0 for ev in self.events), default=0)


# --------------------------------------------------------------------------------------------------- lookup


def shipped_profiles_dir() -> Path:
    """The profiles that ship with Harken (``demo_data/profiles`` of the source tree)."""
    return Path(__file__).resolve().parent.parent / "demo_data" / "profiles"


def profile_search_dirs(extra: Iterable[str | Path] = ()) -> list[Path]:
    """Folders searched for ``NAME.toml``: the caller's, in order, then the shipped ones."""
    return [Path(d) for d in extra] + [shipped_profiles_dir()]


_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]{0,63}")


def is_profile_name(text) -> bool:
    """A profile name: 1 to 64 letters, digits, '.', '_' or '-', starting with a letter or digit (so never a path)."""
    return isinstance(text, str) and _NAME.fullmatch(text) is not None and not text.endswith(".toml")


def find_profile(name: str, *, search_dirs: Iterable[str | Path] = ()) -> DeviceProfile:
    """Load and validate the profile called ``name`` from ``search_dirs`` then the shipped folder. Only a name is
    accepted, never a path; the error for an unknown name lists the names there are, not the folders."""
    if not is_profile_name(name):
        raise ProfileError("profile", f"{str(name)[:80]!r} is not a device profile name (1 to 64 letters, digits, "
                                      "'.', '_' or '-'; a path is never taken)")
    dirs = profile_search_dirs(search_dirs)
    for folder in dirs:
        path = folder / f"{name}.toml"
        if path.is_file():
            prof = _load_file(path)
            if prof.name != name:
                raise ProfileError(f"{name}.toml", f"key 'profile.name' is {prof.name!r}; the file {name}.toml must "
                                                   f"be called {name!r} inside too")
            return prof
    known = sorted({p.stem for d in dirs if d.is_dir() for p in d.glob("*.toml") if is_profile_name(p.stem)})
    raise ProfileError(name, f"no device profile named {name!r} (profiles here: {', '.join(known) or 'none'})")


def load_profile(name_or_path: str | Path, *, search_dirs: Iterable[str | Path] = ()) -> DeviceProfile:
    """Load and validate a profile by name (searched in ``search_dirs`` then the shipped folder) or, for the
    command line's own user, by path to a .toml file."""
    text = str(name_or_path)
    candidate = Path(text)
    if text.endswith(".toml") or candidate.is_file() or "/" in text or "\\" in text:
        if not candidate.is_file():
            raise ProfileError(candidate, "device profile file does not exist")
        return _load_file(candidate)
    dirs = profile_search_dirs(search_dirs)
    for folder in dirs:
        path = folder / f"{text}.toml"
        if path.is_file():
            return _load_file(path)
    looked = ", ".join(str(d) for d in dirs)
    raise ProfileError(text, f"no device profile named {text!r} (looked for {text}.toml in: {looked})")


def _load_file(path: Path) -> DeviceProfile:
    try:
        raw = path.read_bytes()
        data = tomllib.loads(raw.decode("utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError(path, f"not valid TOML ({exc})") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ProfileError(path, f"cannot be read ({exc})") from None
    return parse_profile(data, source=path, sha256=hashlib.sha256(raw).hexdigest())


# --------------------------------------------------------------------------------------------------- validation

_TOP_KEYS = {"profile", "audio", "bands", "quality", "events"}
_PROFILE_KEYS = {"name", "schema", "version", "description"}
_AUDIO_KEYS = {"sample_rate_min_hz", "sample_rate_max_hz", "min_duration_s", "channels"}
_BAND_KEYS = {"kind", "fmin_hz", "fmax_hz", "n_bands", "weighting", "fraction"}
_EVENT_KEYS = {
    "name", "find", "marker", "window_s", "search_s", "after", "length_s", "slice_window_s", "slice_hop_s", "bands",
    "detector", "resonances_hz",
}
_DETECTORS = DETECTORS  # the event finder's own list
_WEIGHTINGS = ("none", "A")
_BAND_KINDS = ("third_octave", "fractional_octave", "linear")
_FINDS = ("marker", "onset")


class _Checker:
    def __init__(self, source):
        self.source = source

    def fail(self, key: str, reason: str):
        raise ProfileError(self.source, f"key {key!r}: {reason}", key=key)

    def table(self, parent: dict, name: str, key: str, *, required: bool = True) -> dict:
        if name not in parent:
            if required:
                self.fail(key, "is missing")
            return {}
        value = parent[name]
        if not isinstance(value, dict):
            self.fail(key, f"must be a table, got {value!r}")
        return value

    def unknown(self, table: dict, allowed: set, prefix: str):
        for k in table:
            if k not in allowed:
                self.fail(f"{prefix}{k}", f"unknown key (allowed here: {', '.join(sorted(allowed))})")

    def number(self, table: dict, name: str, key: str, default=None, *, positive=False, minimum=None) -> float:
        if name not in table:
            if default is None:
                self.fail(key, "is missing")
            return float(default)
        v = table[name]
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            self.fail(key, f"must be a number, got {v!r}")
        if positive and v <= 0:
            self.fail(key, f"must be > 0, got {v!r}")
        if minimum is not None and v < minimum:
            self.fail(key, f"must be >= {minimum}, got {v!r}")
        return float(v)

    def integer(self, table: dict, name: str, key: str, default=None, *, minimum=None) -> int:
        if name not in table:
            if default is None:
                self.fail(key, "is missing")
            return int(default)
        v = table[name]
        if isinstance(v, bool) or not isinstance(v, int):
            self.fail(key, f"must be an integer, got {v!r}")
        if minimum is not None and v < minimum:
            self.fail(key, f"must be >= {minimum}, got {v!r}")
        return int(v)

    def text(self, table: dict, name: str, key: str, default=None, *, choices=None) -> str:
        if name not in table:
            if default is None:
                self.fail(key, "is missing")
            return default
        v = table[name]
        if not isinstance(v, str) or not v.strip():
            self.fail(key, f"must be non-empty text, got {v!r}")
        if choices is not None and v not in choices:
            self.fail(key, f"must be one of {', '.join(map(repr, choices))}, got {v!r}")
        return v

    def pair(self, table: dict, name: str, key: str, *, required: bool) -> tuple[float, float] | None:
        if name not in table:
            if required:
                self.fail(key, "is missing")
            return None
        v = table[name]
        if (
            not isinstance(v, list)
            or len(v) != 2
            or not all(isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) for x in v)
        ):
            self.fail(key, f"must be a pair of numbers [start, stop] in seconds, got {v!r}")
        if v[1] <= v[0]:
            self.fail(key, f"stop must be after start, got {v!r}")
        return (float(v[0]), float(v[1]))


def _resonance_ranges(c: _Checker, ev: dict, key: str, *, slice_window_s: float, nyquist_hz: float):
    """The event's resonance ranges: a list of [low, high] in Hz, each below the Nyquist frequency of the lowest
    accepted sample rate, at least two of the slice's frequency bins (1/slice_window_s) wide, not overlapping."""
    raw = ev.get("resonances_hz", [])
    if not isinstance(raw, list):
        c.fail(key, f"must be a list of [low, high] ranges in Hz, got {raw!r}")
    out: list[tuple[float, float]] = []
    bin_hz = 1.0 / slice_window_s
    for i, r in enumerate(raw):
        k = f"{key}[{i}]"
        if (not isinstance(r, list) or len(r) != 2
                or not all(isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) for x in r)):
            c.fail(k, f"must be a pair of numbers [low, high] in Hz, got {r!r}")
        lo, hi = float(r[0]), float(r[1])
        if not 0.0 < lo < hi:
            c.fail(k, f"must have 0 < low < high, got {r!r}")
        if hi >= nyquist_hz:
            c.fail(k, f"{hi:g} Hz is not below the Nyquist frequency of sample_rate_min_hz ({nyquist_hz:g} Hz)")
        if hi - lo < 2.0 * bin_hz:
            c.fail(k, f"is {hi - lo:g} Hz wide; the event's {slice_window_s:g} s slices resolve {bin_hz:g} Hz, so a "
                      f"range needs at least {2.0 * bin_hz:g} Hz")
        if any(lo < b and a < hi for a, b in out):
            c.fail(k, f"overlaps an earlier range: {[list(x) for x in out]}")
        out.append((lo, hi))
    return tuple(out)


def _bands(c: _Checker, table: dict, prefix: str, default: BandSpec | None) -> BandSpec:
    c.unknown(table, _BAND_KEYS, prefix)
    d = default
    kind = c.text(table, "kind", prefix + "kind", d.kind if d else None, choices=_BAND_KINDS)
    fmin = c.number(table, "fmin_hz", prefix + "fmin_hz", d.fmin_hz if d else None, positive=True)
    fmax = c.number(table, "fmax_hz", prefix + "fmax_hz", d.fmax_hz if d else None, positive=True)
    if fmax <= fmin:
        c.fail(prefix + "fmax_hz", f"must be above fmin_hz ({fmin:g}), got {fmax:g}")
    n_bands = None
    if kind == "linear":
        n_bands = c.integer(table, "n_bands", prefix + "n_bands", d.n_bands if d and d.n_bands else None, minimum=1)
    elif "n_bands" in table:
        c.fail(prefix + "n_bands", "only applies to kind = 'linear'")
    fraction = None
    if kind == "fractional_octave":
        fraction = c.integer(table, "fraction", prefix + "fraction",
                             d.fraction if d and d.kind == "fractional_octave" and d.fraction else None, minimum=1)
        if fraction not in FRACTIONS:
            c.fail(prefix + "fraction", f"must be {', '.join(map(str, FRACTIONS[:-1]))} or {FRACTIONS[-1]} "
                                        f"(1/b octave), got {fraction}")
    elif "fraction" in table:
        c.fail(prefix + "fraction", "only applies to kind = 'fractional_octave'")
    weighting = c.text(table, "weighting", prefix + "weighting", d.weighting if d else "none", choices=_WEIGHTINGS)
    return BandSpec(kind=kind, fmin_hz=fmin, fmax_hz=fmax, n_bands=n_bands, weighting=weighting, fraction=fraction)


def parse_profile(data: dict[str, Any], *, source, sha256: str = "") -> DeviceProfile:
    """Validate profile data already parsed from TOML; ``source`` names it in errors, ``sha256`` is its file's."""
    c = _Checker(source)
    if not isinstance(data, dict):
        raise ProfileError(source, "a profile must be a TOML document with tables")
    c.unknown(data, _TOP_KEYS, "")

    head = c.table(data, "profile", "profile")
    c.unknown(head, _PROFILE_KEYS, "profile.")
    name = c.text(head, "name", "profile.name")
    if not is_profile_name(name):
        c.fail("profile.name", f"must be 1 to 64 letters, digits, '.', '_' or '-', got {name!r}")
    version = c.integer(head, "version", "profile.version", 1, minimum=1)
    schema = c.integer(head, "schema", "profile.schema", SCHEMA_VERSION, minimum=1)
    if schema > SCHEMA_VERSION:
        c.fail("profile.schema", f"is {schema}, newer than this Harken understands ({SCHEMA_VERSION}); upgrade Harken")
    description = head.get("description", "")
    if not isinstance(description, str):
        c.fail("profile.description", f"must be text, got {description!r}")

    audio = c.table(data, "audio", "audio")
    c.unknown(audio, _AUDIO_KEYS, "audio.")
    sr_min = c.number(audio, "sample_rate_min_hz", "audio.sample_rate_min_hz", positive=True)
    sr_max = c.number(audio, "sample_rate_max_hz", "audio.sample_rate_max_hz", positive=True)
    if sr_max < sr_min:
        c.fail("audio.sample_rate_max_hz", f"must be >= sample_rate_min_hz ({sr_min:g}), got {sr_max:g}")
    min_duration = c.number(audio, "min_duration_s", "audio.min_duration_s", 0.0, minimum=0.0)
    raw_channels = c.table(audio, "channels", "audio.channels", required=False) or {"mic": 0}
    channels: dict[str, int] = {}
    for role, _index in raw_channels.items():
        if role not in ("mic", "marker"):
            c.fail(f"audio.channels.{role}", "unknown channel role (allowed: mic, marker)")
        channels[role] = c.integer(raw_channels, role, f"audio.channels.{role}", minimum=0)
    if "mic" not in channels:
        c.fail("audio.channels.mic", "is missing (the microphone channel index)")
    if len(set(channels.values())) != len(channels):
        c.fail("audio.channels", f"two roles share one channel: {raw_channels!r}")

    bands = _bands(c, c.table(data, "bands", "bands"), "bands.", None)
    if bands.fmax_hz > sr_max / 2:
        c.fail("bands.fmax_hz",
               f"{bands.fmax_hz:g} Hz is above the Nyquist frequency of sample_rate_max_hz ({sr_max / 2:g} Hz)")

    q = c.table(data, "quality", "quality", required=False)
    qd = QualityLimits()
    allowed_q = set(QualityLimits.__dataclass_fields__)
    c.unknown(q, allowed_q, "quality.")
    quality = QualityLimits(
        clip_level=c.number(q, "clip_level", "quality.clip_level", qd.clip_level, positive=True),
        clip_min_run=c.integer(q, "clip_min_run", "quality.clip_min_run", qd.clip_min_run, minimum=1),
        max_clipped_fraction=c.number(q, "max_clipped_fraction", "quality.max_clipped_fraction",
                                      qd.max_clipped_fraction, minimum=0.0),
        clip_peak_tolerance=c.number(q, "clip_peak_tolerance", "quality.clip_peak_tolerance", qd.clip_peak_tolerance,
                                     positive=True),
        clip_bin_width=c.number(q, "clip_bin_width", "quality.clip_bin_width", qd.clip_bin_width, positive=True),
        clip_pileup_ratio=c.number(q, "clip_pileup_ratio", "quality.clip_pileup_ratio", qd.clip_pileup_ratio,
                                   minimum=1.0),
        max_dropout_s=c.number(q, "max_dropout_s", "quality.max_dropout_s", qd.max_dropout_s, positive=True),
        max_dc_offset=c.number(q, "max_dc_offset", "quality.max_dc_offset", qd.max_dc_offset, minimum=0.0),
        min_rms_dbfs=c.number(q, "min_rms_dbfs", "quality.min_rms_dbfs", qd.min_rms_dbfs),
        min_snr_db=c.number(q, "min_snr_db", "quality.min_snr_db", qd.min_snr_db),
        background_max_s=c.number(q, "background_max_s", "quality.background_max_s", qd.background_max_s,
                                  positive=True),
    )
    if quality.clip_level > 1.0:
        c.fail("quality.clip_level", f"is a fraction of full scale and must be <= 1, got {quality.clip_level:g}")
    if quality.clip_peak_tolerance > MAX_PEAK_TOLERANCE:
        c.fail("quality.clip_peak_tolerance",
               f"is in full-scale units and must be <= {MAX_PEAK_TOLERANCE:g} (one 16-bit step is 3.05e-05), "
               f"got {quality.clip_peak_tolerance:g}")
    if quality.clip_bin_width > MAX_BIN_WIDTH:
        c.fail("quality.clip_bin_width", f"is a fraction of the recording's own peak and must be <= "
                                         f"{MAX_BIN_WIDTH:g}, got {quality.clip_bin_width:g}")

    raw_events = data.get("events")
    if not isinstance(raw_events, list) or not raw_events:
        c.fail("events", "at least one [[events]] table is required")
    events: list[EventSpec] = []
    for i, ev in enumerate(raw_events):
        p = f"events[{i}]."
        if not isinstance(ev, dict):
            c.fail(f"events[{i}]", f"must be a table, got {ev!r}")
        c.unknown(ev, _EVENT_KEYS, p)
        ev_name = c.text(ev, "name", p + "name")
        p = f"events.{ev_name}."
        if any(e.name == ev_name for e in events):
            c.fail(p + "name", f"event name {ev_name!r} is used twice")
        find = c.text(ev, "find", p + "find", "marker" if "marker" in ev else "onset", choices=_FINDS)
        marker = window = None
        if find == "marker":
            marker = c.integer(ev, "marker", p + "marker", minimum=1)
            window = c.pair(ev, "window_s", p + "window_s", required=True)
        else:
            for k in ("marker", "window_s"):
                if k in ev:
                    c.fail(p + k, "only applies to find = 'marker'")
        search = c.pair(ev, "search_s", p + "search_s", required=True)
        detector = c.text(ev, "detector", p + "detector", "flux", choices=_DETECTORS)
        after = ev.get("after")
        if after is not None:
            if not isinstance(after, str) or not any(e.name == after for e in events):
                c.fail(p + "after",
                       f"must name an earlier event ({', '.join(e.name for e in events) or 'none'}), got {after!r}")
        length = c.number(ev, "length_s", p + "length_s", positive=True)
        win = c.number(ev, "slice_window_s", p + "slice_window_s", positive=True)
        hop = c.number(ev, "slice_hop_s", p + "slice_hop_s", positive=True)
        if win > length:
            c.fail(p + "slice_window_s", f"{win:g} s is longer than the event's length_s ({length:g} s)")
        if hop > win:
            c.fail(p + "slice_hop_s", f"{hop:g} s is longer than slice_window_s ({win:g} s): slices would leave gaps")
        ev_bands = bands
        if "bands" in ev:
            if not isinstance(ev["bands"], dict):
                c.fail(p + "bands", f"must be a table, got {ev['bands']!r}")
            ev_bands = _bands(c, ev["bands"], p + "bands.", bands)
            if ev_bands.fmax_hz > sr_max / 2:
                c.fail(p + "bands.fmax_hz", f"{ev_bands.fmax_hz:g} Hz is above the Nyquist frequency of "
                                            f"sample_rate_max_hz ({sr_max / 2:g} Hz)")
        ranges = _resonance_ranges(c, ev, p + "resonances_hz", slice_window_s=win, nyquist_hz=sr_min / 2)
        events.append(
            EventSpec(
                name=ev_name, find=find, marker=marker, window_s=window, search_s=search, after=after,
                length_s=length, slice_window_s=win, slice_hop_s=hop, bands=ev_bands, detector=detector,
                resonances_hz=ranges,
            )
        )
    markers = sorted(e.marker for e in events if e.marker is not None)
    if len(set(markers)) != len(markers):
        c.fail("events", f"two events use the same marker number: {markers}")

    return DeviceProfile(
        name=name,
        description=description,
        sample_rate_min_hz=sr_min,
        sample_rate_max_hz=sr_max,
        min_duration_s=min_duration,
        channels=channels,
        bands=bands,
        quality=quality,
        events=tuple(events),
        source=str(source),
        version=version,
        sha256=sha256,
    )
