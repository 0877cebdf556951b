"""Run rules for control charts: the four Western Electric rules and Nelson's eight.

Sources: Western Electric, Statistical Quality Control Handbook (1956); Nelson, L. S. (1984), "The Shewhart
control chart — tests for special causes", J. Quality Technology 16(4).

Counting conventions (ours, stated because sources differ):
- "beyond kσ" is strictly |x - centre| > kσ; "within 1σ" is strictly |x - centre| < σ; a point exactly on the
  centre line is on neither side and breaks a same-side run.
- A rule fires at the point that completes the pattern (``index``); for the "m of n" rules that point must
  itself be one of the m points, so one pattern is reported once rather than at every later window, and
  a pattern may complete before n points exist (the first 2 points both beyond 2σ fire at the second).
  Run rules fire again at every further point while the run continues.
- nelson3 "6 in a row steadily increasing or decreasing" means 6 points, i.e. 5 consecutive strict increases
  (or decreases); a tie breaks the run. nelson4 "14 in a row alternating" means 14 points whose 13 successive
  differences alternate in sign. nelson8 "8 in a row none within 1σ" also requires points on both sides, as
  Nelson states it.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from analysis.errors import ParameterError

__all__ = ["RuleViolation", "RULES", "WESTERN_ELECTRIC", "NELSON", "check_rules"]


@dataclass(frozen=True)
class RuleViolation:
    """One firing of a run rule: rule id, plain description, the index where it fires, the points involved."""

    rule: str
    description: str
    index: int
    points: tuple[int, ...]


RULES = MappingProxyType({
    "we1": "1 point beyond 3σ",
    "we2": "2 of 3 points in a row beyond 2σ on the same side",
    "we3": "4 of 5 points in a row beyond 1σ on the same side",
    "we4": "8 points in a row on the same side of the centre line",
    "nelson1": "1 point beyond 3σ",
    "nelson2": "9 points in a row on the same side of the centre line",
    "nelson3": "6 points in a row steadily increasing or decreasing",
    "nelson4": "14 points in a row alternating up and down",
    "nelson5": "2 of 3 points in a row beyond 2σ on the same side",
    "nelson6": "4 of 5 points in a row beyond 1σ on the same side",
    "nelson7": "15 points in a row within 1σ of the centre line",
    "nelson8": "8 points in a row with none within 1σ, on both sides",
})
WESTERN_ELECTRIC = ("we1", "we2", "we3", "we4")
NELSON = tuple(f"nelson{i}" for i in range(1, 9))


def _windows_all(mask, n):
    """Indices i where mask[i-n+1 .. i] are all True."""
    if mask.size < n:
        return np.empty(0, dtype=int)
    return np.flatnonzero(sliding_window_view(mask, n).all(axis=1)) + n - 1


def _run(mask, n):
    return [(int(i), tuple(range(i - n + 1, i + 1))) for i in _windows_all(mask, n)]


def _m_of_n(above, below, m, n):
    out = []
    for side in (above, below):
        # Padding lets a pattern complete before n points exist (e.g. the first 2 points beyond 2σ).
        counts = sliding_window_view(np.concatenate([np.zeros(n - 1, bool), side]), n).sum(axis=1)
        ends = np.flatnonzero((counts >= m) & side)
        out += [(int(i), tuple(int(j) for j in range(max(0, i - n + 1), i + 1) if side[j])) for i in ends]
    return sorted(out)


def _rule(rule, z):
    if rule in ("we1", "nelson1"):
        return [(int(i), (int(i),)) for i in np.flatnonzero(np.abs(z) > 3)]
    if rule in ("we2", "nelson5"):
        return _m_of_n(z > 2, z < -2, 2, 3)
    if rule in ("we3", "nelson6"):
        return _m_of_n(z > 1, z < -1, 4, 5)
    if rule in ("we4", "nelson2"):
        n = 8 if rule == "we4" else 9
        return sorted(_run(z > 0, n) + _run(z < 0, n))
    if rule == "nelson3":
        d = np.diff(z)
        hits = sorted(set(_windows_all(d > 0, 5)) | set(_windows_all(d < 0, 5)))
        return [(int(i) + 1, tuple(range(int(i) - 4, int(i) + 2))) for i in hits]
    if rule == "nelson4":
        d = np.sign(np.diff(z))
        alternating = (d[:-1] * d[1:]) < 0  # pair k: differences k and k+1 have opposite signs
        return [(int(i) + 2, tuple(range(int(i) - 11, int(i) + 3))) for i in _windows_all(alternating, 12)]
    if rule == "nelson7":
        return _run(np.abs(z) < 1, 15)
    if rule == "nelson8":
        out = []
        for i, pts in _run(np.abs(z) > 1, 8):
            w = z[list(pts)]
            if np.any(w > 0) and np.any(w < 0):
                out.append((i, pts))
        return out
    raise AssertionError(rule)


def check_rules(values, *, centre, sigma, rules=NELSON):
    """Check run rules on a chart's points.

    values: (n,) points in chart units; centre, sigma: centre line and σ in the same units;
    rules: rule ids from RULES (e.g. WESTERN_ELECTRIC, NELSON, or any selection).
    Returns a tuple of RuleViolation ordered by index, then by the order of ``rules``.
    """
    v = np.asarray(values, dtype=float)
    if v.ndim != 1 or not np.all(np.isfinite(v)):
        raise ParameterError(f"values must be a 1-D array of finite numbers; got shape {v.shape}")
    if isinstance(rules, str):
        rules = (rules,)
    unknown = [r for r in rules if r not in RULES]
    if unknown:
        raise ParameterError(f"rules must be ids from {', '.join(RULES)}; got unknown {', '.join(map(repr, unknown))}")
    if not np.isfinite(sigma) or sigma <= 0:
        raise ParameterError(f"sigma must be a finite number > 0; got {sigma!r}")
    if not np.isfinite(centre):
        raise ParameterError(f"centre must be a finite number; got {centre!r}")
    z = (v - centre) / sigma
    found = []
    for order, rule in enumerate(rules):
        found += [(i, order, RuleViolation(rule, RULES[rule], i, pts)) for i, pts in _rule(rule, z)]
    found.sort(key=lambda item: (item[0], item[1]))
    return tuple(item[2] for item in found)
