"""``harken check integrity``: is everything the store keeps whole and unchanged? ``harken check summaries``: do
the per-day summaries the views read agree with the raw rows?"""

from __future__ import annotations

from ._common import add_files, add_store

__all__ = ["register", "integrity", "summaries"]


def register(sub) -> None:
    p = sub.add_parser("check", help="checks of a store")
    csub = p.add_subparsers(dest="check_what", required=True, metavar="WHAT")
    i = csub.add_parser("integrity", help="recompute the checksums and compare the archive with the store "
                                          "(exit 1 when anything differs)")
    add_store(i)
    add_files(i)
    i.add_argument("--no-files", action="store_true", help="skip the comparison of the archive and quarantine")
    i.add_argument("--contents", action="store_true",
                   help="also hash every archived recording again and compare it with its content hash (reads "
                        "the whole archive)")
    i.set_defaults(func=integrity)
    s = csub.add_parser("summaries", help="recompute the per-day summaries from the raw rows and compare them with "
                                          "the stored ones (exit 1 when anything differs)")
    add_store(s)
    s.add_argument("--show", type=int, default=20, help="differences printed (default 20)")
    s.add_argument("--repair", action="store_true", help="after reporting, write the recomputed summaries")
    s.set_defaults(func=summaries)


def integrity(args) -> int:
    from ..store import Store

    with Store.open(args.store, files_dir=args.files, create=False) as store:
        problems = store.check_integrity(files=not args.no_files, contents=args.contents)
        n = len(store.recordings())
    for line in problems:
        print(line)
    said = ["every row matches its checksum"] + ([] if args.no_files else ["every kept file is in place"]) + (
        ["every archived recording is unchanged"] if args.contents else [])
    what = said[0] if len(said) == 1 else ", ".join(said[:-1]) + " and " + said[-1]
    print(f"{store.url}: {n} recordings checked, {len(problems)} problem(s)" + ("" if problems else f": {what}"))
    return 1 if problems else 0


def summaries(args) -> int:
    from ..store import Store
    from ..store import summaries as sm

    with Store.open(args.store, create=False) as store:
        with store.read() as conn:
            problems = sm.differences(conn)
        for line in problems[:args.show]:
            print(line)
        if len(problems) > args.show:
            print(f"... and {len(problems) - args.show:,} more")
        if problems and args.repair:
            with store.write() as conn:
                written = sm.rebuild(conn)
            print("rewrote the summaries from the raw rows: " + ", ".join(f"{v:,} {k}" for k, v in written.items()))
        print(f"{store.url}: summaries checked against the raw rows, {len(problems)} difference(s)"
              + ("" if problems else ": they agree"))
    return 1 if problems and not args.repair else 0
