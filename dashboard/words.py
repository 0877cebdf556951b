"""Plain words for what the store holds: a flag's line on Today and on the Actuation view."""

from __future__ import annotations

import math

__all__ = ["STATISTIC_WORDS", "describe_flag"]

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
