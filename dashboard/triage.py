"""Plain words for flags and the suggested cause (recording / rig / lot / unit) from simple evidence (pure).

Evidence rules, in this order:
- a quality-check flag (the recording clipped, dropped out, lost a marker ...) -> the recording;
- the actuation's lot signals on at least two rigs and on at least half the rigs it ran on -> the lot;
- the actuation's rig signals in at least two lots (among the recent lots of that rig) -> the rig;
- otherwise -> the unit (one device).
A (lot, rig) cell "signals" when at least ``min_fraction`` of its actuations carry a model flag; a single false
alarm among many actuations therefore does not make a cell signal.
"""

from __future__ import annotations

import math

import pandas as pd

from analysis.triage import lot_rigs_signalling, rig_lots_signalling

__all__ = ["STATISTIC_WORDS", "describe_flag", "suggest_cause", "CAUSES", "actuation_state"]

CAUSES = ("recording", "rig", "lot", "unit")

STATISTIC_WORDS = {
    "t2": "Hotelling T²",
    "spe": "SPE",
    "trajectory": "score trajectory",
    "event_residual": "event residual",
    "event_missing": "event missing",
}


def _event_words(event) -> str:
    if event is None or (isinstance(event, float) and math.isnan(event)) or event == "":
        return "recording"
    return str(event).replace("_", " ")


def describe_flag(statistic: str, event, reason: str, value=None, limit=None) -> str:
    """One line that says what broke: which statistic, which event, by how much (from the stored reason)."""
    if statistic.startswith("qc:"):
        return f"Quality check '{statistic[3:]}' failed: {reason}"
    what = STATISTIC_WORDS.get(statistic, statistic)
    text = f"{_event_words(event)} — {what}: {reason}"
    if statistic not in ("event_missing",) and value is not None and limit not in (None, 0) \
            and not (isinstance(value, float) and math.isnan(value)) and "×" not in reason:
        text += f" (value {float(value):.3g}, limit {float(limit):.3g})"
    return text


def _signals(evidence: pd.DataFrame, min_fraction: float) -> pd.DataFrame:
    e = evidence.copy()
    frac = e["flagged"] / e["actuations"].where(e["actuations"] > 0)
    e["signal"] = (e["flagged"] > 0) & (frac >= min_fraction)
    return e


def suggest_cause(statistics, *, lot: str, rig: str, evidence: pd.DataFrame,
                  min_fraction: float = 0.2) -> tuple[str, str]:
    """(cause, because) for one flagged actuation. statistics: the statistics of its flags ("qc:clipping",
    "spe", ...); evidence: per (lot, rig) rows with actuations and flagged (model flags only)."""
    stats = list(statistics)
    qc = sorted({s[3:] for s in stats if s.startswith("qc:")})
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
    """The Today view's state of an analysed actuation."""
    if not passed_qc or n_qc_flags:
        return "quality check failed"
    if n_model_flags:
        return "flagged"
    return "analysed"
