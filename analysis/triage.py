"""The suggested cause of a signal from simple evidence (pure): the lot, when it signals across rigs; the rig,
when it signals across lots.

``cells`` is one row per (lot, rig) with a boolean ``signal``. The rules, shared by the dashboard's flags and the
demo's lot-by-lot summary:
- a lot is suggested when it signals on at least two rigs and on at least half of the rigs it ran on;
- a rig is suggested when it signals in at least two lots.
"""

from __future__ import annotations

import math

import pandas as pd

__all__ = ["lot_rigs_signalling", "rig_lots_signalling"]


def lot_rigs_signalling(cells: pd.DataFrame, lot: str) -> list[str] | None:
    """The rigs on which ``lot`` signals, when that makes the lot the suggested cause; else None."""
    on_lot = cells[cells["lot"] == lot]
    rigs = sorted(on_lot.loc[on_lot["signal"].astype(bool), "rig"])
    if len(rigs) >= 2 and len(rigs) >= math.ceil(on_lot["rig"].nunique() / 2):
        return rigs
    return None


def rig_lots_signalling(cells: pd.DataFrame, rig: str) -> list[str] | None:
    """The lots in which ``rig`` signals, when that makes the rig the suggested cause; else None."""
    on_rig = cells[cells["rig"] == rig]
    lots = list(dict.fromkeys(on_rig.loc[on_rig["signal"].astype(bool), "lot"]))
    return lots if len(lots) >= 2 else None
