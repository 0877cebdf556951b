"""``harken serve``: the dashboard on a results store."""

from __future__ import annotations

from ._common import add_store

__all__ = ["register", "serve", "run"]


def register(sub) -> None:
    p = sub.add_parser("serve", help="serve the dashboard on a results store")
    add_store(p)
    p.add_argument("--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1: this machine only)")
    p.add_argument("--port", type=int, default=8050)
    p.add_argument("--cache-dir", default=None, metavar="DIR",
                   help="cache folder shared by all server processes (default: beside the store)")
    p.add_argument("--meeting", action="store_true", help="start in meeting mode (large, high-contrast)")
    p.add_argument("--refresh-s", type=float, default=30.0, help="how often Today refreshes itself (s)")
    p.set_defaults(func=run)


def serve(store=None, *, host="127.0.0.1", port=8050, cache_dir=None, meeting=False, refresh_s=30.0, echo=print):
    """Build the dashboard on ``store`` and serve it until interrupted."""
    from dashboard import create_app  # the application layer is the one place that starts the dashboard

    app = create_app(store, cache_dir=cache_dir, meeting=meeting, refresh_s=refresh_s)
    echo(f"Harken dashboard on {app.harken.store.url}: http://{host}:{port}/  (Ctrl+C stops it)")
    app.run(host=host, port=port, debug=False)
    return 0


def run(args) -> int:
    return serve(args.store, host=args.host, port=args.port, cache_dir=args.cache_dir, meeting=args.meeting,
                 refresh_s=args.refresh_s)
