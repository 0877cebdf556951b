"""``harken worker`` and ``harken ingest``: recordings from an inbox (or named files and folders) into the store."""

from __future__ import annotations

from ..inbox import DEFAULT_POLL_S, DEFAULT_SETTLE_S, DEFAULT_SIDECAR_WAIT_S, WATCH_MODES
from ._common import add_files, add_profiles, add_store, log

__all__ = ["register", "run_worker", "ingest"]


def register(sub) -> None:
    p = sub.add_parser("worker", help="analyse recordings delivered to an inbox folder into the store")
    p.add_argument("--inbox", required=True, metavar="DIR")
    add_store(p)
    p.add_argument("--once", action="store_true", help="process what is in the inbox now, then exit")
    p.add_argument("--jobs", type=int, default=None, help="analysis processes (default: all cores)")
    p.add_argument("--watch", choices=WATCH_MODES, default="auto",
                   help="how new files are noticed: file-system events where the folder delivers them, else "
                        "polling (auto, the default); events, required; poll only (for a network folder)")
    p.add_argument("--poll-s", "--interval-s", dest="poll_s", type=float, default=DEFAULT_POLL_S,
                   help=f"seconds between scans of the inbox, also with events (default {DEFAULT_POLL_S:g})")
    p.add_argument("--claim-timeout-s", type=float, default=None,
                   help="take over another worker's claim older than this (default 300 s)")
    p.add_argument("--settle-s", type=float, default=None,
                   help=f"take a file once it and its sidecar kept their size and time for S seconds (default "
                        f"{DEFAULT_SETTLE_S:g}; 0 with --once)")
    p.add_argument("--sidecar-wait-s", type=float, default=None,
                   help=f"take a recording without its sidecar (quarantined for it) S seconds after it came "
                        f"(default {DEFAULT_SIDECAR_WAIT_S:g}; 0 with --once)")
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
    s = run(args.inbox, args.store, once=args.once, jobs=args.jobs, poll_s=args.poll_s, watch=args.watch,
            claim_timeout_s=timeout, settle_s=args.settle_s, sidecar_wait_s=args.sidecar_wait_s,
            profile_dirs=args.profiles, files_dir=args.files, log=log)
    print(s)
    return 0


def ingest(args) -> int:
    from ..worker import ingest_paths

    print(ingest_paths(args.paths, args.store, args.jobs, profile_dirs=args.profiles, files_dir=args.files, log=log))
    return 0
