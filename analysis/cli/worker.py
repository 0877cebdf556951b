"""``harken worker`` and ``harken ingest``: recordings from an inbox (or named files and folders) into the store."""

from __future__ import annotations

from ._common import add_files, add_profiles, add_store, log

__all__ = ["register", "run_worker", "ingest"]


def register(sub) -> None:
    p = sub.add_parser("worker", help="analyse recordings delivered to an inbox folder into the store")
    p.add_argument("--inbox", required=True, metavar="DIR")
    add_store(p)
    p.add_argument("--once", action="store_true", help="process what is in the inbox now, then exit")
    p.add_argument("--jobs", type=int, default=None, help="analysis processes (default: all cores)")
    p.add_argument("--interval-s", type=float, default=5.0, help="seconds between polls of the inbox (default 5)")
    p.add_argument("--claim-timeout-s", type=float, default=None,
                   help="take over another worker's claim older than this (default 300 s)")
    p.add_argument("--settle-s", type=float, default=None,
                   help="leave files modified in the last S seconds for the next poll (default 2; 0 with --once)")
    add_profiles(p)
    add_files(p)
    p.set_defaults(func=run_worker)

    p = sub.add_parser("ingest", help="analyse recordings (files or folders) into the store once")
    p.add_argument("paths", nargs="+", metavar="PATH")
    add_store(p)
    p.add_argument("--jobs", type=int, default=None)
    add_profiles(p)
    add_files(p)
    p.set_defaults(func=ingest)


def run_worker(args) -> int:
    from ..worker import DEFAULT_CLAIM_TIMEOUT_S
    from ..worker import run_worker as run

    timeout = args.claim_timeout_s if args.claim_timeout_s is not None else DEFAULT_CLAIM_TIMEOUT_S
    s = run(args.inbox, args.store, once=args.once, jobs=args.jobs, interval_s=args.interval_s,
            claim_timeout_s=timeout, settle_s=args.settle_s, profile_dirs=args.profiles, files_dir=args.files,
            log=log)
    print(s)
    return 0


def ingest(args) -> int:
    from ..worker import ingest_paths

    print(ingest_paths(args.paths, args.store, args.jobs, profile_dirs=args.profiles, files_dir=args.files, log=log))
    return 0
