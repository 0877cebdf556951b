"""Write a demo scenario as an inbox-style tree: FLAC + sidecar JSON per actuation, and ground_truth.csv.

Layout: ``DIR/<site>/<rig>/<lot>/<unit>_<actuation:03d>.flac`` and ``.json`` beside it; ``DIR/ground_truth.csv``.

Test plan: the units of each lot are dealt to the rigs in turn (unit k to rig k mod n_rigs, across both sites, so a
lot is seen on every rig); a unit's actuations are recorded in one session on one day; the lot's sessions are
spread over ``days_per_lot`` days from the lot's start date.

Randomness is hierarchical and keyed, so the output depends only on (scenario, seed), not on ``jobs`` or order:
each actuation's generator is ``SeedSequence([seed, 0, actuation index])``; lot, unit, rig, site-day and rig-day
properties come from ``SeedSequence([seed, tag, ...])`` with their own tags. Magnitudes: see ``analysis.demo.synth``.
"""

from __future__ import annotations

import csv
import datetime as _dt
import json
import os
import time
from collections import Counter
from collections.abc import Callable
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from multiprocessing import get_all_start_methods, get_context
from pathlib import Path

import numpy as np
import soundfile as sf

from analysis.demo import physics, synth
from analysis.demo.scenario import Fault, Scenario, load_scenario
from analysis.errors import ScenarioError

__all__ = ["GenerationSummary", "PlannedActuation", "GROUND_TRUTH_COLUMNS", "FAULT_CAUSES", "plan_scenario", "generate"]

GROUND_TRUTH_COLUMNS = (
    "file", "site", "rig", "lot", "unit", "actuation", "recorded_at", "condition", "cause", "reference", "fault_start",
    "severity", "severity_unit", "mains_hz", "temperature_c", "flow_rel", "cavity_volume_cm3", "neck_radius_mm",
    "neck_length_mm", "helmholtz_hz", "carrier_d50_um", "impact_centre_hz", "marker_1_s", "click_onset_s",
    "marker_2_s", "burst_onset_s", "impacts", "clip_gain", "dropout_start_s", "dropout_s", "peak_dbfs",
)

#: Where each fault kind lives (the true cause `harken validate` checks triage against; "" for normal).
FAULT_CAUSES = {"coarse_carrier": "lot", "damaged_cavity": "unit", "rig_squeal": "rig", "clipping": "recording",
                "dropout": "recording", "missing_marker": "recording", "normal": ""}

SEVERITY_UNITS = {
    "coarse_carrier": "% impact centre",
    "damaged_cavity": "% resonance",
    "rig_squeal": "dB re flow noise",
    "clipping": "x gain",
    "dropout": "ms",
    "missing_marker": "",
}

_NOMINAL_VOLUME_M3 = 2.0e-6
_NOMINAL_NECK_RADIUS_M = 2.0e-3
_NOMINAL_NECK_LENGTH_M = 10.0e-3


@dataclass(frozen=True)
class PlannedActuation:
    index: int
    site: str
    rig: str
    lot: str
    unit: str
    actuation: int
    file: str                       # path relative to the output folder, "/"-separated
    recorded_at: str
    reference: bool
    condition: str
    fault_start: str
    severity: float | None
    severity_unit: str
    params: synth.ActuationParams


@dataclass(frozen=True)
class GenerationSummary:
    """What :func:`generate` wrote."""

    out_dir: Path
    scenario: str
    seed: int
    n_actuations: int
    conditions: dict[str, int] = field(default_factory=dict)   # actuations per condition
    ground_truth: Path | None = None
    bytes_written: int = 0
    jobs: int = 1
    elapsed_s: float = 0.0

    def describe(self) -> str:
        """One line on what was written."""
        conditions = ", ".join(f"{k} {v}" for k, v in sorted(self.conditions.items()))
        truth = self.ground_truth.name if self.ground_truth is not None else "no ground truth"
        return (f"wrote {self.n_actuations} recordings of scenario {self.scenario!r} (seed {self.seed}; "
                f"{conditions}) and {truth} to {self.out_dir} ({self.bytes_written / 1e6:.1f} MB, {self.jobs} jobs)")


def _rng(*key: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence([int(k) for k in key]))


def _clipped_normal(rng: np.random.Generator, sd: float, limit: float = 3.0) -> float:
    return float(sd * np.clip(rng.standard_normal(), -limit, limit))


def _timezone(offset: str) -> _dt.timezone:
    """"+01:00" -> UTC+01:00 (fixed offset; the scenario has no daylight-saving changes)."""
    sign = -1 if offset[0] == "-" else 1
    return _dt.timezone(sign * _dt.timedelta(hours=int(offset[1:3]), minutes=int(offset[4:6])))


def _matches(f: Fault, *, rig: str, lot: str, unit: str, actuation: int, date: _dt.date) -> bool:
    if f.kind == "coarse_carrier":
        return lot == f.lot
    if f.kind == "damaged_cavity":
        return unit in f.units
    if f.kind == "rig_squeal":
        return rig == f.rig and date >= f.date
    if f.kind == "clipping":
        return rig == f.rig and date == f.date
    return (unit, actuation) in f.targets


def _fault_label(sc: Scenario, i: int) -> str:
    return f"faults[{i}] ({sc.faults[i].kind})"


def plan_scenario(sc: Scenario, *, seed: int | None = None) -> list[PlannedActuation]:
    """Every actuation of the scenario with its labels and lot/unit/rig/day parameters, in a fixed order.

    Raises ScenarioError when a fault matches no actuation, two faults hit one actuation, or a fault hits a
    reference lot.
    """
    seed = sc.seed if seed is None else int(seed)
    fs = sc.sample_rate_hz
    rig_index = {r.id: i for i, r in enumerate(sc.rigs)}
    site_index = {s.id: i for i, s in enumerate(sc.sites)}
    reference = set(sc.reference_lots)
    fault_hits = [0] * len(sc.faults)
    sessions: Counter = Counter()
    plans: list[PlannedActuation] = []

    for li, lot in enumerate(sc.lots):
        lr = _rng(seed, 1, li)
        d50 = synth.CARRIER_REFERENCE_UM * float(np.exp(_clipped_normal(lr, 0.02)))
        powder = float(np.exp(_clipped_normal(lr, 0.05)))
        for ui, unit in enumerate(sc.unit_ids(lot.id)):
            rig = sc.rigs[ui % len(sc.rigs)]
            site = sc.site(rig.site)
            slot = ui // len(sc.rigs)
            date = lot.start + _dt.timedelta(days=slot % sc.days_per_lot)
            session = sessions[(rig.id, date)]
            sessions[(rig.id, date)] += 1
            ur = _rng(seed, 2, li, ui)
            unit_geom = dict(
                volume=_NOMINAL_VOLUME_M3 * (1.0 + _clipped_normal(ur, 0.008)),
                radius=_NOMINAL_NECK_RADIUS_M * (1.0 + _clipped_normal(ur, 0.005)),
                length=_NOMINAL_NECK_LENGTH_M * (1.0 + _clipped_normal(ur, 0.01)),
            )
            unit_flow = 1.0 + _clipped_normal(ur, 0.02)
            q = 12.0 + _clipped_normal(ur, 1.0)
            click_f = 1.0 + _clipped_normal(ur, 0.015)
            click_db = _clipped_normal(ur, 1.0)
            day = date.toordinal()
            sd = _rng(seed, 3, site_index[site.id], day)
            temp_day = site.temperature_c + _clipped_normal(sd, 1.0, 2.5)
            hum_day_db = _clipped_normal(sd, 1.0)
            rd = _rng(seed, 4, rig_index[rig.id], day)
            rig_day_flow = 1.0 + _clipped_normal(rd, 0.005)
            room_day_db = _clipped_normal(rd, 0.5)
            tz = _timezone(site.utc_offset)
            session_start = _dt.datetime.combine(date, sc.first_time, tzinfo=tz) + _dt.timedelta(
                seconds=session * (sc.actuations_per_unit * sc.interval_s + sc.session_gap_s))
            tr = _rng(seed, 5, li, ui)
            jitter_s = tr.uniform(0.0, 0.2 * sc.interval_s, sc.actuations_per_unit)

            for a in range(1, sc.actuations_per_unit + 1):
                index = len(plans)
                when = session_start + _dt.timedelta(seconds=(a - 1) * sc.interval_s + float(jitter_s[a - 1]))
                hits = [i for i, f in enumerate(sc.faults)
                        if _matches(f, rig=rig.id, lot=lot.id, unit=unit, actuation=a, date=date)]
                where = f"{unit} actuation {a} ({rig.id}, {date.isoformat()})"
                if len(hits) > 1:
                    raise ScenarioError(f"{sc.source}: {_fault_label(sc, hits[0])} and {_fault_label(sc, hits[1])} "
                                        f"both hit {where}; one condition per actuation")
                if hits and lot.id in reference:
                    raise ScenarioError(f"{sc.source}: {_fault_label(sc, hits[0])} hits {where}, but lot "
                                        f"{lot.id!r} is in scenario.reference_lots (reference lots must be normal)")
                fault = sc.faults[hits[0]] if hits else None
                for i in hits:
                    fault_hits[i] += 1

                volume = unit_geom["volume"]
                d50_act, squeal_db, clip_range, dropout_ms = d50, None, None, None
                condition, fault_start, severity = "normal", "", None
                if fault is not None:
                    condition = fault.kind
                    if fault.kind == "coarse_carrier":
                        d50_act = d50 * fault.diameter_factor
                        severity = 100.0 * (1.0 / fault.diameter_factor - 1.0)
                    elif fault.kind == "damaged_cavity":
                        # f ∝ V^(-1/2): a dent that shrinks the cavity raises the resonance.
                        volume = volume / (1.0 + fault.shift_pct / 100.0) ** 2
                        severity = fault.shift_pct
                    elif fault.kind == "rig_squeal":
                        start = _dt.datetime.combine(fault.date, _dt.time(0, 0), tzinfo=tz)
                        days = (when - start).total_seconds() / 86400.0
                        frac = 1.0 if fault.ramp_days == 0 else min(1.0, days / fault.ramp_days)
                        squeal_db = fault.level_start_db + (fault.level_end_db - fault.level_start_db) * frac
                        fault_start, severity = fault.date.isoformat(), round(squeal_db, 2)
                    elif fault.kind == "clipping":
                        clip_range = fault.gain_range
                    elif fault.kind == "dropout":
                        dropout_ms = fault.duration_ms

                params = synth.ActuationParams(
                    sample_rate_hz=fs, duration_s=sc.duration_s, mains_hz=site.mains_hz, markers=rig.markers,
                    site_temperature_c=temp_day, flow_factor=unit_flow * rig_day_flow, volume_m3=volume,
                    neck_radius_m=unit_geom["radius"], neck_length_m=unit_geom["length"], resonance_q=q,
                    d50_um=d50_act, powder_factor=powder, click_freq_factor=click_f, click_level_db=click_db,
                    distance_factor=synth.REFERENCE_DISTANCE_M / rig.mic_distance_m,
                    rig_gain=10.0 ** (rig.gain_db / 20.0),
                    hum_rms=10.0 ** ((rig.hum_dbfs + hum_day_db) / 20.0), drive_hz=rig.drive_hz,
                    drive_rms=10.0 ** (rig.drive_dbfs / 20.0), room_rms=10.0 ** ((rig.room_dbfs + room_day_db) / 20.0),
                    squeal_db_re_flow=squeal_db, squeal_hz=fault.freq_hz if squeal_db is not None else 3400.0,
                    clip_gain_range=clip_range, dropout_ms=dropout_ms,
                    drop_marker_2=condition == "missing_marker",
                )
                plans.append(PlannedActuation(
                    index=index, site=site.id, rig=rig.id, lot=lot.id, unit=unit, actuation=a,
                    file=f"{site.id}/{rig.id}/{lot.id}/{unit}_{a:03d}.flac",
                    recorded_at=when.isoformat(timespec="seconds"), reference=lot.id in reference,
                    condition=condition, fault_start=fault_start, severity=severity,
                    severity_unit=SEVERITY_UNITS[condition] if fault is not None else "", params=params,
                ))
    for i, hits in enumerate(fault_hits):
        if hits == 0:
            raise ScenarioError(f"{sc.source}: {_fault_label(sc, i)} matches no actuation of the test plan "
                                f"(check its lot, unit, rig and date against [[lots]] and [plan])")
    return plans


def _sidecar(p: PlannedActuation, markers_s: tuple[float, ...], profile: str) -> dict:
    doc = {
        "site": p.site, "rig": p.rig, "lot": p.lot, "unit": p.unit, "actuation": p.actuation,
        "recorded_at": p.recorded_at, "profile": profile,
    }
    if p.params.markers == "channel":
        doc["channels"] = {"mic": 0, "marker": 1}
    else:
        doc["channels"] = {"mic": 0}
        doc["markers_s"] = list(markers_s)
    doc["notes"] = "synthetic demo recording"
    return doc


def _quantise(samples: np.ndarray, subtype: str) -> np.ndarray:
    """Round to the file's integer grid ourselves so the bytes do not depend on libsndfile's float conversion."""
    if subtype == "PCM_16":
        return np.clip(np.round(samples * 32767.0), -32768, 32767).astype(np.int16)
    q = np.clip(np.round(samples * 8388607.0), -8388608, 8388607).astype(np.int32)
    return q * np.int32(256)   # libsndfile keeps the top 24 bits of int32 data


def _render_and_write(job: tuple) -> tuple[dict, int]:
    plan, seed, out_dir, subtype, profile = job
    rng = np.random.default_rng(np.random.SeedSequence([seed, 0, plan.index]))
    rendered = synth.render_actuation(plan.params, rng)
    path = Path(out_dir) / plan.file
    path.parent.mkdir(parents=True, exist_ok=True)
    data = _quantise(rendered.samples, subtype)
    sf.write(path, data if data.shape[1] > 1 else data[:, 0], plan.params.sample_rate_hz, format="FLAC",
             subtype=subtype)
    side = path.with_suffix(".json")
    side.write_text(json.dumps(_sidecar(plan, rendered.markers_s, profile), indent=2) + "\n", encoding="utf-8")
    return rendered.truth, path.stat().st_size + side.stat().st_size


def _fmt(x, digits: int = 4) -> str:
    if x is None:
        return ""
    if isinstance(x, bool):
        return "true" if x else "false"
    if isinstance(x, (int, np.integer)):
        return str(int(x))
    if isinstance(x, float):
        return f"{x:.{digits}f}"
    return str(x)


def _truth_row(p: PlannedActuation, t: dict) -> dict:
    pa = p.params
    return {
        "file": p.file, "site": p.site, "rig": p.rig, "lot": p.lot, "unit": p.unit, "actuation": p.actuation,
        "recorded_at": p.recorded_at, "condition": p.condition, "cause": FAULT_CAUSES[p.condition],
        "reference": _fmt(p.reference),
        "fault_start": p.fault_start,
        "severity": _fmt(t["clip_gain"] if p.condition == "clipping"
                         else (1000.0 * t["dropout_s"] if p.condition == "dropout" else p.severity), 2),
        "severity_unit": p.severity_unit, "mains_hz": _fmt(pa.mains_hz, 1),
        "temperature_c": _fmt(t["temperature_c"], 3),
        "flow_rel": _fmt(t["flow_rel"], 5), "cavity_volume_cm3": _fmt(pa.volume_m3 * 1e6, 6),
        "neck_radius_mm": _fmt(pa.neck_radius_m * 1e3, 6), "neck_length_mm": _fmt(pa.neck_length_m * 1e3, 6),
        "helmholtz_hz": _fmt(t["helmholtz_hz"], 2), "carrier_d50_um": _fmt(pa.d50_um, 3),
        "impact_centre_hz": _fmt(float(physics.impact_ring_hz(
            pa.d50_um, reference_diameter_um=synth.CARRIER_REFERENCE_UM,
            reference_ring_hz=synth.IMPACT_REFERENCE_HZ)), 1),
        "marker_1_s": _fmt(t["marker_1_s"], 5), "click_onset_s": _fmt(t["click_onset_s"], 5),
        "marker_2_s": _fmt(t["marker_2_s"], 5), "burst_onset_s": _fmt(t["burst_onset_s"], 5),
        "impacts": _fmt(t["impacts"]), "clip_gain": _fmt(t["clip_gain"], 3),
        "dropout_start_s": _fmt(t["dropout_start_s"], 5), "dropout_s": _fmt(t["dropout_s"], 5),
        "peak_dbfs": _fmt(t["peak_dbfs"], 2),
    }


def generate(out_dir, *, scenario="default", seed: int | None = None, jobs: int | None = None,
             progress: Callable[[int, int], None] | None = None) -> GenerationSummary:
    """Generate a scenario into ``out_dir`` (created; must be new or empty) and return a summary.

    ``scenario``: a name in demo_data/scenarios/ ("default", "small"), a path to a .toml, or a Scenario.
    ``seed`` overrides the scenario's seed. ``jobs``: worker processes (default: all CPUs; 1 = in this process).
    ``progress(done, total)`` is called after each actuation is written.
    """
    started = time.perf_counter()
    sc = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
    seed = sc.seed if seed is None else int(seed)
    if seed < 0:
        raise ScenarioError(f"seed must be an integer >= 0, got {seed!r}")
    if jobs is None:
        jobs = os.cpu_count() or 1
    if isinstance(jobs, bool) or not isinstance(jobs, int) or jobs < 1:
        raise ScenarioError(f"jobs must be an integer >= 1, got {jobs!r}")
    out = Path(out_dir)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise ScenarioError(f"{out}: the output folder must be new or empty (remove it or choose another)")
    plans = plan_scenario(sc, seed=seed)
    out.mkdir(parents=True, exist_ok=True)

    work = [(p, seed, str(out), sc.subtype, sc.profile) for p in plans]
    results: list[tuple[dict, int]] = []
    total = len(work)
    jobs = min(jobs, max(1, total))
    if jobs == 1:
        for job in work:
            results.append(_render_and_write(job))
            if progress is not None:
                progress(len(results), total)
    else:
        # "fork" where the platform has it: no `if __name__ == "__main__"` guard needed in a caller's script and
        # no re-import per worker; workers touch only numpy, scipy and soundfile. Elsewhere "spawn".
        method = "fork" if "fork" in get_all_start_methods() else "spawn"
        with ProcessPoolExecutor(max_workers=jobs, mp_context=get_context(method)) as pool:
            for res in pool.map(_render_and_write, work, chunksize=max(1, min(32, total // (4 * jobs) or 1))):
                results.append(res)
                if progress is not None:
                    progress(len(results), total)

    gt = out / "ground_truth.csv"
    with gt.open("w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=GROUND_TRUTH_COLUMNS, lineterminator="\n")
        writer.writeheader()
        for p, (truth, _) in zip(plans, results):
            writer.writerow(_truth_row(p, truth))
    return GenerationSummary(
        out_dir=out, scenario=sc.name, seed=seed, n_actuations=total,
        conditions=dict(sorted(Counter(p.condition for p in plans).items())), ground_truth=gt,
        bytes_written=sum(b for _, b in results) + gt.stat().st_size, jobs=jobs,
        elapsed_s=time.perf_counter() - started,
    )
