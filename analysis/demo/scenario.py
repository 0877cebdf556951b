"""Demo scenario files: TOML in, a validated frozen :class:`Scenario` out.

A scenario names the sites, rigs, lots, the test plan (units per lot, actuations per unit, days per lot), the
reference lots and the injected faults. Every error names the file, the key and the value (``ScenarioError``).
Keys are listed in demo_data/scenarios/default.toml, which is commented.
"""

from __future__ import annotations

import datetime as _dt
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

from analysis.errors import ScenarioError

__all__ = [
    "SCENARIO_DIR",
    "FAULT_KINDS",
    "Site",
    "Rig",
    "Lot",
    "Fault",
    "Scenario",
    "load_scenario",
    "parse_scenario",
]

SCENARIO_DIR = Path(__file__).resolve().parents[2] / "demo_data" / "scenarios"

FAULT_KINDS = ("coarse_carrier", "damaged_cavity", "rig_squeal", "clipping", "dropout", "missing_marker")


@dataclass(frozen=True)
class Site:
    id: str
    mains_hz: float
    utc_offset: str           # "+01:00"
    temperature_c: float      # mean lab temperature


@dataclass(frozen=True)
class Rig:
    id: str
    site: str
    markers: str              # "channel" (marker pulse channel 1) or "sidecar" (mono file, markers_s in sidecar)
    mic_distance_m: float
    gain_db: float
    drive_hz: float
    hum_dbfs: float
    drive_dbfs: float
    room_dbfs: float


@dataclass(frozen=True)
class Lot:
    id: str
    start: _dt.date


@dataclass(frozen=True)
class Fault:
    """One injected fault. Which fields apply depends on ``kind`` (see default.toml); the rest stay None."""

    kind: str
    lot: str | None = None
    units: tuple[str, ...] = ()
    rig: str | None = None
    date: _dt.date | None = None                       # clipping: the day; rig_squeal: the start
    targets: tuple[tuple[str, int], ...] = ()           # (unit, actuation) for dropout / missing_marker
    diameter_factor: float | None = None                # coarse_carrier
    shift_pct: float | None = None                      # damaged_cavity: resonance shift, + = higher
    ramp_days: float | None = None                      # rig_squeal
    freq_hz: float | None = None                        # rig_squeal
    level_start_db: float | None = None                 # rig_squeal, dB re flow noise
    level_end_db: float | None = None
    gain_range: tuple[float, float] | None = None       # clipping, linear gain factor
    duration_ms: tuple[float, float] | None = None      # dropout


@dataclass(frozen=True)
class Scenario:
    name: str
    source: str
    description: str
    company: str
    seed: int
    profile: str
    sample_rate_hz: int
    duration_s: float
    subtype: str
    units_per_lot: int
    actuations_per_unit: int
    days_per_lot: int
    first_time: _dt.time
    interval_s: float
    session_gap_s: float
    sites: tuple[Site, ...]
    rigs: tuple[Rig, ...]
    lots: tuple[Lot, ...]
    reference_lots: tuple[str, ...]
    faults: tuple[Fault, ...]

    def site(self, site_id: str) -> Site:
        return next(s for s in self.sites if s.id == site_id)

    def unit_ids(self, lot_id: str) -> tuple[str, ...]:
        """Unit names of one lot: "<lot>-01" ... in test order."""
        return tuple(f"{lot_id}-{k + 1:02d}" for k in range(self.units_per_lot))

    @property
    def n_actuations(self) -> int:
        return len(self.lots) * self.units_per_lot * self.actuations_per_unit


_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")
_OFFSET = re.compile(r"^[+-](0\d|1[0-4]):[0-5]\d$")


class _Reader:
    """Typed look-ups in one TOML table that raise ScenarioError naming the file and the dotted key."""

    def __init__(self, source: str, table: dict, where: str):
        if not isinstance(table, dict):
            raise ScenarioError(f"{source}: {where} must be a table, got {table!r}")
        self.source, self.table, self.where = source, table, where

    def key(self, name: str) -> str:
        return f"{self.where}.{name}" if self.where else name

    def fail(self, name: str, what: str, value) -> ScenarioError:
        return ScenarioError(f"{self.source}: {self.key(name)} must be {what}, got {value!r}")

    def get(self, name: str, kind: str, default=..., *, lo=None, hi=None):
        if name not in self.table:
            if default is ...:
                raise ScenarioError(f"{self.source}: {self.key(name)} is missing")
            return default
        value = self.table[name]
        if kind == "str":
            if not isinstance(value, str) or not value.strip():
                raise self.fail(name, "non-empty text", value)
            return value
        if kind == "name":
            if not isinstance(value, str) or not _NAME.match(value):
                raise self.fail(name, "a name of letters, digits, '-', '_' or '.'", value)
            return value
        if kind == "int":
            if isinstance(value, bool) or not isinstance(value, int):
                raise self.fail(name, "an integer", value)
        elif kind == "float":
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise self.fail(name, "a number", value)
            value = float(value)
        elif kind == "date":
            if isinstance(value, _dt.datetime) or not isinstance(value, _dt.date):
                raise self.fail(name, "a TOML date like 2026-03-02", value)
            return value
        else:  # pragma: no cover - programming error
            raise AssertionError(kind)
        if lo is not None and value < lo or hi is not None and value > hi:
            what = f"between {lo} and {hi}" if lo is not None and hi is not None else (
                f">= {lo}" if lo is not None else f"<= {hi}")
            raise self.fail(name, what, value)
        return value

    def pair(self, name: str, *, lo: float, hi: float, default=...):
        if name not in self.table:
            if default is ...:
                raise ScenarioError(f"{self.source}: {self.key(name)} is missing")
            return default
        value = self.table[name]
        ok = (isinstance(value, list) and len(value) == 2
              and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)
              and lo <= value[0] <= value[1] <= hi)
        if not ok:
            raise self.fail(name, f"[low, high] with {lo} <= low <= high <= {hi}", value)
        return (float(value[0]), float(value[1]))

    def names(self, name: str, default=...) -> tuple[str, ...]:
        if name not in self.table:
            if default is ...:
                raise ScenarioError(f"{self.source}: {self.key(name)} is missing")
            return default
        value = self.table[name]
        if not isinstance(value, list) or not value or not all(isinstance(v, str) for v in value):
            raise self.fail(name, "a non-empty list of names", value)
        return tuple(value)

    def no_extra(self, allowed) -> None:
        extra = sorted(set(self.table) - set(allowed))
        if extra:
            raise ScenarioError(
                f"{self.source}: {self.key(extra[0])} is not a known key (allowed in "
                f"{self.where or 'the top level'}: {', '.join(sorted(allowed))})"
            )


def _list_of_tables(source: str, doc: dict, name: str) -> list[_Reader]:
    value = doc.get(name)
    if not isinstance(value, list) or not value:
        raise ScenarioError(f"{source}: [[{name}]] must be a non-empty list of tables, got {value!r}")
    return [_Reader(source, item, f"{name}[{i}]") for i, item in enumerate(value)]


def _unique(source: str, key: str, ids: list[str]) -> None:
    seen = set()
    for i in ids:
        if i in seen:
            raise ScenarioError(f"{source}: {key} has the name {i!r} twice")
        seen.add(i)


_FAULT_KEYS = {
    "coarse_carrier": {"kind", "description", "lot", "diameter_factor"},
    "damaged_cavity": {"kind", "description", "units", "shift_pct"},
    "rig_squeal": {"kind", "description", "rig", "start", "ramp_days", "freq_hz", "level_start_db",
                   "level_end_db"},
    "clipping": {"kind", "description", "rig", "date", "gain_range"},
    "dropout": {"kind", "description", "targets", "duration_ms"},
    "missing_marker": {"kind", "description", "targets"},
}


def _targets(r: _Reader, name: str) -> tuple[tuple[str, int], ...]:
    value = r.table.get(name)
    if not isinstance(value, list) or not value:
        raise r.fail(name, 'a non-empty list of {unit = "...", actuation = N}', value)
    out = []
    for i, item in enumerate(value):
        t = _Reader(r.source, item, f"{r.key(name)}[{i}]")
        t.no_extra({"unit", "actuation"})
        out.append((t.get("unit", "name"), t.get("actuation", "int", lo=1)))
    return tuple(out)


def _fault(r: _Reader) -> Fault:
    kind = r.get("kind", "str")
    if kind not in FAULT_KINDS:
        raise r.fail("kind", f"one of {', '.join(FAULT_KINDS)}", kind)
    r.no_extra(_FAULT_KEYS[kind])
    if kind == "coarse_carrier":
        return Fault(kind, lot=r.get("lot", "name"), diameter_factor=r.get("diameter_factor", "float", lo=0.5, hi=2.0))
    if kind == "damaged_cavity":
        return Fault(kind, units=r.names("units"), shift_pct=r.get("shift_pct", "float", lo=-30.0, hi=30.0))
    if kind == "rig_squeal":
        f = Fault(kind, rig=r.get("rig", "name"), date=r.get("start", "date"),
                  ramp_days=r.get("ramp_days", "float", lo=0.0, hi=365.0),
                  freq_hz=r.get("freq_hz", "float", lo=500.0, hi=15000.0),
                  level_start_db=r.get("level_start_db", "float", lo=-100.0, hi=20.0),
                  level_end_db=r.get("level_end_db", "float", lo=-100.0, hi=20.0))
        return f
    if kind == "clipping":
        return Fault(kind, rig=r.get("rig", "name"), date=r.get("date", "date"),
                     gain_range=r.pair("gain_range", lo=1.0, hi=100.0))
    if kind == "dropout":
        return Fault(kind, targets=_targets(r, "targets"), duration_ms=r.pair("duration_ms", lo=1.0, hi=200.0))
    return Fault(kind, targets=_targets(r, "targets"))


def parse_scenario(doc: dict, *, source: str = "<scenario>", name: str | None = None) -> Scenario:
    """Validate a parsed TOML document and return the :class:`Scenario` (``name``: used when scenario.name is
    absent)."""
    top = _Reader(source, doc, "")
    top.no_extra({"scenario", "recording", "plan", "sites", "rigs", "lots", "faults"})

    s = _Reader(source, doc.get("scenario", {}), "scenario")
    s.no_extra({"name", "description", "company", "seed", "profile", "reference_lots"})
    rec = _Reader(source, doc.get("recording", {}), "recording")
    rec.no_extra({"sample_rate_hz", "duration_s", "subtype"})
    plan = _Reader(source, doc.get("plan", {}), "plan")
    plan.no_extra({"units_per_lot", "actuations_per_unit", "days_per_lot", "first_time", "interval_s",
                   "session_gap_s"})

    subtype = rec.get("subtype", "str", "PCM_16")
    if subtype not in ("PCM_16", "PCM_24"):
        raise rec.fail("subtype", '"PCM_16" or "PCM_24"', subtype)
    first_time = plan.table.get("first_time", _dt.time(8, 30))
    if not isinstance(first_time, _dt.time):
        raise plan.fail("first_time", "a TOML local time like 08:30:00", first_time)

    sites = []
    for r in _list_of_tables(source, doc, "sites"):
        r.no_extra({"id", "mains_hz", "utc_offset", "temperature_c", "description"})
        mains = r.get("mains_hz", "float")
        if mains not in (50.0, 60.0):
            raise r.fail("mains_hz", "50 or 60", r.table["mains_hz"])
        offset = r.get("utc_offset", "str")
        if not _OFFSET.match(offset):
            raise r.fail("utc_offset", 'a UTC offset like "+01:00" or "-05:00"', offset)
        sites.append(Site(r.get("id", "name"), mains, offset, r.get("temperature_c", "float", lo=5.0, hi=40.0)))
    _unique(source, "sites[].id", [x.id for x in sites])
    site_ids = {x.id for x in sites}

    rigs = []
    for r in _list_of_tables(source, doc, "rigs"):
        r.no_extra({"id", "site", "markers", "mic_distance_m", "gain_db", "drive_hz", "hum_dbfs", "drive_dbfs",
                    "room_dbfs", "description"})
        site = r.get("site", "name")
        if site not in site_ids:
            raise r.fail("site", f"one of the sites ({', '.join(sorted(site_ids))})", site)
        markers = r.get("markers", "str", "channel")
        if markers not in ("channel", "sidecar"):
            raise r.fail("markers", '"channel" or "sidecar"', markers)
        rigs.append(Rig(
            id=r.get("id", "name"), site=site, markers=markers,
            mic_distance_m=r.get("mic_distance_m", "float", lo=0.02, hi=1.0),
            gain_db=r.get("gain_db", "float", 0.0, lo=-20.0, hi=20.0),
            drive_hz=r.get("drive_hz", "float", lo=20.0, hi=2000.0),
            hum_dbfs=r.get("hum_dbfs", "float", lo=-120.0, hi=-20.0),
            drive_dbfs=r.get("drive_dbfs", "float", lo=-120.0, hi=-20.0),
            room_dbfs=r.get("room_dbfs", "float", lo=-120.0, hi=-20.0),
        ))
    _unique(source, "rigs[].id", [x.id for x in rigs])
    rig_ids = {x.id for x in rigs}

    lots = []
    for r in _list_of_tables(source, doc, "lots"):
        r.no_extra({"id", "start", "description"})
        lots.append(Lot(r.get("id", "name"), r.get("start", "date")))
    _unique(source, "lots[].id", [x.id for x in lots])
    lot_ids = [x.id for x in lots]

    units_per_lot = plan.get("units_per_lot", "int", lo=1, hi=999)
    actuations_per_unit = plan.get("actuations_per_unit", "int", lo=1, hi=999)
    reference = s.names("reference_lots")
    for lot in reference:
        if lot not in lot_ids:
            raise s.fail("reference_lots", f"a list of lots from [[lots]] ({', '.join(lot_ids)})", list(reference))

    faults = []
    raw_faults = doc.get("faults", [])
    for r in (_list_of_tables(source, doc, "faults") if raw_faults else []):
        f = _fault(r)
        if f.lot is not None and f.lot not in lot_ids:
            raise r.fail("lot", "a lot from [[lots]]", f.lot)
        if f.rig is not None and f.rig not in rig_ids:
            raise r.fail("rig", f"a rig from [[rigs]] ({', '.join(sorted(rig_ids))})", f.rig)
        unit_names = {u for lot in lot_ids for u in (f"{lot}-{k + 1:02d}" for k in range(units_per_lot))}
        for u in f.units:
            if u not in unit_names:
                raise r.fail("units", f'unit names "<lot>-NN" with NN from 01 to {units_per_lot:02d}', list(f.units))
        for i, (u, act) in enumerate(f.targets):
            if u not in unit_names:
                raise ScenarioError(f"{source}: {r.key('targets')}[{i}].unit must be a unit \"<lot>-NN\" "
                                    f"(NN 01..{units_per_lot:02d}), got {u!r}")
            if act > actuations_per_unit:
                raise ScenarioError(f"{source}: {r.key('targets')}[{i}].actuation must be between 1 and "
                                    f"{actuations_per_unit}, got {act!r}")
        faults.append(f)

    return Scenario(
        name=s.get("name", "name", name) if name else s.get("name", "name"),
        source=source,
        description=s.get("description", "str", ""),
        company=s.get("company", "str", ""),
        seed=s.get("seed", "int", lo=0),
        profile=s.get("profile", "name", "demo-dpi"),
        sample_rate_hz=rec.get("sample_rate_hz", "int", 48000, lo=44100, hi=96000),
        duration_s=rec.get("duration_s", "float", 1.2, lo=1.1, hi=10.0),
        subtype=subtype,
        units_per_lot=units_per_lot,
        actuations_per_unit=actuations_per_unit,
        days_per_lot=plan.get("days_per_lot", "int", 1, lo=1, hi=60),
        first_time=first_time,
        interval_s=plan.get("interval_s", "float", 45.0, lo=2.0, hi=3600.0),
        session_gap_s=plan.get("session_gap_s", "float", 600.0, lo=0.0, hi=86400.0),
        sites=tuple(sites),
        rigs=tuple(rigs),
        lots=tuple(lots),
        reference_lots=reference,
        faults=tuple(faults),
    )


def load_scenario(name_or_path) -> Scenario:
    """Read and validate a scenario: a name ("default", "small") from demo_data/scenarios/, or a path to a .toml."""
    text = str(name_or_path)
    path = Path(text)
    if path.suffix != ".toml" and path.parent == Path(".") and _NAME.match(text):
        path = SCENARIO_DIR / f"{text}.toml"
        if not path.is_file():
            known = sorted(p.stem for p in SCENARIO_DIR.glob("*.toml"))
            raise ScenarioError(f"scenario {text!r} not found in {SCENARIO_DIR} (known: {', '.join(known)}); "
                                f"or give a path to a .toml file")
    if not path.is_file():
        raise ScenarioError(f"{path}: scenario file not found")
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError(f"{path}: not valid TOML ({exc})") from exc
    except (OSError, UnicodeDecodeError) as exc:
        raise ScenarioError(f"{path}: cannot read the scenario ({exc})") from exc
    return parse_scenario(doc, source=str(path), name=path.stem)
