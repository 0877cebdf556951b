"""Lot-by-lot control chart arithmetic for the Lots view (pure: DataFrames in, a frozen dataclass out).

Each point is one lot on one rig (or one lot over all rigs): the lot's mean of a per-actuation statistic, or
its geometric mean for positive ratio statistics, which are charted on their natural log. Phase I limits are
individuals-chart limits (centre ± 3σ, σ = MR̄/d2; NIST/SEMATECH e-Handbook 6.3.2.2) fitted to the reference
lots' points; run rules (Western Electric or Nelson) are checked rig by rig in time order
(analysis.monitor.check_rules).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from analysis.monitor import NELSON, WESTERN_ELECTRIC, check_rules, fit_individuals_limits

__all__ = ["LotChart", "lot_chart", "RULE_SETS"]

RULE_SETS = {"we": WESTERN_ELECTRIC, "nelson": NELSON, "none": ()}


@dataclass(frozen=True)
class LotChart:
    """points: the input rows plus y (the charted value: ln for log statistics), reference (bool), beyond
    (bool), rules (comma-separated rule ids), signal (bool). centre, ucl, lcl, sigma: on the charted scale
    (NaN when no limits could be fitted); limits_from: what the limits were fitted to, in words."""

    points: pd.DataFrame
    centre: float
    ucl: float
    lcl: float
    sigma: float
    log: bool
    limits_from: str
    rules: tuple[str, ...]

    def to_display(self, y):
        """A charted value back in the statistic's own units."""
        return np.exp(y) if self.log else y


def lot_chart(points: pd.DataFrame, *, reference_lots=(), log: bool = False, rules: str = "we") -> LotChart:
    """Limits and run-rule signals for per-lot points (rows: lot, rig, value, first, ... ordered by time)."""
    if rules not in RULE_SETS:
        raise ValueError(f"rules must be one of {', '.join(RULE_SETS)}; got {rules!r}")
    p = points.copy().reset_index(drop=True)
    value = p["value"].astype(float) if len(p) else pd.Series(dtype=float)
    if log:
        y = np.log(value.where(value > 0))
    else:
        y = value
    p["y"] = y
    p["reference"] = p["lot"].isin(set(reference_lots)) if len(p) else pd.Series(dtype=bool)
    usable = p[np.isfinite(p["y"].astype(float))] if len(p) else p
    ref = usable[usable["reference"]]
    if len(ref) >= 2:
        basis, where = ref, f"the {ref['lot'].nunique()} reference lots ({len(ref)} points)"
    elif len(usable) >= 2:
        basis, where = usable, f"all {len(usable)} points (no reference lots in view)"
    else:
        basis, where = None, "too few points for limits"
    centre = ucl = lcl = sigma = math.nan
    if basis is not None:
        # Limits from the points in time order, rig by rig, so a rig's offset is not counted as variation
        # between successive lots; the moving ranges of all rigs are pooled.
        ordered = basis.sort_values(["rig", "first"]) if "first" in basis else basis.sort_values("rig")
        lim = fit_individuals_limits(ordered["y"].to_numpy(dtype=float), groups=ordered["rig"].to_numpy())
        centre, ucl, lcl, sigma = lim.centre, lim.ucl, lim.lcl, lim.sigma
    finite = np.isfinite(p["y"].astype(float)) if len(p) else pd.Series(dtype=bool)
    p["beyond"] = finite & ((p["y"] > ucl) | (p["y"] < lcl)) if math.isfinite(ucl) else False
    p["rules"] = ""
    rule_ids = RULE_SETS[rules]
    if rule_ids and math.isfinite(sigma) and sigma > 0:
        for _, g in p[finite].groupby("rig", sort=False):
            idx = g.sort_values("first").index if "first" in g else g.index
            for v in check_rules(p.loc[idx, "y"].to_numpy(dtype=float), centre=centre, sigma=sigma,
                                 rules=rule_ids):
                at = idx[v.index]
                have = p.at[at, "rules"]
                if v.rule not in have.split(","):
                    p.at[at, "rules"] = f"{have},{v.rule}" if have else v.rule
    p["signal"] = p["beyond"].astype(bool) | p["rules"].ne("")
    return LotChart(points=p, centre=centre, ucl=ucl, lcl=lcl, sigma=sigma, log=log, limits_from=where,
                    rules=tuple(rule_ids))
