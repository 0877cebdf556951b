"""``harken validate --truth FILE.csv``: how well the store's flags and signals match known conditions."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pandas as pd

from ..errors import AnalysisError
from ._common import add_store

__all__ = ["register", "run", "validation_report"]


def register(sub) -> None:
    p = sub.add_parser("validate", help="a validation report against known conditions (a truth table)")
    p.add_argument("--truth", required=True, metavar="FILE.csv",
                   help="columns file, condition, cause (recording, rig, lot, unit or empty for normal), "
                        "optionally reference (true for the reference lots' recordings)")
    add_store(p)
    p.add_argument("--json", action="store_true", help="print the report as one JSON object")
    p.add_argument("--out", default=None, metavar="REPORT.html", help="also write the report as an HTML page")
    p.set_defaults(func=run)


def _clean(x):
    if isinstance(x, float) and math.isnan(x):
        return None
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    if isinstance(x, list):
        return [_clean(v) for v in x]
    return x


def validation_report(store, truth_path) -> dict:
    """The report of analysis.validation for the store and the truth table at ``truth_path``."""
    from ..validation import validate

    path = Path(truth_path)
    try:
        truth = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (OSError, pd.errors.ParserError, UnicodeDecodeError, pd.errors.EmptyDataError) as exc:
        raise AnalysisError(f"{path}: cannot read the truth table: {exc}") from None
    models = store.models()
    refs = sorted({lot for lots in models.loc[models["status"] == "active", "reference_lots"]
                   for lot in (json.loads(lots) if isinstance(lots, str) else lots)}) if len(models) else []
    return validate(truth, store.export_actuations(), store.signals(), reference_lots=refs, where=str(path))


def run(args) -> int:
    from ..cautions import CAUTIONS
    from ..store import Store
    from ..validation import report_html, report_lines

    with Store.open(args.store, create=False) as store:
        report = validation_report(store, args.truth)
    if args.out:
        out = Path(args.out)
        out.write_text(report_html(report, cautions=CAUTIONS), encoding="utf-8")
    if args.json:
        print(json.dumps(_clean(report), indent=2, default=str))
    else:
        for line in report_lines(report):
            print(line)
        if args.out:
            print(f"report -> {args.out}")
    return 0
