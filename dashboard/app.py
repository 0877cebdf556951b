"""The app factory: ``create_app(store_url, *, cache_dir=None, ...)`` builds one Dash app on one results store.

Nothing is built at import. The store is opened without creating anything; the dashboard only reads it, except
for building a reference model on the References view (the store's own audited write). Routing is ours (one
``dcc.Location`` and a router callback), so several apps can live in one process (the tests build many).
Every view keeps its selections in the address bar (``history.replaceState``, no re-render), so a copied link
opens the same view with the same selections.
"""

from __future__ import annotations

import os
import re
import secrets
from dataclasses import dataclass, field
from pathlib import Path

import diskcache
import flask
from dash import Dash, DiskcacheManager, Input, Output, dcc, html, no_update

from analysis.cautions import CAUTIONS
from analysis.store import Store

from . import audio as audio_route
from . import auth
from .safety import MAX_ID, guarded
from .urlstate import parse_query
from .views import VIEWS, view_for_path

__all__ = ["create_app", "AppContext"]

ASSETS = Path(__file__).resolve().parent.parent / "assets"

@dataclass
class AppContext:
    """What every view needs: the store, the caches and the app's settings."""

    store: Store
    cache_dir: Path
    drill_cache: diskcache.Cache
    refresh_s: float = 2.0
    meeting: bool = False
    extra: dict = field(default_factory=dict)


def _secret_key(cache_dir: Path, given: str | None) -> str:
    """A fixed key shared by every server process on the same cache folder (made once, kept in the folder)."""
    if given:
        return given
    if os.environ.get("HARKEN_SECRET_KEY"):
        return os.environ["HARKEN_SECRET_KEY"]
    path = cache_dir / "secret_key"
    if not path.exists():
        tmp = path.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(secrets.token_hex(32))
        try:
            os.link(tmp, path)  # atomic: the first process to arrive wins, the others read its key
        except FileExistsError:
            pass
        finally:
            tmp.unlink(missing_ok=True)
    return path.read_text().strip()


def create_app(store_url=None, *, cache_dir=None, meeting: bool = False, refresh_s: float = 2.0,
               secret_key: str | None = None, title: str = "Harken", open_reading: bool = False,
               idle_minutes: float = 30.0, trusted_header: str | None = None, trusted_proxies=(),
               secure_cookies: bool = False, files_dir=None) -> Dash:
    """A Dash app showing the results store at ``store_url`` (a SQLAlchemy URL or a SQLite file path).

    cache_dir: the folder for the background-job cache and the drill-down cache, shared by all server
    processes (default: ``<store>-dashboard-cache`` beside a SQLite store, else in the working folder).
    meeting: start in meeting mode (large, high-contrast). refresh_s: how often Today looks for new results (s).
    Sign-in (dashboard.auth): open_reading lets anyone read without signing in (writing always needs a
    signed-in person with the role); idle_minutes ends an idle session; trusted_header (with trusted_proxies,
    the addresses it is accepted from) takes the user name from a reverse proxy; secure_cookies for HTTPS.
    files_dir: the folder of the archive (the store's default: beside a SQLite store, else the working folder).
    """
    store = Store.open(store_url, files_dir=files_dir, create=False)
    cache_dir = Path(cache_dir) if cache_dir is not None else store.files_dir / f"{store.stem}-dashboard-cache"
    cache_dir.mkdir(parents=True, exist_ok=True)
    background = diskcache.Cache(str(cache_dir / "background"), size_limit=256 * 2**20)
    drill = diskcache.Cache(str(cache_dir / "drill"), size_limit=512 * 2**20)
    ctx = AppContext(store=store, cache_dir=cache_dir, drill_cache=drill, refresh_s=float(refresh_s),
                     meeting=bool(meeting), extra={"store_url": store_url})
    app = Dash(
        __name__, title=title, assets_folder=str(ASSETS), suppress_callback_exceptions=True,
        background_callback_manager=DiskcacheManager(background), health_endpoint="health",
        update_title=None,
    )
    app.server.secret_key = _secret_key(cache_dir, secret_key)
    app.server.config["HARKEN_CONTEXT"] = ctx
    auth.install(app, ctx, auth.AuthSettings(
        open_reading=bool(open_reading), idle_minutes=float(idle_minutes), trusted_header=trusted_header or None,
        trusted_proxies=tuple(trusted_proxies or ()), secure_cookies=bool(secure_cookies)))
    app.layout = lambda: _shell(ctx)  # built per page load: it shows who is signed in
    _register_shell(app, ctx)
    for view in VIEWS.values():
        view.register(app, ctx)
    audio_route.register(app.server, ctx)
    _protect(app, ctx)
    app.harken = ctx  # for tests and the bench: the views' context
    return app


def content_security_policy(app: Dash) -> str:
    """The Content-Security-Policy every response carries: scripts from this server and Dash's own inline
    scripts (by hash; they hold the clientside callbacks), 'unsafe-eval' because Plotly's WebGL traces compile
    their shaders' code at run time, inline styles because Plotly writes its own style elements; audio, images
    and fonts from this server (data: and blob: URLs for Plotly's icons and exports); no framing by any page."""
    scripts = " ".join(["'self'", "'unsafe-eval'", *app.csp_hashes()])
    return "; ".join([
        "default-src 'self'", f"script-src {scripts}", "style-src 'self' 'unsafe-inline'",
        "img-src 'self' data: blob:", "font-src 'self' data:", "media-src 'self' blob:", "connect-src 'self'",
        "worker-src 'self' blob:", "object-src 'none'", "base-uri 'self'", "form-action 'self'",
        "frame-ancestors 'none'",
    ])


_ACTUATION_PAGE = re.compile(r"^/actuation/(\d+)/?$")


def _protect(app: Dash, ctx: AppContext) -> None:
    """Security headers on every response, and a real 404 for an actuation page of an id the store has not."""
    server = app.server
    policy: list[str] = []

    @server.before_request
    def _unknown_actuation_page():
        m = _ACTUATION_PAGE.match(flask.request.path)
        if m is None:
            return None
        n = int(m.group(1))
        if n > MAX_ID or not _actuation_exists(ctx, n):
            return flask.Response(f"No actuation {n if n <= MAX_ID else '(id out of range)'} in this store.\n",
                                  status=404, mimetype="text/plain")
        return None

    @server.after_request
    def _headers(response):
        if not policy:  # hashes of the inline scripts, once every callback is registered
            policy.append(content_security_policy(app))
        h = response.headers
        h.setdefault("Content-Security-Policy", policy[0])
        h.setdefault("X-Content-Type-Options", "nosniff")
        h.setdefault("Referrer-Policy", "same-origin")
        h.setdefault("X-Frame-Options", "DENY")
        return response


def _actuation_exists(ctx: AppContext, actuation_id: int) -> bool:
    from analysis.store import queries

    with ctx.store.read() as conn:
        return queries.actuation_detail(conn, actuation_id) is not None


def _shell(ctx: AppContext):
    # a view with a ROLE is in the menu of those whose role includes it (its data is gated on the server)
    links = [dcc.Link(v.TITLE, href=v.PATH, id=f"app-nav-{name}", className="app-nav-link")
             for name, v in VIEWS.items()
             if v.IN_MENU and (getattr(v, "ROLE", None) is None or auth.acting(v.ROLE) is not None)]
    return html.Div(id="app-root", children=[
        dcc.Location(id="app-url", refresh=False),
        dcc.Store(id="app-meeting", data=ctx.meeting),
        html.Header(className="app-header", children=[
            html.Div(className="app-brand", children=[html.Span("harken", className="app-brand-name"),
                                                     html.Span("acoustic trend review", className="app-brand-tag")]),
            html.Nav(links, className="app-nav"),
            dcc.Checklist(id="app-meeting-switch", options=[{"label": " Meeting mode", "value": "on"}],
                          value=["on"] if ctx.meeting else [], className="app-meeting-switch"),
            _user_area(),
        ]),
        dcc.Store(id="app-user", data=auth.signed_in_name()),
        html.Main(id="app-page", className="app-page"),
        html.Footer(className="app-footer", children=[
            html.Span(CAUTIONS[0] + " " + CAUTIONS[1] + " "),
            dcc.Link("More in About.", href="/about"),
        ]),
    ])


ROLE_WORDS = {"viewer": "viewer", "technician": "technician", "method_owner": "method owner", "admin": "admin"}


def _user_area():
    """Who is signed in, with a sign-out button (a plain form POST with the session's token), or a sign-in link."""
    user = auth.signed_in()
    if user is None:
        return html.Div(className="app-user", children=[
            html.Span("Reading without signing in", className="muted"), " ",
            html.A("Sign in", href="/signin", id="app-signin")])
    return html.Div(className="app-user", children=[
        html.Span(f"{user.full_name} ({ROLE_WORDS.get(user.role, user.role)})", id="app-user-name"),
        html.Form(action="/signout", method="POST", className="app-signout", children=[
            dcc.Input(type="hidden", name="csrf", value=auth.csrf_token(), id="app-signout-token"),
            html.Button("Sign out", type="submit", id="app-signout", className="button")]),
    ])


def _register_shell(app: Dash, ctx: AppContext) -> None:
    @app.callback(Output("app-page", "children"), Input("app-url", "pathname"), Input("app-url", "search"))
    @guarded("children")
    def route(pathname, search):
        view, path_args = view_for_path(pathname or "/")
        if view is None:
            return html.Div(className="app-card", children=[
                html.H2("No such page"), html.P(f"Nothing lives at {pathname}."), dcc.Link("Go to Today", href="/")])
        return view.layout(ctx, parse_query(search), **path_args)

    @app.callback(Output("app-meeting-switch", "value"), Input("app-url", "search"))
    def meeting_from_url(search):
        q = parse_query(search)
        if "meeting" not in q:
            return no_update
        return ["on"] if q["meeting"] in ("1", "true", "on", "yes") else []

    app.clientside_callback(
        """
        function(value) {
            const on = Array.isArray(value) && value.indexOf('on') >= 0;
            document.body.classList.toggle('meeting', on);
            const p = new URLSearchParams(window.location.search);
            if (on) { p.set('meeting', '1'); } else { p.delete('meeting'); }
            const q = p.toString();
            const url = window.location.pathname + (q ? '?' + q : '');
            if (url !== window.location.pathname + window.location.search) {
                window.history.replaceState(window.history.state, '', url);
            }
            return on;
        }
        """,
        Output("app-meeting", "data"), Input("app-meeting-switch", "value"),
    )
