"""``harken serve``: the dashboard on a results store."""

from __future__ import annotations

import sys

from ..errors import ParameterError
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
    p.add_argument("--threads", type=int, default=8, help="requests served at once (default 8)")
    p.set_defaults(func=run)


LOCAL_HOSTS = ("127.0.0.1", "localhost", "::1")


def network_warning(host: str, port: int) -> str | None:
    """What to say when the dashboard listens beyond this machine (it has no sign-in yet), or None."""
    if host in LOCAL_HOSTS:
        return None
    return (f"warning: --host {host} serves the dashboard to the network with no sign-in: anyone who can reach "
            f"port {port} can read this store, play its recordings and build reference models under any name. "
            "Use it on a trusted network only, or keep the default 127.0.0.1.")


def serve(store=None, *, host="127.0.0.1", port=8050, cache_dir=None, meeting=False, refresh_s=30.0,
          threads: int = 8, echo=print):
    """Build the dashboard on ``store`` and serve it with waitress (a production WSGI server, pure Python) until
    interrupted."""
    import waitress

    from dashboard import create_app  # the application layer is the one place that starts the dashboard

    if not 1 <= int(threads) <= 256:
        raise ParameterError(f"--threads must be from 1 to 256; got {threads!r}")
    app = create_app(store, cache_dir=cache_dir, meeting=meeting, refresh_s=refresh_s)
    warning = network_warning(host, port)
    if warning:
        print(warning, file=sys.stderr, flush=True)
    echo(f"Harken dashboard on {app.harken.store.url}: http://{host}:{port}/  ({threads} threads; Ctrl+C stops it)")
    waitress.serve(app.server, host=host, port=int(port), threads=int(threads), ident="harken")
    return 0


def run(args) -> int:
    return serve(args.store, host=args.host, port=args.port, cache_dir=args.cache_dir, meeting=args.meeting,
                 refresh_s=args.refresh_s, threads=args.threads)
