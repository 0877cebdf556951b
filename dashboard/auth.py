"""Sign-in: who uses the dashboard and what their role lets them do (Flask-Login sessions on the store's users).

``install(app, ctx, settings)`` adds the sign-in and sign-out pages and one gate in front of every request:
- without a signed-in person only /signin, /health and /assets/ answer, unless the server was started with
  ``open_reading`` (then reading is open; writing never is);
- a signed-in session ends after ``idle_minutes`` without a request (audited);
- a write callback (its output registered with ``require``) needs a signed-in person whose role includes the
  one registered, and its request must carry that person's own name in the page's ``app-user`` store: a request
  replayed with another session, with none, or with the name changed is refused (403) and audited. The person
  recorded on a write is always the signed-in one, never a typed name.
Five failed sign-ins of one user name within 15 minutes lock it for the rest of those 15 minutes (audited; the
failures are counted from the audit trail). With ``trusted_header`` the user name may come from a header that
the site's reverse proxy sets, accepted only from the addresses in ``trusted_proxies``; the user must still exist
in the store, active, with a role. The session cookie is HttpOnly and SameSite=Strict (and Secure with
``secure_cookies``, for a server behind HTTPS).
"""

from __future__ import annotations

import html as html_text
import secrets
import time
from dataclasses import dataclass, field
from urllib.parse import quote

import flask
from flask_login import LoginManager, UserMixin, current_user, login_user, logout_user

from analysis.store import users as store_users

__all__ = ["AuthSettings", "install", "require", "signed_in", "signed_in_name", "acting", "WRITE_ROLES",
           "LOCK_ATTEMPTS", "LOCK_WINDOW_S"]

LOCK_ATTEMPTS = 5
LOCK_WINDOW_S = 15 * 60
PUBLIC_PREFIXES = ("/assets/",)
PUBLIC_PATHS = ("/signin", "/health")

#: Write callbacks: a component id of the callback's output -> the role it needs (filled by the views).
WRITE_ROLES: dict[str, str] = {}


def require(output_id: str, role: str) -> None:
    """Register a write callback by (one of) its output component ids: its requests need ``role``."""
    if role not in store_users.ROLES:
        raise ValueError(f"unknown role {role!r}")
    WRITE_ROLES[output_id] = role


@dataclass(frozen=True)
class AuthSettings:
    """How the server lets people in (see the module docstring)."""

    open_reading: bool = False
    idle_minutes: float = 30.0
    trusted_header: str | None = None
    trusted_proxies: tuple[str, ...] = field(default_factory=tuple)
    secure_cookies: bool = False


class SignedIn(UserMixin):
    def __init__(self, user: store_users.User):
        self.user = user

    def get_id(self):
        return self.user.user_name

    @property
    def role(self) -> str:
        return self.user.role


def signed_in():
    """The signed-in store user of this request, or None."""
    try:
        return current_user.user if current_user.is_authenticated else None
    except (AttributeError, RuntimeError):  # no request, or no login manager on this app
        return None


def acting(role: str, person=None):
    """The signed-in store user when their role includes ``role`` (and, given ``person``, their name is it),
    else None: the one check a view or a write callback makes of who is acting."""
    user = signed_in()
    if user is None or not store_users.role_at_least(user.role, role):
        return None
    if person is not None and person != user.user_name:
        return None
    return user


def signed_in_name() -> str | None:
    u = signed_in()
    return u.user_name if u is not None else None


def _client(request) -> str:
    return str(request.remote_addr or "unknown")


def _audit(ctx, *, person, action, target="", detail=None):
    ctx.store.audit(person=person, action=action, target=target, detail=detail)


def _recent_failures(ctx, user_name: str) -> int:
    with ctx.store.read() as conn:
        return store_users.failed_sign_ins(conn, user_name, window_s=LOCK_WINDOW_S)


def _safe_next(value) -> str:
    v = str(value or "/")
    return v if v.startswith("/") and not v.startswith("//") and "\\" not in v else "/"


def _page(title: str, body: str, status: int = 200):
    doc = (f"<!doctype html><html lang='en'><head><meta charset='utf-8'><title>{html_text.escape(title)} - Harken"
           "</title><link rel='stylesheet' href='/assets/harken.css'></head><body class='signin-page'>"
           f"<main class='app-card signin-card'><h1>harken</h1>{body}</main></body></html>")
    return flask.Response(doc, status=status, mimetype="text/html")


def _form(next_url: str, token: str, message: str = "", user_name: str = "") -> str:
    msg = f"<p class='signin-error' id='signin-error'>{html_text.escape(message)}</p>" if message else ""
    return (f"<h2>Sign in</h2>{msg}<form method='post' action='/signin' id='signin-form'>"
            f"<input type='hidden' name='csrf' value='{html_text.escape(token)}'>"
            f"<input type='hidden' name='next' value='{html_text.escape(next_url)}'>"
            "<label>User name <input name='user_name' id='signin-user' autocomplete='username' "
            f"value='{html_text.escape(user_name)}' required></label>"
            "<label>Password <input name='password' id='signin-password' type='password' "
            "autocomplete='current-password' required></label>"
            "<button type='submit' id='signin-submit' class='button-primary'>Sign in</button></form>")


def _token() -> str:
    if "csrf" not in flask.session:
        flask.session["csrf"] = secrets.token_urlsafe(32)
    return flask.session["csrf"]


def _dash_write_role(body: dict) -> tuple[str | None, str]:
    out = str(body.get("output", ""))
    needed = [role for cid, role in WRITE_ROLES.items() if f"{cid}." in out]
    if not needed:
        return None, out
    return max(needed, key=store_users.ROLES.index), out


def _posted_user(body: dict):
    for s in body.get("state") or []:
        if isinstance(s, dict) and s.get("id") == "app-user" and s.get("property") == "data":
            return s.get("value")
    return None


def install(app, ctx, settings: AuthSettings) -> None:
    server = app.server
    server.config.update(SESSION_COOKIE_HTTPONLY=True, SESSION_COOKIE_SAMESITE="Strict",
                         SESSION_COOKIE_SECURE=bool(settings.secure_cookies), REMEMBER_COOKIE_DURATION=0)
    manager = LoginManager(server)
    ctx.extra["auth"] = settings

    @manager.user_loader
    def _load(name):
        with ctx.store.read() as conn:
            u = store_users.get_user(conn, str(name))
        return SignedIn(u) if u is not None and u.active else None

    idle_s = float(settings.idle_minutes) * 60.0
    # last_seen moves in steps of at most 30 s (a quarter of a short timeout), so that not every request
    # re-signs and re-sends the session cookie; the timeout is then exact to within that step
    step_s = min(30.0, idle_s / 4.0)

    @server.before_request
    def _gate():
        req = flask.request
        path = req.path
        now = time.time()
        if settings.trusted_header and _client(req) in settings.trusted_proxies:
            name = req.headers.get(settings.trusted_header)
            if name and signed_in_name() != name:
                who = _load(name)
                if who is None:
                    _audit(ctx, person=name, action="auth.refused", target=path,
                           detail={"why": "the trusted header names no active user", "from": _client(req)})
                    return flask.Response(f"User {name!r} has no active account in this store.\n", status=403,
                                          mimetype="text/plain")
                login_user(who)
                flask.session["last_seen"] = now
                _audit(ctx, person=name, action="auth.signin", detail={"by": "trusted header", "from": _client(req)})
        if current_user.is_authenticated:
            last = flask.session.get("last_seen")
            if last is not None and now - float(last) > idle_s:
                name = signed_in_name()
                logout_user()
                flask.session.clear()
                _audit(ctx, person=name, action="auth.idle_timeout", detail={"idle_minutes": settings.idle_minutes})
            elif last is None or now - float(last) >= step_s:
                flask.session["last_seen"] = now
        if path in PUBLIC_PATHS or path.startswith(PUBLIC_PREFIXES):
            return None
        user = signed_in()
        if path == "/_dash-update-component" and req.method == "POST":
            body = req.get_json(silent=True) or {}
            role, out = _dash_write_role(body)
            if role is not None:
                posted = _posted_user(body)
                why = None
                if user is None:
                    why = "not signed in"
                elif not store_users.role_at_least(user.role, role):
                    why = f"role {user.role} does not include {role}"
                elif posted != user.user_name and not req.args.get("cacheKey"):
                    # A background job's polls carry no state; Dash starts no job for a request with a cacheKey
                    # (it only reads the signed job's result), and the request that started the job was checked.
                    why = "the request does not carry the signed-in person's own name"
                if why:
                    _audit(ctx, person=user.user_name if user else "anonymous", action="auth.refused",
                           target=out[:200], detail={"why": why, "needs": role, "from": _client(req)})
                    return flask.Response(f"Refused: {why} (this needs the {role} role).\n", status=403,
                                          mimetype="text/plain")
        if user is None and not settings.open_reading:
            if path.startswith("/_dash") or path.startswith("/audio"):
                return flask.Response("Sign in first.\n", status=401, mimetype="text/plain")
            full = req.full_path if req.query_string else path
            return flask.redirect("/signin?next=" + quote(_safe_next(full), safe="/"))
        return None

    @server.route("/signin", methods=["GET", "POST"])
    def _signin():
        req = flask.request
        if req.method == "GET":
            return _page("Sign in", _form(_safe_next(req.args.get("next")), _token()))
        nxt = _safe_next(req.form.get("next"))
        if not secrets.compare_digest(str(req.form.get("csrf", "")), str(flask.session.get("csrf", "-"))):
            return _page("Sign in", _form(nxt, _token(), "The form had expired: please sign in again."), 400)
        name = str(req.form.get("user_name", "")).strip()[:64]
        password = str(req.form.get("password", ""))
        if _recent_failures(ctx, name) >= LOCK_ATTEMPTS:
            _audit(ctx, person=name or "anonymous", action="auth.locked_attempt", target=f"user {name}",
                   detail={"from": _client(req)})
            return _page("Sign in", _form(nxt, _token(), f"Too many failed sign-ins for {name}: try again in 15 "
                                                         "minutes, or ask an admin.", name), 429)
        with ctx.store.read() as conn:
            user = store_users.check_password(conn, name, password)
        if user is None:
            _audit(ctx, person=name or "anonymous", action="auth.failed", target=f"user {name}",
                   detail={"from": _client(req)})
            if _recent_failures(ctx, name) >= LOCK_ATTEMPTS:
                _audit(ctx, person=name or "anonymous", action="auth.locked", target=f"user {name}",
                       detail={"attempts": LOCK_ATTEMPTS, "window_minutes": LOCK_WINDOW_S // 60})
            return _page("Sign in", _form(nxt, _token(), "Unknown user name or wrong password.", name), 401)
        flask.session.clear()  # a new session for the signed-in person (no fixation)
        login_user(SignedIn(user))
        flask.session["last_seen"] = time.time()
        _token()
        _audit(ctx, person=user.user_name, action="auth.signin", detail={"from": _client(req)})
        return flask.redirect(nxt)

    @server.route("/signout", methods=["POST"])
    def _signout():
        req = flask.request
        if not secrets.compare_digest(str(req.form.get("csrf", "")), str(flask.session.get("csrf", "-"))):
            return flask.Response("The sign-out form had expired.\n", status=400, mimetype="text/plain")
        name = signed_in_name()
        logout_user()
        flask.session.clear()
        if name:
            _audit(ctx, person=name, action="auth.signout")
        return flask.redirect("/signin")


def csrf_token() -> str:
    """The session's form token (for the sign-out form the shell renders)."""
    return _token()
