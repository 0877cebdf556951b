"""``harken export actuations|signals|quarantine``: tables of the store as CSV or parquet."""

from __future__ import annotations

from pathlib import Path

from ..errors import AnalysisError
from ._common import add_store

__all__ = ["register", "export", "write_table"]


def register(sub) -> None:
    p = sub.add_parser("export", help="export tables from the store")
    esub = p.add_subparsers(dest="export_what", required=True, metavar="WHAT")
    e = esub.add_parser("actuations", help="one row per actuation: identifiers, QC, timings, statistics, flags")
    add_store(e)
    e.add_argument("--format", choices=("csv", "parquet"), default="csv")
    e.add_argument("--out", required=True, metavar="FILE")
    e.set_defaults(func=export)
    s = esub.add_parser("signals", help="one row per signal (actuation, unit, cell, lot, rig) with its cause")
    add_store(s)
    s.add_argument("--format", choices=("csv", "parquet"), default="csv")
    s.add_argument("--out", required=True, metavar="FILE")
    s.add_argument("--all", action="store_true", help="also the signals no longer active")
    s.set_defaults(func=export)
    q = esub.add_parser("quarantine", help="quarantined files with their reasons")
    add_store(q)
    q.add_argument("--format", choices=("csv", "parquet"), default="csv")
    q.add_argument("--out", default=None, metavar="FILE", help="default: print a table")
    q.set_defaults(func=export)


def write_table(df, out: Path, fmt: str) -> None:
    """Write a DataFrame as CSV or parquet; parquet without pyarrow is a clear error naming the file."""
    if fmt == "parquet":
        try:
            df.to_parquet(out, index=False)
        except ImportError as exc:
            raise AnalysisError(f"{out}: parquet export needs pyarrow (pip install 'harken[parquet]'): {exc}") from None
    else:
        df.to_csv(out, index=False)


def export(args) -> int:
    from ..store import Store

    with Store.open(args.store, create=False) as store:
        if args.export_what == "actuations":
            df = store.export_actuations()
        elif args.export_what == "signals":
            df = store.signals(active_only=not args.all, reviews=True)
        else:
            df = store.quarantine()
    if args.out is None:
        print(df[["file", "reason"]].to_string(index=False) if len(df) else "no quarantined files")
        return 0
    out = Path(args.out)
    write_table(df, out, args.format)
    print(f"{len(df)} rows -> {out}")
    return 0
