"""The store's subcommands of ``harken``: worker, ingest, reference, rescore, export (and bench ingest).

``register(subparsers)`` adds them to harken's argparse subparsers; ``dispatch(args)`` runs one and returns its
exit code, or None when the command is not one of these. Errors are AnalysisError (StoreError among them),
which harken's main prints as one line.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .errors import AnalysisError

__all__ = ["register", "register_bench", "dispatch", "COMMANDS"]

COMMANDS = ("worker", "ingest", "reference", "rescore", "export")


def _store_arg(p):
    p.add_argument("--store", default=None, metavar="URL",
                   help="results store: sqlite:///FILE, postgresql+psycopg://USER@HOST/DB or a file path "
                        "(default: harken.db in the working folder)")


def _files_arg(p):
    p.add_argument("--files", default=None, metavar="DIR",
                   help="folder for the archive and quarantine (default: beside a SQLite store, else here)")


def _profiles_arg(p):
    p.add_argument("--profiles", action="append", default=[], metavar="DIR",
                   help="folder with device profiles, searched before the shipped ones (repeatable)")


def register(subparsers, *, bench=None) -> None:
    """Add worker, ingest, reference, rescore and export to harken's subparsers; and ``bench ingest`` to the
    bench subparsers (given as ``bench``, or found under an existing ``bench`` command)."""
    p = subparsers.add_parser("worker", help="analyse recordings delivered to an inbox folder into the store")
    p.add_argument("--inbox", required=True, metavar="DIR")
    _store_arg(p)
    p.add_argument("--once", action="store_true", help="process what is in the inbox now, then exit")
    p.add_argument("--jobs", type=int, default=None, help="analysis processes (default: all cores)")
    p.add_argument("--interval-s", type=float, default=5.0, help="seconds between polls of the inbox (default 5)")
    p.add_argument("--claim-timeout-s", type=float, default=None,
                   help="take over another worker's claim older than this (default 300 s)")
    p.add_argument("--settle-s", type=float, default=None,
                   help="leave files modified in the last S seconds for the next poll (default 2; 0 with --once)")
    _profiles_arg(p)
    _files_arg(p)

    p = subparsers.add_parser("ingest", help="analyse recordings (files or folders) into the store once")
    p.add_argument("paths", nargs="+", metavar="PATH")
    _store_arg(p)
    p.add_argument("--jobs", type=int, default=None)
    _profiles_arg(p)
    _files_arg(p)

    p = subparsers.add_parser("reference", help="reference models in the store")
    rsub = p.add_subparsers(dest="reference_command", required=True, metavar="ACTION")
    b = rsub.add_parser("build", help="fit reference models from stored lots, make them active, score history")
    b.add_argument("--profile", required=True)
    b.add_argument("--event", action="append", default=[], metavar="EVENT",
                   help="event to model (repeatable; default: every event of the profile)")
    b.add_argument("--lots", required=True, metavar="L1,L2,...", help="reference lots, comma-separated")
    b.add_argument("--by", default=None, metavar="NAME", help="who builds it (default: the login name)")
    b.add_argument("--components", type=int, default=None, help="fix the number of components (default: by CV)")
    b.add_argument("--scaling", choices=("centre", "unit", "pareto"), default="unit")
    b.add_argument("--alpha", type=float, default=0.01, help="actuation-level false-alarm rate (default 0.01)")
    _store_arg(b)
    _profiles_arg(b)
    ls = rsub.add_parser("list", help="list stored model versions")
    _store_arg(ls)
    a = rsub.add_parser("activate", help="make a stored model version the active one")
    a.add_argument("--model", type=int, required=True, metavar="ID")
    a.add_argument("--by", default=None, metavar="NAME")
    _store_arg(a)

    p = subparsers.add_parser("rescore", help="score stored actuations that lack scores under the active models")
    p.add_argument("--profile", default=None, help="default: every profile with an active model")
    p.add_argument("--event", action="append", default=[], metavar="EVENT")
    _store_arg(p)

    p = subparsers.add_parser("export", help="export tables from the store")
    esub = p.add_subparsers(dest="export_what", required=True, metavar="WHAT")
    e = esub.add_parser("actuations", help="one row per actuation: identifiers, QC, timings, statistics, flags")
    _store_arg(e)
    e.add_argument("--format", choices=("csv", "parquet"), default="csv")
    e.add_argument("--out", required=True, metavar="FILE")
    q = esub.add_parser("quarantine", help="quarantined files with their reasons")
    _store_arg(q)
    q.add_argument("--format", choices=("csv", "parquet"), default="csv")
    q.add_argument("--out", default=None, metavar="FILE", help="default: print a table")

    if bench is None:
        bench = _find_subparsers(subparsers.choices.get("bench"))
    if bench is not None:
        register_bench(bench)


def register_bench(bench_subparsers) -> None:
    """Add ``ingest`` to the subparsers of ``harken bench``."""
    b = bench_subparsers.add_parser("ingest", help="ingest the small scenario into a fresh store vs bare analysis")
    b.add_argument("--scenario", default="small")
    b.add_argument("--inbox", default=None, metavar="DIR",
                   help="use the recordings in DIR (left in place) instead of generating the scenario")
    b.add_argument("--jobs", type=int, default=None)
    b.add_argument("--store", default=None, metavar="URL", help="an empty store to ingest into (default: a "
                   "fresh SQLite file in a temporary folder)")


def _find_subparsers(parser):
    if parser is None:
        return None
    for action in parser._actions:  # argparse keeps no public accessor for a parser's subparsers
        if isinstance(action, argparse._SubParsersAction):
            return action
    return None


def _log(msg: str) -> None:
    print(msg, file=sys.stderr, flush=True)


def dispatch(args) -> int | None:
    cmd = getattr(args, "command", None)
    if cmd == "bench" and getattr(args, "bench_command", None) == "ingest":
        from .ingest_bench import run

        return run(args)
    if cmd not in COMMANDS:
        return None
    return {"worker": _worker, "ingest": _ingest, "reference": _reference, "rescore": _rescore,
            "export": _export}[cmd](args)


def _worker(args) -> int:
    from .worker import DEFAULT_CLAIM_TIMEOUT_S, run_worker

    s = run_worker(args.inbox, args.store, once=args.once, jobs=args.jobs, interval_s=args.interval_s,
                   claim_timeout_s=args.claim_timeout_s if args.claim_timeout_s is not None else DEFAULT_CLAIM_TIMEOUT_S,
                   settle_s=args.settle_s, profile_dirs=args.profiles, files_dir=args.files, log=_log)
    print(s)
    return 0


def _ingest(args) -> int:
    from .worker import ingest_paths

    s = ingest_paths(args.paths, args.store, args.jobs, profile_dirs=args.profiles, files_dir=args.files, log=_log)
    print(s)
    return 0


def _reference(args) -> int:
    from .store import Store, build_reference

    with Store.open(args.store) as store:
        if args.reference_command == "build":
            lots = [x for x in args.lots.split(",") if x.strip()]
            build_reference(store, args.profile, args.event, lots, created_by=args.by, profile_dirs=args.profiles,
                            n_components=args.components, scaling=args.scaling, alpha=args.alpha, log=print)
        elif args.reference_command == "list":
            df = store.models()
            cols = ["id", "profile", "event", "version", "status", "reference_lots", "n_recordings", "n_components",
                    "created_by", "created_at"]
            print(df[cols].to_string(index=False) if len(df) else "no reference models in the store")
        else:
            from .scoring import current_user

            store.activate_model(args.model, person=args.by or current_user())
            print(f"model {args.model} is now active")
    return 0


def _rescore(args) -> int:
    from .store import Store, rescore

    with Store.open(args.store) as store:
        models = store.models(profile=args.profile)
        profiles = sorted(set(models.loc[models["status"] == "active", "profile"])) if len(models) else []
        if args.profile is not None:
            profiles = [args.profile]
        if not profiles:
            raise AnalysisError(f"{store.url}: no active reference model; build one with `harken reference build`")
        for prof in profiles:
            n = rescore(store, prof, events=args.event or None)
            print(f"{prof}: {n} event scorings written")
    return 0


def _export(args) -> int:
    from .store import Store

    with Store.open(args.store, create=False) as store:
        df = store.export_actuations() if args.export_what == "actuations" else store.quarantine()
    if args.out is None:
        print(df[["file", "reason"]].to_string(index=False) if len(df) else "no quarantined files")
        return 0
    out = Path(args.out)
    if args.format == "parquet":
        try:
            df.to_parquet(out, index=False)
        except ImportError as exc:
            raise AnalysisError(f"{out}: parquet export needs pyarrow ({exc})") from None
    else:
        df.to_csv(out, index=False)
    print(f"{len(df)} rows -> {out}")
    return 0


def main(argv=None) -> int:
    """Run these subcommands on their own (``python -m analysis.store_cli ...``), as harken's main would."""
    parser = argparse.ArgumentParser(prog="harken")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    bench = sub.add_parser("bench").add_subparsers(dest="bench_command", required=True, metavar="WHAT")
    register(sub, bench=bench)
    args = parser.parse_args(argv)
    try:
        return dispatch(args)
    except AnalysisError as exc:
        print(f"harken: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("harken: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
