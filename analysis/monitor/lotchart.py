"""The lot-by-lot control chart (pure: a DataFrame of per-lot points in, a frozen dataclass out).

The one rule, used by the dashboard's Lots view and by the demo's summary alike:
- each point is one lot on one rig (or one lot over all rigs): the lot's mean of a per-actuation statistic over
  its actuations that passed their quality checks, or its geometric mean for positive ratio statistics, which
  are charted on their natural log (the store's ``lot_points`` query makes these points);
- Phase I limits are individuals-chart limits, centre ± 3σ with σ = MR̄/d2 (NIST/SEMATECH e-Handbook 6.3.2.2),
  fitted to the reference lots' points with the moving ranges taken within each rig in time order and pooled,
  so a rig's offset is not counted as variation between successive lots. At least ``MIN_LIMIT_POINTS`` points
  are needed; when fewer reference points are in view, the limits come from all points in view, and the
  chart says so (``limits_from``);
- a point signals when it lies beyond either limit, or when a run rule (Western Electric or Nelson,
  analysis.monitor.check_rules) fires on it, the rules checked rig by rig in time order.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from analysis.errors import ParameterError
from analysis.monitor.charts import fit_individuals_limits
from analysis.monitor.rules import NELSON, WESTERN_ELECTRIC, check_rules

__all__ = ["LotChart", "lot_chart", "RULE_SETS", "MIN_LIMIT_POINTS"]

RULE_SETS = {"we": WESTERN_ELECTRIC, "nelson": NELSON, "none": ()}
#: Fewer points than this give no limits (two points give one moving range: no estimate of σ worth charting).
MIN_LIMIT_POINTS = 3


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

    @property
    def signals(self) -> pd.DataFrame:
        """The points that signal, in time order."""
        return self.points[self.points["signal"]]


def lot_chart(points: pd.DataFrame, *, reference_lots=(), log: bool = False, rules: str = "we") -> LotChart:
    """Limits and run-rule signals for per-lot points (rows: lot, rig, value, first (time), ...)."""
    if rules not in RULE_SETS:
        raise ParameterError(f"rules must be one of {', '.join(RULE_SETS)}; got {rules!r}")
    p = points.copy().reset_index(drop=True)
    value = p["value"].astype(float) if len(p) else pd.Series(dtype=float)
    p["y"] = np.log(value.where(value > 0)) if log else value
    p["reference"] = p["lot"].isin(set(reference_lots)) if len(p) else pd.Series(dtype=bool)
    finite = np.isfinite(p["y"].astype(float)) if len(p) else pd.Series(dtype=bool)
    usable = p[finite] if len(p) else p
    ref = usable[usable["reference"]]
    if len(ref) >= MIN_LIMIT_POINTS:
        basis, where = ref, f"the {ref['lot'].nunique()} reference lots ({len(ref)} points)"
    elif len(usable) >= MIN_LIMIT_POINTS:
        basis, where = usable, f"all {len(usable)} points (too few reference lots in view)"
    else:
        basis, where = None, "too few points for limits"
    centre = ucl = lcl = sigma = math.nan
    if basis is not None:
        ordered = basis.sort_values(["rig", "first"]) if "first" in basis else basis.sort_values("rig")
        lim = fit_individuals_limits(ordered["y"].to_numpy(dtype=float), groups=ordered["rig"].to_numpy())
        centre, ucl, lcl, sigma = lim.centre, lim.ucl, lim.lcl, lim.sigma
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
