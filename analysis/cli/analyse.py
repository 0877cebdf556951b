"""``harken analyse``: one recording's quality checks, events and band features (and monitoring statistics)."""

from __future__ import annotations

import json
import sys
import warnings
from pathlib import Path

from ..errors import AnalysisError
from ._common import add_profile

__all__ = ["register", "run"]


def register(sub) -> None:
    p = sub.add_parser("analyse", help="analyse one recording: quality checks, events, band features")
    p.add_argument("file", help="recording (FLAC, WAV or any libsndfile format) with its sidecar <stem>.json")
    add_profile(p)
    p.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    p.add_argument("--model", action="append", default=[], metavar="MODEL",
                   help="reference model file or folder of models: adds monitoring statistics (repeatable)")
    p.add_argument("--calibration", metavar="FILE",
                   help="recording of a calibrator tone on the same rig: levels become dB re 20 µPa")
    p.add_argument("--calibration-level-db", type=float, default=94.0, metavar="DB",
                   help="the calibrator's level in dB SPL (default 94 dB = 1 Pa RMS)")
    p.add_argument("--no-sidecar", action="store_true",
                   help="analyse without sidecar metadata (needs --profile)")
    p.set_defaults(func=run)


def run(args) -> int:
    from .. import pipeline
    from ..errors import ParameterError
    from ..io import read_audio
    from ..profiles import load_profile
    from ..signal.features import calibration_offset_db

    path = Path(args.file)
    if args.no_sidecar and not args.profile:
        raise AnalysisError(f"{path}: --no-sidecar needs --profile")
    offset = 0.0
    if args.calibration:
        cal = read_audio(args.calibration)
        mic = 0
        if args.profile:
            mic = load_profile(args.profile, search_dirs=args.profiles).channels.get("mic", 0)
        try:
            offset = calibration_offset_db(
                cal.channel(mic), sample_rate_hz=cal.sample_rate_hz,
                level_db=args.calibration_level_db,
            )
        except ParameterError as exc:
            raise AnalysisError(f"{args.calibration}: not usable as a calibration recording ({exc})") from None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = pipeline.analyse_file(
            path, profile=args.profile, profile_dirs=args.profiles, offset_db=offset,
            require_sidecar=not args.no_sidecar,
        )
    for w in caught:
        print(f"harken: warning: {w.message}", file=sys.stderr)

    monitoring = None
    if args.model:
        from .. import scoring

        models = scoring.load_models(args.model)
        monitoring = scoring.monitor_result(result, models)

    if args.json:
        out = result.to_json()
        if monitoring is not None:
            out["monitoring"] = monitoring
        print(json.dumps(out, indent=2, ensure_ascii=False))
        return 0
    print(_format_text(result, monitoring))
    return 0


def _fmt(x, unit="", digits=3) -> str:
    import math

    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "-"
    return f"{x:.{digits}f}{unit}"


def _format_text(result, monitoring) -> str:
    lines = [
        f"recording  {result.path}",
        f"profile    {result.profile}   {result.sample_rate_hz} Hz, {result.n_channels} channel(s), "
        f"{result.duration_s:.3f} s   markers: {len(result.markers_s)} from {result.marker_source}",
    ]
    if result.sidecar is not None:
        s = result.sidecar
        lines.append(
            f"metadata   site {s.site}  rig {s.rig}  lot {s.lot}  unit {s.unit}  actuation {s.actuation}  "
            f"{s.recorded_at.isoformat()}"
        )
    lines.append("")
    lines.append("quality checks")
    for r in result.qc:
        lines.append(f"  {'pass' if r.passed else 'FAIL'}  {r.check:<12} {r.detail}")
    lines.append("")
    lines.append("events")
    lines.append(f"  {'name':<16} {'onset s':>8} {'end s':>8} {'dur s':>7} {'peak dBFS':>9} {'latency s':>9}  method")
    for ev in result.events:
        if ev.found:
            lines.append(
                f"  {ev.name:<16} {_fmt(ev.onset_s):>8} {_fmt(ev.end_s):>8} {_fmt(ev.duration_s):>7} "
                f"{_fmt(ev.peak_dbfs, digits=1):>9} {_fmt(ev.latency_s, digits=4):>9}  {ev.method}"
            )
        else:
            lines.append(f"  {ev.name:<16} MISSING: {ev.reason}")
    lines.append("")
    lines.append("band features")
    for name, f in result.features.items():
        lines.append(
            f"  {name:<16} {f.levels_db.shape[0]} slices x {f.levels_db.shape[1]} bands "
            f"({f.band_centres_hz[0]:.0f}-{f.band_centres_hz[-1]:.0f} Hz, {f.reference}); "
            f"dominant {f.dominant_hz:.0f} Hz, centroid {f.centroid_hz:.0f} Hz, level {f.band_energy_db:.1f} dB"
        )
    for note in result.notes:
        lines.append(f"  note: {note}")
    if monitoring:
        lines.append("")
        lines.append("monitoring")
        for name, m in monitoring.items():
            state = "FLAGGED" if m["flagged"] else "in control"
            lines.append(
                f"  {name:<16} {state}: T² max {_fmt(m['t2_max'], digits=2)} (limit {_fmt(m['t2_limit'], digits=2)}), "
                f"SPE max {_fmt(m['spe_max'], digits=2)} (limit {_fmt(m['spe_limit'], digits=2)}), "
                f"{m['slices_outside']} slices outside the envelope, "
                f"distance {_fmt(m['trajectory_distance'], digits=2)}"
            )
            for reason in m["reasons"]:
                lines.append(f"      - {reason}")
    return "\n".join(lines)
