"""``harken audit verify | head | export``: the hash-chained audit trail (analysis.store.audit)."""

from __future__ import annotations

from ..errors import AnalysisError
from ._common import add_store

__all__ = ["register"]


def register(sub) -> None:
    p = sub.add_parser("audit", help="the store's audit trail")
    au = p.add_subparsers(dest="audit_what", required=True, metavar="WHAT")
    v = au.add_parser("verify", help="walk the hash chain and report the first row that does not match (exit 1)")
    v.add_argument("--head", metavar="ID:SHA256",
                   help="a head recorded earlier (`harken audit head`), which the trail must still reach and match")
    v.set_defaults(func=_verify)
    h = au.add_parser("head", help="print the trail's head (ID:SHA256), to record outside the store")
    h.set_defaults(func=_head)
    e = au.add_parser("export", help="write the audit trail as CSV")
    e.add_argument("--out", required=True, help="CSV file to write")
    e.set_defaults(func=_export)
    for q in (v, h, e):
        add_store(q)


def _open(args):
    from ..store import Store

    return Store.open(args.store, create=False)


def _verify(args) -> int:
    from ..store import audit

    expected = None
    if args.head:
        try:
            expected = audit.parse_head(args.head)
        except ValueError as exc:
            raise AnalysisError(f"--head: {exc}") from None
    with _open(args) as store, store.read() as conn:
        n, problem = audit.verify(conn, expected_head=expected)
    if problem:
        print(f"{store.url}: {problem} ({n} rows read)")
        return 1
    print(f"{store.url}: the audit trail's {n} rows form an unbroken chain" + (" up to and past the head given"
                                                                               if expected else ""))
    return 0


def _head(args) -> int:
    from ..store import audit

    with _open(args) as store, store.read() as conn:
        h = audit.head(conn)
    print(f"{h[0]}:{h[1]}" if h else "0:" + audit.GENESIS)
    return 0


def _export(args) -> int:
    from ..store import audit

    with _open(args) as store, store.read() as conn:
        n = audit.export_csv(conn, args.out)
    print(f"{store.url}: {n} audit rows written to {args.out}")
    return 0
