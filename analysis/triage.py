"""Every suggested-cause rule (recording / rig / lot / unit), pure: tables of evidence in, causes out.

The rules, shared by the dashboard's flags, the demo's lot-by-lot summary and anything else that names a cause:
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
from dataclasses import dataclass

import pandas as pd

__all__ = ["CAUSES", "NEXT_STEP", "CellCause", "lot_rigs_signalling", "rig_lots_signalling", "cell_causes",
           "suggest_cause", "actuation_state"]

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


@dataclass(frozen=True)
class CellCause:
    """What a set of signalling (lot, rig) cells suggests: cause "lot" (lot set, rigs where it signals), "rig"
    (rig set, lots where it signals) or "unit" (one cell neither explains: look at its units)."""

    cause: str
    lot: str | None
    rig: str | None
    cells: tuple[tuple[str, str], ...]  # (lot, rig) of every cell this cause explains


def cell_causes(cells: pd.DataFrame) -> list[CellCause]:
    """The causes suggested by the cells of new lots (rows: lot, rig, signal, in time order): lots first, then
    rigs among the cells no lot explains, then each remaining signalling cell on its own."""
    out: list[CellCause] = []
    explained: set[tuple[str, str]] = set()
    for lot in dict.fromkeys(cells["lot"]):
        hit = lot_rigs_signalling(cells, lot)
        if hit:
            out.append(CellCause("lot", lot, None, tuple((lot, r) for r in hit)))
            explained |= {(lot, r) for r in hit}
    for rig in dict.fromkeys(cells["rig"]):
        rest = cells[(cells["rig"] == rig) & ~cells["lot"].map(lambda lot, r=rig, seen=explained: (lot, r) in seen)]
        hit = rig_lots_signalling(rest, rig)
        if hit:
            out.append(CellCause("rig", None, rig, tuple((lot, rig) for lot in hit)))
            explained |= {(lot, rig) for lot in hit}
    for r in cells[cells["signal"].astype(bool)].itertuples():
        if (r.lot, r.rig) not in explained:
            out.append(CellCause("unit", r.lot, r.rig, ((r.lot, r.rig),)))
    return out


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
