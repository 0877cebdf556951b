"""``harken bench analyse|score|ingest|dashboard|latency``: speed as ratios against a floor or a peer timed in the
same run, and the one latency with a goal of its own.

Seconds on these machines are noisy; a ratio of two things timed side by side, interleaved, is not. Each bench
prints its details first and its ratios last, one per line, as ``name=<value>``. ``latency`` measures what a user
waits for (a recording from the inbox to Today) and prints its percentiles in seconds against its goal instead.
"""

from __future__ import annotations

from ..inbox import WATCH_MODES

__all__ = ["register"]


def register(sub) -> None:
    p = sub.add_parser("bench", help="benchmarks that print ratios against a floor measured in the same run")
    bsub = p.add_subparsers(dest="bench_command", required=True, metavar="WHAT")
    b = bsub.add_parser("analyse", help="analysis time per recording vs decode+FFT floor and a plain peer")
    b.add_argument("--files", type=int, default=60, help="recordings to generate and analyse (default 60)")
    b.add_argument("--repeat", type=int, default=3)
    b.set_defaults(func=_analyse)
    b = bsub.add_parser("score", help="scoring 10,000 actuations vs the bare matrix products")
    b.add_argument("--actuations", type=int, default=10_000)
    b.add_argument("--slices", type=int, default=40)
    b.add_argument("--bands", type=int, default=30)
    b.add_argument("--repeat", type=int, default=5)
    b.set_defaults(func=_score)
    b = bsub.add_parser("ingest", help="ingest the small scenario into a fresh store vs bare analysis")
    b.add_argument("--scenario", default="small")
    b.add_argument("--inbox", default=None, metavar="DIR",
                   help="use the recordings in DIR (left in place) instead of generating the scenario")
    b.add_argument("--jobs", type=int, default=None)
    b.add_argument("--store", default=None, metavar="URL", help="an empty store to ingest into (default: a "
                   "fresh SQLite file in a temporary folder)")
    b.set_defaults(func=_ingest)
    b = bsub.add_parser("dashboard", help="view callback times on synthetic stores of 10,000 and 1,000,000 "
                                          "actuations")
    b.add_argument("--repeat", type=int, default=3)
    b.add_argument("--small", type=int, default=10_000, help="actuations in the small store")
    b.add_argument("--large", type=int, default=1_000_000, help="actuations in the large store")
    b.add_argument("--postgres", default=None, metavar="URL",
                   help="fill and time on this PostgreSQL database instead of SQLite files; EVERYTHING IN ITS "
                        "public SCHEMA IS DROPPED (give an empty database made for the bench)")
    b.set_defaults(func=_dashboard)
    b = bsub.add_parser("latency", help="recordings dropped into a running worker's inbox until Today's query has "
                                        "them: p50 and p95 in s against the goal")
    b.add_argument("--recordings", type=int, default=20, help="recordings timed (default 20; one more is "
                                                                 "delivered first and not counted)")
    b.add_argument("--watch", choices=WATCH_MODES, default="auto", help="the worker's --watch (default auto)")
    b.add_argument("--settle-s", type=float, default=None, help="the worker's --settle-s (default: its own)")
    b.add_argument("--poll-s", type=float, default=None, help="the worker's --poll-s (default: its own)")
    b.add_argument("--jobs", type=int, default=None, help="the worker's --jobs (default: its own)")
    b.add_argument("--slow-every", type=int, default=4, help="every Nth recording is written in place in chunks "
                                                             "(default 4; 0: none)")
    b.set_defaults(func=_latency)


def _analyse(args) -> int:
    from .bench_core import bench_analyse

    bench_analyse(n_files=args.files, repeat=args.repeat)
    return 0


def _score(args) -> int:
    from .bench_core import bench_score

    bench_score(n_actuations=args.actuations, n_slices=args.slices, n_bands=args.bands, repeat=args.repeat)
    return 0


def _ingest(args) -> int:
    from .bench_ingest import bench_ingest

    bench_ingest(scenario=args.scenario, jobs=args.jobs, store_url=args.store, inbox=args.inbox)
    return 0


def _dashboard(args) -> int:
    from .bench_dashboard import run_bench

    run_bench(sizes=(args.small, args.large), repeat=args.repeat, postgres_url=args.postgres)
    return 0


def _latency(args) -> int:
    from .bench_latency import bench_latency

    bench_latency(n_recordings=args.recordings, watch=args.watch, settle_s=args.settle_s, poll_s=args.poll_s,
                  jobs=args.jobs, slow_every=args.slow_every)
    return 0
