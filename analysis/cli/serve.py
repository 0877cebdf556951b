"""``harken serve``: the dashboard on a results store."""

from __future__ import annotations

import sys

from ..errors import ParameterError
from ._common import add_files, add_store

__all__ = ["register", "serve", "run"]


def register(sub) -> None:
    p = sub.add_parser("serve", help="serve the dashboard on a results store")
    add_store(p)
    add_files(p)
    p.add_argument("--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1: this machine only)")
    p.add_argument("--port", type=int, default=8050)
    p.add_argument("--cache-dir", default=None, metavar="DIR",
                   help="cache folder shared by all server processes (default: beside the store)")
    p.add_argument("--meeting", action="store_true", help="start in meeting mode (large, high-contrast)")
    p.add_argument("--refresh-s", type=float, default=2.0,
                   help="how often Today looks for new results, re-rendering only when there are (s, default 2)")
    p.add_argument("--threads", type=int, default=8, help="requests served at once (default 8)")
    p.add_argument("--open-reading", action="store_true",
                   help="let anyone who reaches the port read without signing in (writing always needs a signed-in "
                        "person with the role); `make demo` uses it on 127.0.0.1")
    p.add_argument("--idle-minutes", type=float, default=30.0, help="sign a person out after this long idle (30)")
    p.add_argument("--trusted-header", default=None, metavar="NAME",
                   help="take the user name from this request header, set by the site's reverse proxy (single "
                        "sign-on); only from the --trusted-proxy addresses")
    p.add_argument("--trusted-proxy", action="append", default=[], metavar="ADDRESS",
                   help="an address of the reverse proxy whose --trusted-header is believed (repeatable)")
    p.add_argument("--secure-cookies", action="store_true",
                   help="mark the session cookie Secure (when the dashboard is served over HTTPS)")
    p.set_defaults(func=run)


LOCAL_HOSTS = ("127.0.0.1", "localhost", "::1")


def network_warning(host: str, port: int, *, open_reading: bool = False) -> str | None:
    """What to say when the dashboard listens beyond this machine with reading open to all, or None."""
    if host in LOCAL_HOSTS or not open_reading:
        return None
    return (f"warning: --host {host} with --open-reading serves the dashboard to the network without sign-in for "
            f"reading: anyone who can reach port {port} can read this store and play its recordings (writing still "
            "needs a signed-in person). Use it on a trusted network only.")


def serve(store=None, *, host="127.0.0.1", port=8050, cache_dir=None, meeting=False, refresh_s=2.0,
          threads: int = 8, open_reading: bool = False, idle_minutes: float = 30.0, trusted_header=None,
          trusted_proxies=(), secure_cookies: bool = False, files_dir=None, echo=print):
    """Build the dashboard on ``store`` and serve it with waitress (a production WSGI server, pure Python) until
    interrupted."""
    import waitress

    from dashboard import create_app  # the application layer is the one place that starts the dashboard

    if not 1 <= int(threads) <= 256:
        raise ParameterError(f"--threads must be from 1 to 256; got {threads!r}")
    if not idle_minutes > 0:
        raise ParameterError(f"--idle-minutes must be > 0; got {idle_minutes!r}")
    if trusted_header and not trusted_proxies:
        raise ParameterError("--trusted-header needs at least one --trusted-proxy: the header is believed only "
                             "from the site's reverse proxy")
    app = create_app(store, cache_dir=cache_dir, meeting=meeting, refresh_s=refresh_s, open_reading=open_reading,
                     idle_minutes=idle_minutes, trusted_header=trusted_header, trusted_proxies=tuple(trusted_proxies),
                     secure_cookies=secure_cookies, files_dir=files_dir)
    warning = network_warning(host, port, open_reading=open_reading)
    if warning:
        print(warning, file=sys.stderr, flush=True)
    echo(f"Harken dashboard on {app.harken.store.url}: http://{host}:{port}/  ({threads} threads; Ctrl+C stops it)")
    waitress.serve(app.server, host=host, port=int(port), threads=int(threads), ident="harken")
    return 0


def run(args) -> int:
    return serve(args.store, host=args.host, port=args.port, cache_dir=args.cache_dir, meeting=args.meeting,
                 refresh_s=args.refresh_s, threads=args.threads, open_reading=args.open_reading,
                 idle_minutes=args.idle_minutes, trusted_header=args.trusted_header,
                 trusted_proxies=tuple(args.trusted_proxy), secure_cookies=args.secure_cookies,
                 files_dir=args.files)
