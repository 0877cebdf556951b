"""People and roles: users with a unique name, full name, role and state, their Argon2id password hashes.

Roles include the ones before them (ROLES order): viewer reads; technician also records verdicts and notes;
method_owner also builds, approves and retires reference models and property calibrations; admin also manages
users. A user is never deleted, only disabled, so every audited act stays attributable. Every change is audited
in the caller's transaction. Passwords are hashed with Argon2id (argon2-cffi's defaults: m = 64 MiB, t = 3, p = 4,
RFC 9106's second recommended option, from memory) and never stored or logged in clear.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from argon2 import PasswordHasher
from argon2.exceptions import InvalidHashError, VerificationError, VerifyMismatchError
from sqlalchemy import select

from . import schema as db
from .audit import append as audit
from .errors import StoreError

__all__ = ["ROLES", "STATES", "User", "add_user", "set_role", "disable_user", "list_users", "get_user",
           "check_password", "role_at_least", "hash_password", "set_password", "failed_sign_ins",
           "MIN_PASSWORD_CHARS"]

ROLES = ("viewer", "technician", "method_owner", "admin")
STATES = ("active", "disabled")
MIN_PASSWORD_CHARS = 10
_NAME = re.compile(r"^[a-z0-9][a-z0-9._-]{1,63}$")
_HASHER = PasswordHasher()


@dataclass(frozen=True)
class User:
    """A user as the store keeps them (the password hash never leaves this module's functions)."""

    id: int
    user_name: str
    full_name: str
    role: str
    state: str
    created_at: object
    created_by: str

    @property
    def active(self) -> bool:
        return self.state == "active"


def role_at_least(role: str, needed: str) -> bool:
    """True when ``role`` includes ``needed`` (ROLES order)."""
    return role in ROLES and ROLES.index(role) >= ROLES.index(needed)


def hash_password(password: str) -> str:
    """An Argon2id hash of a password that is long enough (StoreError naming the rule otherwise)."""
    if not isinstance(password, str) or len(password) < MIN_PASSWORD_CHARS:
        raise StoreError(f"a password needs at least {MIN_PASSWORD_CHARS} characters")
    return _HASHER.hash(password)


def _check_role(role: str) -> str:
    if role not in ROLES:
        raise StoreError(f"role must be one of {', '.join(ROLES)}; got {role!r}")
    return role


def _row(conn, user_name: str):
    return conn.execute(select(db.users).where(db.users.c.user_name == user_name)).mappings().first()


def _user(r) -> User:
    return User(r["id"], r["user_name"], r["full_name"], r["role"], r["state"], r["created_at"], r["created_by"])


def get_user(conn, user_name: str) -> User | None:
    r = _row(conn, str(user_name))
    return _user(r) if r else None


def list_users(conn) -> list[User]:
    return [_user(r) for r in conn.execute(select(db.users).order_by(db.users.c.user_name)).mappings()]


def add_user(conn, user_name: str, *, role: str, full_name: str = "", password: str | None, by: str) -> User:
    """Add a user (audited as ``user.add`` by ``by``); password None: signs in only through a trusted header."""
    if not isinstance(user_name, str) or not _NAME.match(user_name):
        raise StoreError(f"a user name is 2-64 characters of a-z, 0-9, '.', '_' or '-', starting with a letter or "
                         f"digit; got {user_name!r}")
    _check_role(role)
    if _row(conn, user_name) is not None:
        raise StoreError(f"user {user_name!r} exists already (users are never deleted; `harken user set-role` or "
                         "a new name)")
    hashed = hash_password(password) if password is not None else None
    conn.execute(db.users.insert().values(user_name=user_name, full_name=full_name.strip() or user_name, role=role,
                                          state="active", password_hash=hashed, created_at=db.utc_now(),
                                          created_by=by))
    audit(conn, person=by, action="user.add", target=f"user {user_name}",
          detail={"role": role, "full_name": full_name.strip() or user_name, "password": hashed is not None})
    return get_user(conn, user_name)


def _must(conn, user_name: str):
    r = _row(conn, user_name)
    if r is None:
        raise StoreError(f"no user {user_name!r} (`harken user list` shows who there is)")
    return r


def set_role(conn, user_name: str, role: str, *, by: str) -> User:
    r = _must(conn, user_name)
    _check_role(role)
    conn.execute(db.users.update().where(db.users.c.id == r["id"]).values(role=role))
    audit(conn, person=by, action="user.set_role", target=f"user {user_name}", detail={"from": r["role"], "to": role})
    return get_user(conn, user_name)


def disable_user(conn, user_name: str, *, by: str) -> User:
    r = _must(conn, user_name)
    conn.execute(db.users.update().where(db.users.c.id == r["id"]).values(state="disabled"))
    audit(conn, person=by, action="user.disable", target=f"user {user_name}", detail={"was": r["state"]})
    return get_user(conn, user_name)


def set_password(conn, user_name: str, password: str, *, by: str) -> None:
    r = _must(conn, user_name)
    conn.execute(db.users.update().where(db.users.c.id == r["id"]).values(password_hash=hash_password(password)))
    audit(conn, person=by, action="user.set_password", target=f"user {user_name}")


def check_password(conn, user_name: str, password: str) -> User | None:
    """The active user when ``password`` is theirs, else None (unknown, disabled, no password, or wrong)."""
    r = _row(conn, str(user_name))
    if r is None or r["state"] != "active" or not r["password_hash"]:
        # hash anyway, so that an unknown name costs as long as a wrong password
        try:
            _HASHER.verify(_dummy(), str(password))
        except (VerificationError, InvalidHashError):
            pass
        return None
    try:
        _HASHER.verify(r["password_hash"], str(password))
    except (VerifyMismatchError, VerificationError, InvalidHashError):
        return None
    return _user(r)


_DUMMY: list[str] = []


def _dummy() -> str:
    if not _DUMMY:
        _DUMMY.append(_HASHER.hash("not a password of anyone"))
    return _DUMMY[0]


def failed_sign_ins(conn, user_name: str, *, window_s: float) -> int:
    """How many sign-ins of ``user_name`` failed in the last ``window_s`` seconds (counted in the audit trail)."""
    from datetime import timedelta

    from sqlalchemy import and_, func

    a = db.audit_log
    since = db.utc_now() - timedelta(seconds=float(window_s))
    return int(conn.execute(select(func.count()).select_from(a).where(and_(
        a.c.action == "auth.failed", a.c.target == f"user {user_name}", a.c.at >= since))).scalar() or 0)
