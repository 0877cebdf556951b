"""``harken user add | set-role | set-password | disable | list``: the people who sign in, and their roles."""

from __future__ import annotations

from ._common import add_store, cli_person, read_password

__all__ = ["register"]


def register(sub) -> None:
    p = sub.add_parser("user", help="people who sign in to the dashboard, and their roles")
    us = p.add_subparsers(dest="user_what", required=True, metavar="WHAT")
    roles = "viewer, technician, method_owner or admin (each includes the ones before it)"
    a = us.add_parser("add", help="add a user (audited)")
    a.add_argument("name", help="user name: 2-64 characters of a-z, 0-9, '.', '_', '-'")
    a.add_argument("--role", required=True, help=roles)
    a.add_argument("--full-name", default="", help="the person's full name, shown beside what they did")
    _password_options(a)
    a.add_argument("--no-password", action="store_true",
                   help="no password: signs in only through a trusted header (--trusted-header of `harken serve`)")
    a.set_defaults(func=_add)
    r = us.add_parser("set-role", help="change a user's role (audited)")
    r.add_argument("name")
    r.add_argument("role", help=roles)
    r.set_defaults(func=_set_role)
    w = us.add_parser("set-password", help="set a user's password (audited)")
    w.add_argument("name")
    _password_options(w)
    w.set_defaults(func=_set_password)
    d = us.add_parser("disable", help="disable a user (audited; users are never deleted)")
    d.add_argument("name")
    d.set_defaults(func=_disable)
    li = us.add_parser("list", help="list the users")
    li.set_defaults(func=_list)
    for q in (a, r, w, d, li):
        add_store(q)


def _password_options(p) -> None:
    p.add_argument("--password-stdin", action="store_true",
                   help="read the password from the first line of standard input instead of asking twice")


def _open(args):
    from ..store import Store

    return Store.open(args.store, create=False)


def _add(args) -> int:
    from ..store.users import add_user

    password = None if args.no_password else read_password(args)
    with _open(args) as store, store.write() as conn:
        u = add_user(conn, args.name, role=args.role, full_name=args.full_name, password=password, by=cli_person())
    print(f"{store.url}: user {u.user_name} ({u.full_name}) added as {u.role}")
    return 0


def _set_role(args) -> int:
    from ..store.users import set_role

    with _open(args) as store, store.write() as conn:
        u = set_role(conn, args.name, args.role, by=cli_person())
    print(f"{store.url}: user {u.user_name} is now {u.role}")
    return 0


def _set_password(args) -> int:
    from ..store.users import set_password

    password = read_password(args)
    with _open(args) as store, store.write() as conn:
        set_password(conn, args.name, password, by=cli_person())
    print(f"{store.url}: password of {args.name} set")
    return 0


def _disable(args) -> int:
    from ..store.users import disable_user

    with _open(args) as store, store.write() as conn:
        u = disable_user(conn, args.name, by=cli_person())
    print(f"{store.url}: user {u.user_name} disabled (kept, so what they did stays attributable)")
    return 0


def _list(args) -> int:
    from ..store.users import list_users

    with _open(args) as store, store.read() as conn:
        users = list_users(conn)
    if not users:
        print(f"{store.url}: no users (add one with `harken user add NAME --role admin`)")
    for u in users:
        print(f"{u.user_name:<20} {u.role:<13} {u.state:<9} {u.full_name}")
    return 0
