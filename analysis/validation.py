"""A method owner's validation against known conditions: what was caught, at which level, and was the cause right.

Pure: the truth table (file, condition, cause, optionally reference), the store's per-actuation export and its
signals in; one dict out (``validate``), which `harken validate` prints as text or JSON and can write as HTML.

Counting rules:
- a condition's actuations are its non-reference actuations; ``flagged`` counts those flagged (a quality check
  or a model flag);
- its own level: a lot condition per lot (a lot-level signal on that lot), a unit condition per unit (a
  unit-level signal on that unit), a rig condition per (rig, lot) it touched (a cell signal on that lot and rig,
  or a rig-level signal on that rig whose time span covers the cell), a recording condition per recording (the
  actuation flagged);
- ``units``/``units_flagged`` and ``lots``/``lots_signalled`` are given for every condition;
- false alarms: flagged normal non-reference actuations, and normal non-reference units (all of whose
  actuations are normal) with a unit-level signal;
- triage: each flagged actuation and each signal whose true cause is known (the cause of the actuations behind
  it; the most common one when several) against its suggested cause; signals on normal data are false alarms,
  not triage errors, and are left out of the matrix.
"""

from __future__ import annotations

import math

import pandas as pd

from .errors import AnalysisError

__all__ = ["validate", "TRUTH_CAUSES", "report_lines", "report_html"]

TRUTH_CAUSES = ("recording", "rig", "lot", "unit", "")


def _truth(truth: pd.DataFrame, where: str) -> pd.DataFrame:
    missing = [c for c in ("file", "condition", "cause") if c not in truth]
    if missing:
        raise AnalysisError(f"{where}: the truth table needs columns file, condition, cause; missing "
                            f"{', '.join(missing)}")
    t = truth.copy()
    t["cause"] = t["cause"].fillna("").astype(str).str.strip().str.lower()
    bad = sorted(set(t["cause"]) - set(TRUTH_CAUSES))
    if bad:
        raise AnalysisError(f"{where}: cause must be one of recording, rig, lot, unit or empty; got {bad[:5]!r}")
    t["condition"] = t["condition"].fillna("").astype(str).str.strip()
    if "reference" in t:
        t["reference"] = t["reference"].astype(str).str.strip().str.lower().isin(["true", "1", "yes"])
    return t


def _majority(values) -> str:
    v = [x for x in values if x]
    return max(set(v), key=v.count) if v else ""


def validate(truth: pd.DataFrame, actuations: pd.DataFrame, signals: pd.DataFrame, *, reference_lots=(),
             where: str = "truth table") -> dict:
    """The validation report as a dict: conditions, false_alarms, triage, plus unmatched (truth files not in
    the store). actuations: the store's export (file, lot, rig, unit, flagged, cause, recorded_at_utc or
    recorded_at); signals: the store's active signals."""
    t = _truth(truth, where)
    a = actuations.copy()
    table = a.merge(t[[c for c in ("file", "condition", "cause", "reference") if c in t]].rename(
        columns={"cause": "true_cause"}), on="file", how="inner")
    unmatched = sorted(set(t["file"]) - set(table["file"]))
    if not len(table):
        raise AnalysisError(f"{where}: none of its {len(t)} files is in the store (the file column must name "
                            "recordings as the store keeps them, relative to the folder they were ingested from)")
    if "reference" not in table:
        table["reference"] = table["lot"].isin(set(reference_lots))
    table["flagged"] = table["flagged"].astype(bool)
    time_col = "recorded_at_utc" if "recorded_at_utc" in table else "recorded_at"
    table["_t"] = pd.to_datetime(table[time_col], utc=True, errors="coerce").dt.tz_localize(None)
    new = table[~table["reference"]]
    sig = signals.copy()
    for c in ("first", "last"):
        if c in sig:
            sig[c] = pd.to_datetime(sig[c], errors="coerce")
    unit_sig = set(zip(sig.loc[sig["level"] == "unit", "lot"], sig.loc[sig["level"] == "unit", "unit"]))
    lot_sig = set(sig.loc[sig["level"] == "lot", "lot"])
    cell_sig = set(zip(sig.loc[sig["level"] == "cell", "lot"], sig.loc[sig["level"] == "cell", "rig"]))
    rig_sig = sig[sig["level"] == "rig"]

    def rig_caught(lot, rig, times) -> bool:
        if (lot, rig) in cell_sig:
            return True
        for r in rig_sig[rig_sig["rig"] == rig].itertuples(index=False):
            lo, hi = r.first, r.last
            if pd.notna(lo) and pd.notna(hi) and (times.max() >= lo) and (times.min() <= hi):
                return True
        return False

    conditions: dict = {}
    for cond, g in new.groupby("condition", sort=True):
        if cond == "normal" or not cond:
            continue
        cause = _majority(list(g["true_cause"]))
        units = g[["lot", "unit"]].drop_duplicates()
        lots = sorted(set(g["lot"]))
        entry = {
            "cause": cause, "actuations": int(len(g)), "flagged": int(g["flagged"].sum()),
            "units": int(len(units)),
            "units_flagged": int(sum((lo, u) in unit_sig for lo, u in units.itertuples(index=False))),
            "lots": len(lots), "lots_signalled": int(sum(lo in lot_sig for lo in lots)),
        }
        if cause == "lot":
            level, total, caught = "lot", entry["lots"], entry["lots_signalled"]
        elif cause == "unit":
            level, total, caught = "unit", entry["units"], entry["units_flagged"]
        elif cause == "rig":
            cells = [(lot, rig, gg["_t"]) for (lot, rig), gg in g.groupby(["lot", "rig"], sort=False)]
            level, total = "rig and lot", len(cells)
            caught = int(sum(rig_caught(lot, rig, times) for lot, rig, times in cells))
        else:
            level, total, caught = "recording", entry["actuations"], entry["flagged"]
        entry.update(level=level, total=int(total), caught=int(caught),
                     caught_rate=(caught / total) if total else math.nan)
        conditions[cond] = entry

    normal = new[new["condition"] == "normal"]
    units_of = new.groupby(["lot", "unit"])["condition"].agg(lambda c: set(c))
    normal_units = [k for k, v in units_of.items() if v == {"normal"}]
    false_alarms = {
        "actuation_rate": float(normal["flagged"].mean()) if len(normal) else math.nan,
        "actuations": int(len(normal)), "actuations_flagged": int(normal["flagged"].sum()),
        "unit_rate": (sum(k in unit_sig for k in normal_units) / len(normal_units)) if normal_units else math.nan,
        "units": len(normal_units), "units_flagged": int(sum(k in unit_sig for k in normal_units)),
    }

    # Triage: flagged actuations and signals whose true cause is known.
    pairs = []  # (kind, true cause, suggested cause)
    fl = new[new["flagged"] & new["true_cause"].ne("")]
    for r in fl.itertuples(index=False):
        suggested = str(r.cause or "").split("; ")[0] or "none"
        pairs.append(("actuation", r.true_cause, suggested))
    by_unit = new.groupby(["lot", "unit"])["true_cause"].agg(_majority)
    by_lot_true = new.groupby("lot")["true_cause"].agg(lambda c: "lot" if "lot" in set(c) else _majority(c))
    by_cell = new.groupby(["lot", "rig"])["true_cause"].agg(_majority)
    for r in sig.itertuples(index=False):
        if r.level == "unit":
            true = by_unit.get((r.lot, r.unit), "")
        elif r.level == "lot":
            true = by_lot_true.get(r.lot, "")
        elif r.level == "cell":
            true = by_cell.get((r.lot, r.rig), "")
        elif r.level == "rig":
            span = new[(new["rig"] == r.rig)]
            if pd.notna(r.first) and pd.notna(r.last):
                span = span[(span["_t"] >= r.first) & (span["_t"] <= r.last)]
            true = "rig" if "rig" in set(span["true_cause"]) else _majority(list(span["true_cause"]))
        else:
            continue
        if true:
            pairs.append((r.level, true, r.cause))
    causes = ["recording", "rig", "lot", "unit"]
    matrix = {tc: {sc: 0 for sc in causes + ["none"]} for tc in causes}
    for _, tc, sc in pairs:
        matrix.setdefault(tc, {s: 0 for s in causes + ["none"]})
        matrix[tc][sc if sc in matrix[tc] else "none"] += 1
    right = sum(tc == sc for _, tc, sc in pairs)
    by_kind = {}
    for kind in ("actuation", "unit", "cell", "lot", "rig"):
        got = [(tc, sc) for k, tc, sc in pairs if k == kind]
        by_kind[kind] = {"right": sum(tc == sc for tc, sc in got), "total": len(got)}
    return {
        "conditions": conditions,
        "false_alarms": false_alarms,
        "triage": {"right": int(right), "total": len(pairs), "rate": right / len(pairs) if pairs else math.nan,
                   "matrix": matrix, "by_level": by_kind},
        "unmatched": unmatched,
    }


def _pct(x) -> str:
    return "n/a" if x is None or (isinstance(x, float) and math.isnan(x)) else f"{100 * x:.1f} %"


def report_lines(report: dict) -> list[str]:
    """The report as plain-text lines."""
    lines = ["caught at the condition's own level (and per actuation):"]
    for cond, e in report["conditions"].items():
        lines.append(f"  {cond:<16} {e['caught']:>4} of {e['total']:<4} {e['level']:<12} ({_pct(e['caught_rate'])}); "
                     f"actuations {e['flagged']} of {e['actuations']} flagged; units {e['units_flagged']} of "
                     f"{e['units']}; lots {e['lots_signalled']} of {e['lots']}")
    fa = report["false_alarms"]
    lines.append(f"false alarms on normal new data: actuations {fa['actuations_flagged']} of {fa['actuations']} "
                 f"({_pct(fa['actuation_rate'])}), units {fa['units_flagged']} of {fa['units']} "
                 f"({_pct(fa['unit_rate'])})")
    tr = report["triage"]
    lines.append(f"suggested cause right for {tr['right']} of {tr['total']} flagged actuations and signals "
                 f"({_pct(tr['rate'])}); by level: " + ", ".join(
                     f"{k} {v['right']}/{v['total']}" for k, v in tr["by_level"].items() if v["total"]))
    lines.append("  true cause -> suggested: " + "; ".join(
        f"{tc}: " + ", ".join(f"{sc} {n}" for sc, n in row.items() if n) for tc, row in tr["matrix"].items()
        if any(row.values())))
    if report.get("unmatched"):
        lines.append(f"  {len(report['unmatched'])} file(s) of the truth table are not in the store, e.g. "
                     f"{report['unmatched'][0]}")
    return lines


def report_html(report: dict, *, title: str = "Harken validation report", cautions=()) -> str:
    """A self-contained HTML page of the report (no scripts, no external resources)."""
    from html import escape

    rows = "".join(
        f"<tr><td>{escape(c)}</td><td>{escape(e['cause'])}</td><td>{escape(e['level'])}</td><td>{e['caught']}</td>"
        f"<td>{e['total']}</td><td>{_pct(e['caught_rate'])}</td><td>{e['flagged']} / {e['actuations']}</td>"
        f"<td>{e['units_flagged']} / {e['units']}</td><td>{e['lots_signalled']} / {e['lots']}</td></tr>"
        for c, e in report["conditions"].items())
    tr = report["triage"]
    causes = list(next(iter(tr["matrix"].values())).keys()) if tr["matrix"] else []
    mrows = "".join(f"<tr><th>{escape(tc)}</th>" + "".join(f"<td>{row.get(sc, 0)}</td>" for sc in causes) + "</tr>"
                    for tc, row in tr["matrix"].items())
    fa = report["false_alarms"]
    caution = "".join(f"<p class='caution'>{escape(c)}</p>" for c in cautions)
    return f"""<!doctype html><html lang="en"><head><meta charset="utf-8"><title>{escape(title)}</title>
<style>body{{font-family:sans-serif;margin:2em;max-width:70em}}table{{border-collapse:collapse;margin:1em 0}}
td,th{{border:1px solid #999;padding:.3em .6em;text-align:right}}th{{background:#eee}}.caution{{color:#555}}</style>
</head><body><h1>{escape(title)}</h1>
<h2>Caught at each condition's own level</h2><table><tr><th>condition</th><th>true cause</th><th>level</th>
<th>caught</th><th>of</th><th>rate</th><th>actuations flagged</th><th>units signalled</th><th>lots signalled</th>
</tr>{rows}</table>
<h2>False alarms on normal new data</h2><p>Actuations: {fa['actuations_flagged']} of {fa['actuations']}
({_pct(fa['actuation_rate'])}). Units: {fa['units_flagged']} of {fa['units']} ({_pct(fa['unit_rate'])}).</p>
<h2>Suggested cause against the true cause</h2><p>Right for {tr['right']} of {tr['total']}
({_pct(tr['rate'])}) flagged actuations and signals. Rows: true cause; columns: suggested cause.</p>
<table><tr><th></th>{''.join(f'<th>{escape(c)}</th>' for c in causes)}</tr>{mrows}</table>{caution}
</body></html>
"""
