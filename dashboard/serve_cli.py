"""`harken serve` and `harken bench dashboard` for analysis/cli.py: ``register(subparsers)`` adds them,
``dispatch(args)`` runs them (None when the command is not one of these)."""

from __future__ import annotations

import argparse

__all__ = ["register", "dispatch", "serve"]


def _bench_subparsers(subparsers):
    """The `bench` command's own sub-commands (made here if `bench` does not exist yet)."""
    bench = subparsers.choices.get("bench")
    if bench is None:
        bench = subparsers.add_parser("bench", help="benchmarks")
        return bench.add_subparsers(dest="bench_command", required=True, metavar="WHAT")
    for action in bench._actions:  # argparse keeps sub-commands as a _SubParsersAction among the actions
        if isinstance(action, argparse._SubParsersAction):
            return action
    return bench.add_subparsers(dest="bench_command", required=True, metavar="WHAT")


def register(subparsers, bench_subparsers=None) -> None:
    p = subparsers.add_parser("serve", help="serve the dashboard on a results store")
    p.add_argument("--store", default=None, metavar="URL",
                   help="results store: sqlite:///FILE, a file path, or postgresql+psycopg://USER@HOST/DB "
                        "(default: harken.db in the working folder)")
    p.add_argument("--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1: this machine only)")
    p.add_argument("--port", type=int, default=8050)
    p.add_argument("--cache-dir", default=None, metavar="DIR",
                   help="cache folder shared by all server processes (default: beside the store)")
    p.add_argument("--meeting", action="store_true", help="start in meeting mode (large, high-contrast)")
    p.add_argument("--refresh-s", type=float, default=30.0, help="how often Today refreshes itself (s)")
    b = (bench_subparsers or _bench_subparsers(subparsers)).add_parser(
        "dashboard", help="view callback times on synthetic stores of 10,000 and 100,000 actuations")
    b.add_argument("--repeat", type=int, default=3)
    b.add_argument("--small", type=int, default=10_000, help="actuations in the small store")
    b.add_argument("--large", type=int, default=100_000, help="actuations in the large store")


def serve(store=None, *, host="127.0.0.1", port=8050, cache_dir=None, meeting=False, refresh_s=30.0, echo=print):
    from .app import create_app

    app = create_app(store, cache_dir=cache_dir, meeting=meeting, refresh_s=refresh_s)
    echo(f"Harken dashboard on {app.harken.store.url}: http://{host}:{port}/  (Ctrl+C stops it)")
    app.run(host=host, port=port, debug=False)
    return 0


def dispatch(args) -> int | None:
    if args.command == "serve":
        return serve(args.store, host=args.host, port=args.port, cache_dir=args.cache_dir, meeting=args.meeting,
                     refresh_s=args.refresh_s)
    if args.command == "bench" and getattr(args, "bench_command", None) == "dashboard":
        from .bench import run_bench

        run_bench(sizes=(args.small, args.large), repeat=args.repeat)
        return 0
    return None
