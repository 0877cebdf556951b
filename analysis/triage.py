"""Every suggested-cause rule (recording / rig / lot / unit), pure: tables of evidence in, causes out.

``decide`` (the second part of this module) makes the stored decisions at every level. The first part is the
simpler rule for a flagged actuation that has no stored decision yet (a store not refreshed since its upgrade);
the Today view falls back to it:
- a quality-check failure (the recording clipped, dropped out, lost a marker ...) -> the recording;
- a lot that signals on at least two rigs and on at least half of the rigs it ran on -> the lot;
- a rig that signals in at least two lots (not already explained by their lot) -> the rig;
- otherwise -> the unit (one device), for a single flagged actuation, or "look at its units" for a cell.
A (lot, rig) cell signals when its lot-by-lot chart point does, or (for single flagged actuations, where no chart
is at hand) when at least ``min_fraction`` of its actuations carry a model flag, so that a single false alarm
among many actuations does not make a cell signal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from analysis.monitor.levels import BLOCK_STATISTIC

__all__ = ["CAUSES", "NEXT_STEP", "lot_rigs_signalling", "rig_lots_signalling", "suggest_cause", "actuation_state",
           "LEVELS", "CHART_STATISTICS", "Decision", "decide", "cell_table", "evidence_words", "subject_words",
           "rig_backgrounds", "agreeing_signatures", "SIGNATURE_AGREEMENT"]

CAUSES = ("recording", "rig", "lot", "unit")

#: What to do next for each suggested cause.
NEXT_STEP = {
    "recording": "check the microphone, gain and cabling on the rig, then re-record",
    "rig": "look at the rig (drive, fixture, microphone position) before the next lot",
    "lot": "compare the lot with its neighbours on the Lots view and tell the method owner",
    "unit": "listen to the actuation against the reference and set the unit aside for inspection",
}


def lot_rigs_signalling(cells: pd.DataFrame, lot: str) -> list[str] | None:
    """The rigs on which ``lot`` signals (cells: lot, rig, signal), when that makes the lot the suggested
    cause; else None."""
    on_lot = cells[cells["lot"] == lot]
    rigs = sorted(on_lot.loc[on_lot["signal"].astype(bool), "rig"])
    if len(rigs) >= 2 and len(rigs) >= math.ceil(on_lot["rig"].nunique() / 2):
        return rigs
    return None


def rig_lots_signalling(cells: pd.DataFrame, rig: str) -> list[str] | None:
    """The lots in which ``rig`` signals (cells: lot, rig, signal, in time order), when that makes the rig the
    suggested cause; else None."""
    on_rig = cells[cells["rig"] == rig]
    lots = list(dict.fromkeys(on_rig.loc[on_rig["signal"].astype(bool), "lot"]))
    return lots if len(lots) >= 2 else None


def _signals(evidence: pd.DataFrame, min_fraction: float) -> pd.DataFrame:
    e = evidence.copy()
    frac = e["flagged"] / e["actuations"].where(e["actuations"] > 0)
    e["signal"] = (e["flagged"] > 0) & (frac >= min_fraction)
    return e


def suggest_cause(statistics, *, lot: str, rig: str, evidence: pd.DataFrame,
                  min_fraction: float = 0.2) -> tuple[str, str]:
    """(cause, because) for one flagged actuation. statistics: the statistics of its flags ("qc:clipping",
    "spe", ...); evidence: per (lot, rig) rows with actuations and flagged (model flags only)."""
    qc = sorted({s[3:] for s in statistics if s.startswith("qc:")})
    if qc:
        return "recording", f"the recording failed its quality check(s): {', '.join(qc)}"
    e = _signals(evidence, min_fraction) if len(evidence) else pd.DataFrame(columns=["lot", "rig", "signal"])
    lot_rigs = lot_rigs_signalling(e, lot)
    if lot_rigs:
        return "lot", (f"lot {lot} flags on {len(lot_rigs)} of {e.loc[e['lot'] == lot, 'rig'].nunique()} rigs "
                       f"({', '.join(lot_rigs)})")
    rig_lots = rig_lots_signalling(e, rig)
    if rig_lots:
        rig_lots = sorted(rig_lots)
        return "rig", (f"rig {rig} flags in {len(rig_lots)} of its {e.loc[e['rig'] == rig, 'lot'].nunique()} recent "
                       f"lots ({', '.join(rig_lots)})")
    return "unit", f"only this unit's actuations flag (lot {lot} does not flag across rigs, rig {rig} not across lots)"


def actuation_state(*, passed_qc: bool, n_model_flags: int, n_qc_flags: int) -> str:
    """The state of an analysed actuation: "quality check failed", "flagged" or "analysed"."""
    if not passed_qc or n_qc_flags:
        return "quality check failed"
    if n_model_flags:
        return "flagged"
    return "analysed"


# ==================================================================================================================
# Decisions at every level (unit, cell, lot, rig, actuation) and their suggested causes.
#
# Input: per-unit summaries of each per-actuation statistic (on its natural log), the unit limits of each event's
# model, and the flagged actuations. Output: Decision rows, each with its evidence as data; `evidence_words` turns
# evidence into the sentence the dashboard and the export show. The rules:
# - unit: a unit's mean beyond its MeanLimits UCL for its number of actuations (analysis.monitor.levels);
# - cell (lot, rig) and lot: the lot-by-lot chart's points, limits and run rules (analysis.monitor.lot_chart),
#   per rig and pooled over rigs, of the cell means of CHART_STATISTICS;
# - the causes of signalling cells come from a robust two-way decomposition of the lot x rig table of cell
#   departures (in chart sigmas; Tukey's median polish): a lot whose cells depart together on several rigs, with
#   the same signature (which bands carry the departure, compared by cosine similarity) -> the lot; a rig whose
#   cells depart beyond what their lots explain in two or more lots, or whose own sequence of lots breaks a run
#   rule -> the rig; a cell neither explains -> its units when the departure is
#   concentrated in units that signal on their own, else the rig during that lot;
# - a unit signal takes the cause of its lot or rig when that explains it, else the unit;
# - a flagged actuation: a quality-check failure -> the recording; else the cause of its unit when the unit
#   signals, else of its cell, else the unit.
# ==================================================================================================================

LEVELS = ("actuation", "unit", "cell", "lot", "rig")
#: Statistics charted lot by lot (cells, lots, rigs): the event residual, the statistic of the Lots view's chart.
#: Its reference points are nearly as spread as new lots' (the residual of a few components is not fitted away);
#: score-based statistics (trajectory distance, T²) sit lower on the reference lots the model was fitted to, so
#: their lot charts would signal on every new lot: they are judged at the unit level, whose limits come from
#: held-out values.
CHART_STATISTICS = ("event_spe_ratio",)
#: Departure (in chart sigmas) a cell needs to count as departing with its lot, or beyond its lot (rig).
DEPART_SIGMAS = 2.0
RESIDUAL_SIGMAS = 3.0


@dataclass(frozen=True)
class Decision:
    """One raised signal: level (LEVELS), event, statistic, value and limit (in the statistic's own units, e.g.
    x reference median), rule (what fired: "beyond", run-rule ids, "across rigs", "across lots", "quality check"),
    where it is (site, rig, lot, unit, actuation_id; None where it does not apply), the suggested cause, the
    evidence as data, and the recording-time span (first, last) of the actuations behind it."""

    level: str
    event: str | None
    statistic: str
    value: float | None
    limit: float | None
    rule: str
    site: str | None
    rig: str | None
    lot: str | None
    unit: str | None
    actuation_id: int | None
    cause: str
    evidence: dict
    first: object = None
    last: object = None

    @property
    def key(self) -> str:
        """The signal's identity across refreshes: what it is about, not what it measured."""
        parts = (self.level, self.event or "", self.lot or "", self.rig or "", self.unit or "",
                 "" if self.actuation_id is None else str(int(self.actuation_id)))
        return "|".join(parts)


def _finite(x) -> float | None:
    try:
        x = float(x)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def cell_table(units: pd.DataFrame) -> pd.DataFrame:
    """Per (event, statistic, lot, rig): n, mean (of the log statistic), site, first, last, reference, from
    per-unit rows (event, statistic, lot, rig, site, unit, n, mean, first, last, reference)."""
    u = units[units["n"] > 0].copy()
    u["s1"] = u["n"] * u["mean"]
    keys = ["event", "statistic", "lot", "rig"]
    out = (u.groupby(keys, sort=False)
           .agg(n=("n", "sum"), s1=("s1", "sum"), site=("site", "first"), first=("first", "min"),
                last=("last", "max"), reference=("reference", "all"))
           .reset_index())
    out["mean"] = out["s1"] / out["n"]
    return out.drop(columns="s1")


def _chart(points: pd.DataFrame, reference_lots, rules: str):
    from analysis.monitor import lot_chart

    p = points.assign(value=np.exp(points["mean"].astype(float)))
    return lot_chart(p, reference_lots=reference_lots, log=True, rules=rules)


def _polish(z: pd.DataFrame):
    """Median polish of the lot x rig table of cell departures: (lot effects, rig effects, residual table)."""
    from analysis.monitor.polish import median_polish

    table = z.pivot_table(index="lot", columns="rig", values="z", aggfunc="first")
    mp = median_polish(table.to_numpy(dtype=float))
    lot_eff = pd.Series(np.asarray(mp.row_effects, dtype=float) + 0.0, index=table.index)
    rig_eff = pd.Series(np.asarray(mp.col_effects, dtype=float), index=table.columns)
    resid = pd.DataFrame(np.asarray(mp.residuals, dtype=float), index=table.index, columns=table.columns)
    return float(mp.overall), lot_eff, rig_eff, resid


#: Run rules that look at a sequence of points (rule 1, a single point beyond 3σ, is not a change over time).
SEQUENCE_RULES = ("we2", "we3", "we4") + tuple(f"nelson{i}" for i in range(2, 9))


#: Cosine similarity a departing cell's signature (its mean residual per band) needs with the mean signature of the
#: lot's other departing cells to count as the same departure (our choice: unrelated departures in 20-odd bands
#: give about 0 ± 0.2; one change of the lot seen on several rigs, 0.8 or more; no source).
SIGNATURE_AGREEMENT = 0.5


def agreeing_signatures(signatures: dict) -> tuple[list, dict]:
    """(keys that agree, {key: cosine}) for {key: signature (n_bands,) or None}: each signature against the mean
    of the others' unit vectors. Keys without a signature are kept (nothing speaks against them); with fewer
    than two signatures nothing is compared and every key is kept."""
    have = {k: np.asarray(v, dtype=float) for k, v in signatures.items()
            if v is not None and np.all(np.isfinite(v)) and np.linalg.norm(v) > 0}
    if len(have) < 2:
        return list(signatures), {}
    unit = {k: v / np.linalg.norm(v) for k, v in have.items()}
    cos = {}
    for k, v in unit.items():
        rest = np.mean([w for j, w in unit.items() if j != k], axis=0)
        norm = float(np.linalg.norm(rest))
        cos[k] = float(v @ rest / norm) if norm > 0 else 0.0
    keep = [k for k in signatures if k not in cos or cos[k] >= SIGNATURE_AGREEMENT]
    return keep, cos


def _cell_causes(chart, units_here: pd.DataFrame, unit_signal: dict, *, reference_lots,
                 signature_of=None) -> dict:
    """Cause and evidence of every non-reference cell of one (event, statistic) chart, keyed (lot, rig), with the
    lots and rigs found to be causes."""
    pts = chart.points
    sigma, centre = chart.sigma, chart.centre
    if not (math.isfinite(sigma) and sigma > 0):
        return {}
    z = pts.assign(z=(pts["y"].astype(float) - centre) / sigma)
    overall, lot_eff, rig_eff, resid = _polish(z[np.isfinite(z["z"])])
    new = z[~z["lot"].isin(set(reference_lots))]
    # A cell whose departure is carried by units that signal on their own is about those units, not its rig.
    by_units: dict = {}
    groups = {k: g for k, g in units_here.groupby(["lot", "rig"], sort=False)}
    empty = units_here.iloc[0:0]
    for r in new.itertuples(index=False):
        here = groups.get((r.lot, r.rig), empty)
        hot = [u for u in here["unit"] if unit_signal.get((r.lot, u))]
        # Concentrated: a minority of the cell's units (one of two, up to a third of many) carries it.
        if not hot or len(hot) > max(1, len(here) // 3):
            continue
        rest = here[~here["unit"].isin(hot)]
        rest_n = float(rest["n"].sum()) if len(rest) else 0.0
        rest_y = float((rest["n"] * rest["mean"]).sum() / rest_n) if rest_n else math.nan
        if not math.isfinite(rest_y) or (rest_y - centre) / sigma <= DEPART_SIGMAS:
            by_units[(r.lot, r.rig)] = {"units_signalling": hot, "units": int(len(here))}
    lot_cause: dict[str, dict] = {}
    for lot, g in new.groupby("lot", sort=False):
        m = int(g["rig"].nunique())
        # a cell carried by one of its units is that unit's, not evidence for its lot
        departing = sorted(rg for rg, zz in zip(g["rig"], g["z"]) if zz > DEPART_SIGMAS and (lot, rg) not in by_units)
        effect = float(lot_eff.get(lot, 0.0)) + overall
        agreement: dict = {}
        if signature_of is not None and len(departing) >= 2:
            # a lot cause needs the same departure on several rigs: which bands carry it must agree
            departing, agreement = agreeing_signatures({rg: signature_of(lot, rg) for rg in departing})
        if m >= 2 and len(departing) >= max(2, math.ceil(m / 2)) and effect > DEPART_SIGMAS:
            lot_cause[lot] = {"rigs_departing": departing, "rigs": m, "lot_effect_sd": round(effect, 2)}
            if agreement:
                lot_cause[lot]["signature_agreement"] = {rg: round(c, 2) for rg, c in agreement.items()}
    for key in [k for k in by_units if k[0] in lot_cause]:
        del by_units[key]  # within a lot that departs as a whole, its units' signals are the lot's
    rig_cause: dict[str, dict] = {}
    for rig, g in new.groupby("rig", sort=False):
        g = g.sort_values("first")
        # single-unit cells stay evidence for their rig: one unit cannot tell the unit from the rig
        free = g[[lot not in lot_cause and ((lot, rig) not in by_units or by_units[(lot, rig)]["units"] < 2)
                  for lot in g["lot"]]]
        beyond_lot = [lot for lot in free["lot"] if _finite(resid.at[lot, rig]) is not None
                      and resid.at[lot, rig] > RESIDUAL_SIGMAS]
        ruled = [(lot, r) for lot, r in zip(free["lot"], free["rules"])
                 if any(x in SEQUENCE_RULES for x in str(r).split(",") if x)]
        effect = float(rig_eff.get(rig, 0.0))
        sustained = float(free["z"].median()) if len(free) else 0.0
        # Beyond what their lots explain in two lots; or a change over time (sequence rules in two of its lots)
        # that has moved the rig's typical cell by a chart SD; or a rig offset on most of its lots.
        if len(beyond_lot) >= 2 or (len(ruled) >= 2 and sustained > 1.0) or effect > DEPART_SIGMAS:
            rig_cause[rig] = {"lots_departing": beyond_lot, "run_rules": [f"{lot}: {r}" for lot, r in ruled],
                              "rig_effect_sd": round(effect, 2), "lots": int(g["lot"].nunique())}
    n_units = units_here.groupby(["lot", "rig"])["unit"].nunique()
    out: dict = {}
    for r in new.itertuples(index=False):
        ev = {"z": round(float(r.z), 2), "lot_effect_sd": round(float(lot_eff.get(r.lot, 0.0)) + overall, 2),
              "rig_effect_sd": round(float(rig_eff.get(r.rig, 0.0)), 2)}
        if r.lot in lot_cause:
            out[(r.lot, r.rig)] = ("lot", {**ev, **lot_cause[r.lot]})
        elif (r.lot, r.rig) in by_units and by_units[(r.lot, r.rig)]["units"] >= 2:
            out[(r.lot, r.rig)] = ("unit", {**ev, **by_units[(r.lot, r.rig)]})
        elif r.rig in rig_cause:
            out[(r.lot, r.rig)] = ("rig", {**ev, **rig_cause[r.rig]})
        elif int(n_units.get((r.lot, r.rig), 0)) <= 1:
            # one unit in the cell and its rig is no cause: the unit is the likelier (a rig fault lasts)
            out[(r.lot, r.rig)] = ("unit", {**ev, "units_signalling": by_units.get((r.lot, r.rig), {}).get(
                "units_signalling", []), "units": int(n_units.get((r.lot, r.rig), 0))})
        else:
            out[(r.lot, r.rig)] = ("rig", {**ev, "units_signalling": [], "only_this_lot": True})
    return {"cells": out, "lots": lot_cause, "rigs": rig_cause}


#: Quantiles of a rig's reference background distances that a recording (per recording) or a lot on the rig (the
#: median of its recordings) must pass to depart (common practice for empirical limits, no source).
BACKGROUND_RECORDING_Q = 0.99
BACKGROUND_CELL_Q = 0.95
#: A rig with fewer recordings in the reference lots takes its first recordings as its reference period.
BACKGROUND_MIN_REFERENCE = 10


def rig_backgrounds(bg: pd.DataFrame, *, reference_lots) -> tuple[pd.DataFrame, set]:
    """The rig fingerprint, compared with each rig's own reference period (analysis.signal.background).

    bg: one row per actuation (actuation_id, rig, site, lot, recorded_at, levels: (n_bands,) dB). Returns (cells:
    per (lot, rig) of non-reference lots: n, median distance, limit, departs, first, last, reference_from; the ids
    of single recordings whose background departs)."""
    from analysis.signal.background import background_distance

    cols = ["lot", "rig", "site", "n", "median", "limit", "departs", "first", "last", "reference_from"]
    if bg is None or not len(bg):
        return pd.DataFrame(columns=cols), set()
    refs = set(reference_lots)
    rows, odd = [], set()
    for rig, g in bg.groupby("rig", sort=False):
        g = g.sort_values("recorded_at")
        shapes = {np.shape(v) for v in g["levels"]}
        if len(shapes) != 1:  # recordings at other sample rates give other bands: compare the common shape only
            common = max(shapes, key=lambda s_: sum(np.shape(v) == s_ for v in g["levels"]))
            g = g[[np.shape(v) == common for v in g["levels"]]]
        ref = g[g["lot"].isin(refs)]
        where = "reference lots"
        if len(ref) < BACKGROUND_MIN_REFERENCE:  # a rig added after the reference: its own first recordings
            ref, where = g.head(max(BACKGROUND_MIN_REFERENCE, 20)), "first recordings"
        if len(ref) < BACKGROUND_MIN_REFERENCE:
            continue
        ref_levels = np.vstack(ref["levels"].to_list())
        # Each reference lot against the others (when there are several), so that the limits carry the rig's
        # own lot-to-lot (day-to-day) variation, as a new lot's comparison does.
        lots_ref = ref["lot"].to_numpy()
        held = [lot for lot in dict.fromkeys(lots_ref) if (lots_ref == lot).sum() >= 3 and (lots_ref != lot).sum() >= 3]
        if len(held) >= 2:
            d_ref = np.concatenate([background_distance(ref_levels[lots_ref == lot], ref_levels[lots_ref != lot])
                                    for lot in held])
            where += " (each against the others)"
        else:
            d_ref = background_distance(ref_levels, ref_levels)
        lim_rec = float(np.quantile(d_ref, BACKGROUND_RECORDING_Q))
        lim_cell = float(np.quantile(d_ref, BACKGROUND_CELL_Q))
        new = g[~g["lot"].isin(refs) & ~g["actuation_id"].isin(set(ref["actuation_id"]))]
        if not len(new):
            continue
        d = background_distance(np.vstack(new["levels"].to_list()), ref_levels)
        new = new.assign(distance=d)
        odd |= set(new.loc[new["distance"] > lim_rec, "actuation_id"].astype(int))
        for lot, c in new.groupby("lot", sort=False):
            med = float(c["distance"].median())
            rows.append(dict(lot=lot, rig=rig, site=c["site"].iloc[0], n=len(c), median=med, limit=lim_cell,
                             departs=med > lim_cell, first=c["recorded_at"].min(), last=c["recorded_at"].max(),
                             reference_from=where))
    return pd.DataFrame(rows, columns=cols), odd


def decide(units: pd.DataFrame, limits: dict, flagged: pd.DataFrame, *, reference_lots: dict,
           rules: str = "we", background: pd.DataFrame | None = None, signature_of=None) -> list[Decision]:
    """Every signal at every level, with its suggested cause (the rules at the head of this section).

    units: per (event, statistic, lot, rig, unit) rows with site, n (actuations that passed QC with a value),
    mean (of the statistic's natural log), first, last (recording times). limits: {event: {statistic:
    MeanLimits}}. flagged: one row per flagged actuation and event (actuation_id, event or None, statistics
    (list of flag statistics, "qc:<check>" for quality checks), value, limit (of the strongest), site, rig, lot,
    unit, recorded_at). reference_lots: {event: lots of its active model}. background: per-actuation background
    levels (rig_backgrounds' input), or None. signature_of: (event, lot, rig) -> the cell's mean residual per
    band (n_bands,) or None; called only for the cells of a lot that departs on several rigs (None: signatures
    are not compared).
    """
    all_refs = sorted({lot for v in reference_lots.values() for lot in v})
    bg_cells, bg_odd = rig_backgrounds(background, reference_lots=all_refs)
    bg_departs = {(r.lot, r.rig) for r in bg_cells.itertuples(index=False) if r.departs}
    out: list[Decision] = []
    u = units.copy()
    if len(u):
        u["reference"] = [lot in set(reference_lots.get(e, ())) for e, lot in zip(u["event"], u["lot"])]
    unit_cause: dict = {}  # (event, lot, unit) -> (cause, evidence) of a signalling unit
    cell_cause: dict = {}  # (event, lot, rig) -> cause
    per_unit: dict = {}  # (event, lot, unit) -> strongest (z, row, limit)
    for (event, stat), g in (u.groupby(["event", "statistic"], sort=False) if len(u) else []):
        lim = (limits.get(event) or {}).get(stat)
        if lim is None:
            continue
        n = g["n"].to_numpy(dtype=float)
        ucl = np.asarray(lim.ucl(n), dtype=float)
        zs = np.asarray(lim.standardised(g["mean"].to_numpy(dtype=float), n), dtype=float)
        for row, lim_y, z in zip(g.itertuples(index=False), ucl, zs):
            if row.reference or not (np.isfinite(z) and row.mean > lim_y):
                continue
            k = (event, row.lot, row.unit)
            if k not in per_unit or z > per_unit[k][0]:
                per_unit[k] = (float(z), row, float(lim_y), stat)
    unit_signal = {(e, lot, un): True for (e, lot, un) in per_unit}

    for event in dict.fromkeys(u["event"]) if len(u) else []:
        refs = reference_lots.get(event, ())
        cells = cell_table(u[u["event"] == event])
        best_cell: dict = {}
        found_lots: dict = {}
        found_rigs: dict = {}
        for stat in CHART_STATISTICS:
            pts = cells[cells["statistic"] == stat]
            if not len(pts):
                continue
            chart = _chart(pts, refs, rules)
            here = u[(u["event"] == event) & (u["statistic"] == stat)]
            sig = {(lot, un): True for (e, lot, un) in unit_signal if e == event}
            reader = None if signature_of is None else (lambda lot, rig, _e=event: signature_of(_e, lot, rig))
            causes = _cell_causes(chart, here, sig, reference_lots=refs, signature_of=reader)
            if not causes:
                continue
            for lot, ev in causes["lots"].items():
                found_lots.setdefault(lot, (stat, ev))
            for rig, ev in causes["rigs"].items():
                found_rigs.setdefault(rig, (stat, ev))
            p = chart.points
            for r in p[p["signal"] & ~p["reference"]].itertuples(index=False):
                z = (float(r.y) - chart.centre) / chart.sigma
                if (r.lot, r.rig) not in best_cell or z > best_cell[(r.lot, r.rig)][0]:
                    cause, ev = causes["cells"].get((r.lot, r.rig), ("unit", {}))
                    best_cell[(r.lot, r.rig)] = (z, stat, r, chart, cause, ev)
        for (lot, rig), (_z, stat, r, chart, cause, ev) in best_cell.items():
            cell_cause[(event, lot, rig)] = cause
            out.append(Decision(
                "cell", event, stat, _finite(math.exp(r.y)), _finite(chart.to_display(chart.ucl)),
                "beyond" if r.beyond else r.rules, r.site, rig, lot, None, None, cause, ev, r.first, r.last))
        for lot, (stat, ev) in found_lots.items():
            cells_of = cells[(cells["lot"] == lot) & (cells["statistic"] == stat)]
            n = float(cells_of["n"].sum())
            y = float((cells_of["n"] * cells_of["mean"]).sum() / n) if n else math.nan
            out.append(Decision(
                "lot", event, stat, _finite(math.exp(y)) if math.isfinite(y) else None, None, "across rigs", None,
                None, lot, None, None, "lot", ev, cells_of["first"].min() if len(cells_of) else None,
                cells_of["last"].max() if len(cells_of) else None))
        for rig, (stat, ev) in found_rigs.items():
            cells_of = cells[(cells["rig"] == rig) & (cells["statistic"] == stat)]
            site = cells_of["site"].iloc[0] if len(cells_of) else None
            rule = "across lots" if ev.get("lots_departing") else "run rule"
            lots_hit = ev.get("lots_departing") or [s.split(":")[0] for s in ev.get("run_rules", [])]
            hit = cells_of[cells_of["lot"].isin(lots_hit)]
            out.append(Decision(
                "rig", event, stat, None, None, rule, site, rig, None, None, None, "rig", ev,
                hit["first"].min() if len(hit) else None, hit["last"].max() if len(hit) else None))
    # Across events: a lot or rig found to be a cause in one event explains its cells in the others (a lot's
    # change may show most in one event); a cell carried by one of several units stays that unit's.
    lots_found = {d.lot: d.event for d in out if d.level == "lot" and d.cause == "lot"}
    rigs_found = {d.rig: (d.event, d.first) for d in out if d.level == "rig"}
    for i, d in enumerate(out):
        if d.level != "cell" or d.cause == "lot":
            continue
        concentrated = d.cause == "unit" and (d.evidence.get("units") or 0) >= 2
        if d.lot in lots_found:
            out[i] = replace(d, cause="lot", evidence={**d.evidence, "lot_departs_in": lots_found[d.lot]})
        elif d.rig in rigs_found and not concentrated and d.cause != "rig":
            out[i] = replace(d, cause="rig", evidence={**d.evidence, "rig_departs_in": rigs_found[d.rig][0]})
        cell_cause[(d.event, d.lot, d.rig)] = out[i].cause
    # The rig's own background: a lot on a rig whose quiet stretch departs from the rig's reference period is
    # evidence for the rig, whatever the events show.
    for rig, g in (bg_cells[bg_cells["departs"].astype(bool)].groupby("rig", sort=False) if len(bg_cells) else []):
        g = g.sort_values("first")
        if len(g) < 2:  # one lot is not a rig: it stays evidence for that lot's cells only
            continue
        out.append(Decision(
            "rig", None, "background", _finite(g["median"].max()), _finite(g["limit"].iloc[0]), "background",
            g["site"].iloc[0], rig, None, None, None, "rig",
            {"background_lots": list(g["lot"]), "of_lots": int((bg_cells["rig"] == rig).sum()),
             "reference_from": g["reference_from"].iloc[0]}, g["first"].min(), g["last"].max()))
        rigs_found.setdefault(rig, (None, g["first"].min()))
    for i, d in enumerate(out):
        if d.level == "cell" and d.cause == "unit" and (d.lot, d.rig) in bg_departs \
                and (d.evidence.get("units") or 0) < 2:
            out[i] = replace(d, cause="rig", evidence={**d.evidence, "background_departs": True})
            cell_cause[(d.event, d.lot, d.rig)] = "rig"
        elif d.level == "cell" and d.cause == "rig" and d.evidence.get("only_this_lot") \
                and (d.lot, d.rig) in bg_departs:
            out[i] = replace(d, evidence={**d.evidence, "background_departs": True})
    for (event, lot, unit), (z, row, lim_y, stat) in per_unit.items():
        cause = cell_cause.get((event, lot, row.rig))
        if cause not in ("lot", "rig"):
            cause = "lot" if lot in lots_found else "unit"
        unit_cause[(event, lot, unit)] = cause
        ev = {"z": round(z, 2), "actuations": int(row.n)}
        if stat == BLOCK_STATISTIC:  # a T², not a log: shown as it is, with the features that carry it
            value, limit = _finite(row.mean), _finite(lim_y)
            lim = limits[event][stat]
            dep = lim.departures(getattr(row, "vector", None)) if getattr(row, "vector", None) is not None else None
            if dep is not None and lim.names:
                ev["departures_pct"] = {name: round(100.0 * math.expm1(float(v)), 2)
                                        for name, v in zip(lim.names, dep[0])}
        else:
            value, limit = _finite(math.exp(row.mean)), _finite(math.exp(lim_y))
        out.append(Decision(
            "unit", event, stat, value, limit, "beyond", row.site, row.rig, lot, unit, None, cause, ev, row.first,
            row.last))
    for r in flagged.itertuples(index=False) if len(flagged) else []:
        stats_ = list(r.statistics)
        qc = sorted({s[3:] for s in stats_ if str(s).startswith("qc:")})
        if qc:
            cause, ev = "recording", {"checks": qc}
        else:
            cause = unit_cause.get((r.event, r.lot, r.unit)) or cell_cause.get((r.event, r.lot, r.rig))
            via = "unit" if (r.event, r.lot, r.unit) in unit_cause else "cell" if cause else None
            if cause is None and r.lot in lots_found:
                cause, via = "lot", "lot"
            elif cause is None and r.rig in rigs_found and _after(r.recorded_at, rigs_found[r.rig][1]):
                cause, via = "rig", "rig"
            if cause is None and int(r.actuation_id) in bg_odd:
                cause, via = "recording", "background"
            if cause is None:
                cause = "unit"
            ev = {"statistics": stats_, "via": via}
        out.append(Decision(
            "actuation", r.event if not qc else None, "qc:" + qc[0] if qc else str(stats_[0]), _finite(r.value),
            _finite(r.limit), "quality check" if qc else "beyond", r.site, r.rig, r.lot, r.unit,
            int(r.actuation_id), cause, ev, r.recorded_at, r.recorded_at))
    return out


def _after(t, start) -> bool:
    """True when time ``t`` is at or after ``start`` (or either is unknown: no reason to rule it out)."""
    try:
        return pd.isna(t) or pd.isna(start) or pd.Timestamp(t) >= pd.Timestamp(start)
    except (TypeError, ValueError):
        return True


def _majority(causes) -> str | None:
    causes = [c for c in causes if c]
    if not causes:
        return None
    return max(set(causes), key=causes.count)


def subject_words(event) -> str:
    """What a signal is about: its event, or the rig's background (the fingerprint's signals carry no event)."""
    return event if isinstance(event, str) and event else "rig background"


def evidence_words(d: Decision) -> str:
    """The plain-language evidence of a decision (what the dashboard and the export show)."""
    e = d.evidence or {}
    what = {"event_spe_ratio": "event residual", "trajectory_distance": "trajectory distance",
            "t2_ratio": "Hotelling T²", "spe_ratio": "SPE", BLOCK_STATISTIC: "resonance T²"}.get(d.statistic,
                                                                                                 d.statistic)
    if d.cause == "recording" and e.get("checks"):
        return f"the recording failed its quality check(s): {', '.join(e.get('checks', []))}"
    if d.level == "cell" and e.get("lot_departs_in"):
        return (f"lot {d.lot} on rig {d.rig} departs ({e.get('z')} chart SD, {what}); lot {d.lot} departs as a "
                f"whole in {e['lot_departs_in']}")
    if d.level == "cell" and e.get("rig_departs_in"):
        return (f"lot {d.lot} on rig {d.rig} departs ({e.get('z')} chart SD, {what}); rig {d.rig} departs over "
                f"its lots in {e['rig_departs_in']}")
    if d.level == "actuation":
        via = {"unit": f"its unit {d.unit} signals too", "cell": f"its cell (lot {d.lot}, rig {d.rig}) signals",
               "lot": f"lot {d.lot} departs as a whole", "rig": f"rig {d.rig} departs since its change began",
               "background": "its own background before the first event departs from the rig's, the others' "
                             "do not: look at this recording",
               None: f"neither unit {d.unit} nor lot {d.lot} on rig {d.rig} signals as a whole"}[e.get("via")]
        return f"flagged on {', '.join(map(str, e.get('statistics', [])))}; {via}"
    if d.level == "unit" and d.statistic == BLOCK_STATISTIC:
        dep = e.get("departures_pct") or {}
        top = sorted(dep.items(), key=lambda kv: -abs(kv[1]))[:2]
        moved = ("; " + ", ".join(f"{name} {v:+.1f} %" for name, v in top)) if top else ""
        tail = {"lot": f"; its lot {d.lot} departs as a whole", "rig": f"; rig {d.rig} departs", "unit": ""}[d.cause]
        return (f"unit {d.unit}: its resonances over {e.get('actuations')} actuations depart, T² {d.value:.3g} "
                f"beyond its limit {d.limit:.3g} ({e.get('z')} SD){moved}{tail}")
    if d.level == "unit":
        return (f"unit {d.unit}: mean {what} {d.value:.3g} over {e.get('actuations')} actuations, beyond its limit "
                f"{d.limit:.3g} ({e.get('z')} SD)" + {"lot": f"; its lot {d.lot} departs as a whole",
                                                     "rig": f"; rig {d.rig} departs", "unit": ""}[d.cause])
    if d.level == "lot" and not e.get("rigs_departing"):
        cells = e.get("cells") or {}
        why = ("; its signalling cells point at " + ", ".join(f"rig {rg} ({c})" for rg, c in cells.items())
               if cells else "; no single rig's cell signals")
        return f"lot {d.lot}: the mean over its rigs is beyond the lot-by-lot limit ({what}){why}"
    if d.cause == "lot" and e.get("rigs_departing"):
        agree = e.get("signature_agreement") or {}
        kept = [agree[r] for r in e["rigs_departing"] if r in agree]
        same = (f", in the same bands on each (signature agreement {min(kept):.2f}-{max(kept):.2f})"
                if kept else "")
        return (f"lot {d.lot} departs on {len(e['rigs_departing'])} of {e.get('rigs')} rigs "
                f"({', '.join(e['rigs_departing'])}){same}; lot effect {e.get('lot_effect_sd')} chart SD ({what})")
    if d.level == "rig" and d.statistic == "background":
        return (f"rig {d.rig}: its background before the first event departs from its {e.get('reference_from')} "
                f"in lots {', '.join(e.get('background_lots', []))} (of {e.get('of_lots')} new lots)")
    if d.level == "cell" and e.get("background_departs") and d.cause == "rig":
        return (f"lot {d.lot} on rig {d.rig} departs ({e.get('z')} chart SD, {what}) and the rig's own background "
                "departs during this lot: look at the rig")
    if d.level == "rig" or (d.cause == "rig" and not e.get("only_this_lot")):
        parts = []
        if e.get("lots_departing"):
            parts.append(f"departs beyond its lots' own level in {', '.join(e['lots_departing'])}")
        if e.get("run_rules"):
            parts.append(f"run rules on its own sequence of lots ({'; '.join(e['run_rules'])})")
        if not parts:
            parts.append(f"rig effect {e.get('rig_effect_sd')} chart SD over its {e.get('lots')} lots")
        return f"rig {d.rig} " + " and ".join(parts) + f" ({what})"
    if d.cause == "unit" and e.get("units") == 1:
        return (f"lot {d.lot} on rig {d.rig} departs ({e.get('z')} chart SD, {what}); its one unit was tested there "
                f"and rig {d.rig} does not depart in its other lots: look at the unit")
    if d.cause == "unit":
        return (f"lot {d.lot} on rig {d.rig}: the departure is carried by unit(s) "
                f"{', '.join(e.get('units_signalling', []))} of {e.get('units')} ({what})")
    if d.cause == "rig":
        return (f"lot {d.lot} on rig {d.rig} departs ({e.get('z')} chart SD, {what}); the lot does not depart on "
                "other rigs and no single unit carries it: look at the rig during this lot")
    return f"{d.level} {d.lot or ''} {d.rig or ''}: {what} {d.rule}"
