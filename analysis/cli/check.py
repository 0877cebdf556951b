"""``harken check integrity``: is everything the store keeps whole and unchanged?"""

from __future__ import annotations

from ._common import add_files, add_store

__all__ = ["register", "integrity"]


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
