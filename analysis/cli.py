"""The ``harken`` command.

Every command that needs device profiles takes ``--profiles DIR`` (repeatable) and ``--profile NAME_OR_PATH``.
A bad input gives one line on stderr naming the file and the reason, and a non-zero exit code; no traceback.
"""

from __future__ import annotations

import argparse
import json
import sys
import warnings
from pathlib import Path

from .errors import AnalysisError

__all__ = ["main", "build_parser"]

EXIT_BAD_INPUT = 1


def _add_profile_args(p: argparse.ArgumentParser, *, required: bool = False) -> None:
    p.add_argument(
        "--profile", required=required, metavar="NAME_OR_PATH",
        help="device profile name (NAME.toml looked up in --profiles folders, then demo_data/profiles) or a path",
    )
    p.add_argument(
        "--profiles", action="append", default=[], metavar="DIR",
        help="folder with device profiles, searched before the shipped ones (repeatable)",
    )


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="harken", description="Acoustic trend review for device test rigs.")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = sub.add_parser("analyse", help="analyse one recording: quality checks, events, band features")
    p.add_argument("file", help="recording (FLAC, WAV or any libsndfile format) with its sidecar <stem>.json")
    _add_profile_args(p)
    p.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    p.add_argument("--model", action="append", default=[], metavar="MODEL",
                   help="reference model file or folder of models: adds monitoring statistics (repeatable)")
    p.add_argument("--calibration", metavar="FILE",
                   help="recording of a calibrator tone on the same rig: levels become dB re 20 µPa")
    p.add_argument("--calibration-level-db", type=float, default=94.0, metavar="DB",
                   help="the calibrator's level in dB SPL (default 94 dB = 1 Pa RMS)")
    p.add_argument("--no-sidecar", action="store_true",
                   help="analyse without sidecar metadata (needs --profile)")

    p = sub.add_parser("demo-data", help="the demo scenario generator")
    dsub = p.add_subparsers(dest="demo_command", required=True, metavar="ACTION")
    g = dsub.add_parser("generate", help="write an inbox-style tree of generated recordings and ground truth")
    g.add_argument("--out", required=True, metavar="DIR")
    g.add_argument("--scenario", default="default", metavar="default|small|NAME.toml")
    g.add_argument("--seed", type=int, default=None)
    g.add_argument("--jobs", type=int, default=None, help="worker processes (default: all cores)")

    p = sub.add_parser("model", help="reference models")
    msub = p.add_subparsers(dest="model_command", required=True, metavar="ACTION")
    f = msub.add_parser("fit", help="fit a reference model from recordings of the reference set")
    _add_profile_args(f, required=True)
    f.add_argument("--event", action="append", default=[], metavar="EVENT",
                   help="event to model (repeatable; default: every event of the profile)")
    f.add_argument("--out", required=True, metavar="MODEL",
                   help="folder for one model per event (<event>.json + <event>.npz), or NAME.json for one --event")
    f.add_argument("--components", type=int, default=None, help="fix the number of components (default: by CV)")
    f.add_argument("--scaling", choices=("centre", "unit", "pareto"), default="unit")
    f.add_argument("--alpha", type=float, default=0.01, help="actuation-level false-alarm rate (default 0.01)")
    f.add_argument("--jobs", type=int, default=None)
    f.add_argument("paths", nargs="+", metavar="PATH", help="recordings or folders of recordings")

    p = sub.add_parser("bench", help="benchmarks that print ratios against a floor measured in the same run")
    bsub = p.add_subparsers(dest="bench_command", required=True, metavar="WHAT")
    b = bsub.add_parser("analyse", help="analysis time per recording vs decode+FFT floor and a plain peer")
    b.add_argument("--files", type=int, default=60, help="recordings to generate and analyse (default 60)")
    b.add_argument("--repeat", type=int, default=3)
    b = bsub.add_parser("score", help="scoring 10,000 actuations vs the bare matrix products")
    b.add_argument("--actuations", type=int, default=10_000)
    b.add_argument("--slices", type=int, default=40)
    b.add_argument("--bands", type=int, default=30)
    b.add_argument("--repeat", type=int, default=5)

    from . import store_cli

    store_cli.register(sub, bench=bsub)  # worker, ingest, reference, rescore, export, bench ingest
    # The command line is the one place that knows the dashboard too: serve, bench dashboard.
    from dashboard import serve_cli

    serve_cli.register(sub, bench_subparsers=bsub)

    p = sub.add_parser("demo", help="generate the demo scenario, fit the reference, analyse and summarise")
    p.add_argument("--out", default="demo_out", metavar="DIR")
    p.add_argument("--scenario", default="default")
    p.add_argument("--seed", type=int, default=None)
    p.add_argument("--jobs", type=int, default=None)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        from . import store_cli

        rc = store_cli.dispatch(args)
        if rc is None:
            from dashboard import serve_cli

            rc = serve_cli.dispatch(args)
        if rc is not None:
            return rc
        if args.command == "analyse":
            return _cmd_analyse(args)
        if args.command == "demo-data":
            return _cmd_demo_data(args)
        if args.command == "model":
            return _cmd_model(args)
        if args.command == "bench":
            from . import bench

            return bench.run(args)
        if args.command == "demo":
            from . import demo_run

            return demo_run.run(args)
    except AnalysisError as exc:
        print(f"harken: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except OSError as exc:  # a folder we cannot write, a disk that is full: say which path and why
        where = exc.filename if exc.filename is not None else "harken"
        print(f"harken: {where}: {exc.strerror or exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("harken: interrupted", file=sys.stderr)
        return 130
    parser.error(f"unknown command {args.command!r}")
    return 2


# --------------------------------------------------------------------------------------------------- analyse


def _cmd_analyse(args) -> int:
    from . import pipeline
    from .errors import ParameterError
    from .io import read_audio
    from .profiles import load_profile
    from .signal.features import calibration_offset_db

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
        from . import scoring

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
                f"{m['slices_outside']} slices outside the envelope, distance {_fmt(m['trajectory_distance'], digits=2)}"
            )
            for reason in m["reasons"]:
                lines.append(f"      - {reason}")
    return "\n".join(lines)


# --------------------------------------------------------------------------------------------------- demo data


def _cmd_demo_data(args) -> int:
    import time

    from .demo import generate

    t0 = time.perf_counter()
    summary = generate(args.out, scenario=args.scenario, seed=args.seed, jobs=args.jobs)
    print(summary.describe())
    print(f"generated in {time.perf_counter() - t0:.1f} s")
    return 0



# --------------------------------------------------------------------------------------------------- model


def _cmd_model(args) -> int:
    from . import scoring

    written = scoring.fit_models_from_paths(
        args.paths,
        profile=args.profile,
        profile_dirs=args.profiles,
        events=args.event or None,
        out=args.out,
        n_components=args.components,
        scaling=args.scaling,
        alpha=args.alpha,
        jobs=args.jobs,
        log=lambda msg: print(msg, file=sys.stderr),
    )
    for event, path, model in written:
        print(f"{event}: {model.n_components_} components, {model.n_actuations_} reference actuations -> {path}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
