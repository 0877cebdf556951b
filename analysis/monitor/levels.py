"""Limits for the mean of a group of actuations (a unit's, a cell's), from nested variance components.

A unit's mean of a per-actuation statistic varies for three reasons: actuation to actuation within the unit
(σ_w²), unit to unit within a lot (σ_u²) and lot to lot (σ_lot²). A new unit with n actuations from a new lot has
variance σ_lot² + σ_u² + σ_w²/n about the reference centre, so its upper limit is

    UCL(n) = centre + z_(1-α) · sqrt(σ_lot² + σ_u² + σ_w² / n).

The components are estimated from reference values grouped by unit within lot, by the method of moments of the
nested (hierarchical) analysis of variance (Montgomery, Design and Analysis of Experiments, ch. 14: the expected
mean squares of the two-stage nested design), in the form that also serves unbalanced data: σ_w² is the pooled
within-unit variance; σ_u² the variance of unit means about their lot's mean less σ_w²·mean(1/n); σ_lot² the
variance of lot means less the part of it the units explain. Negative estimates are set to zero (the usual
truncation). For balanced data these are the ANOVA estimators.

The values should be ones the reference model did not see (the held-out values of its calibration): in-sample
values sit closer to the model and would make the limits too tight for new units.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy import stats

from analysis.errors import ParameterError

__all__ = ["MeanLimits", "fit_mean_limits", "variance_components", "GROUP_STATISTICS", "group_limits_from_model"]


@dataclass(frozen=True)
class MeanLimits:
    """Upper limit for the mean of n values of a new group (see module docstring). All on the values' scale
    (the natural log, for ratio statistics). alpha: one-sided false-alarm rate per group."""

    centre: float
    var_lot: float
    var_unit: float
    var_within: float
    alpha: float
    n_units: int
    n_lots: int

    @property
    def z(self) -> float:
        return float(stats.norm.isf(self.alpha))

    def sd(self, n) -> np.ndarray | float:
        """Standard deviation of a new group's mean of n values."""
        n = np.asarray(n, dtype=float)
        out = np.sqrt(self.var_lot + self.var_unit + self.var_within / np.where(n > 0, n, np.nan))
        return float(out) if out.ndim == 0 else out

    def ucl(self, n) -> np.ndarray | float:
        """The upper limit for a new group's mean of n values."""
        out = self.centre + self.z * np.asarray(self.sd(n))
        return float(out) if np.ndim(out) == 0 else out

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict) -> MeanLimits:
        try:
            return cls(**{k: (int(d[k]) if k in ("n_units", "n_lots") else float(d[k]))
                          for k in cls.__dataclass_fields__})
        except (KeyError, TypeError, ValueError) as exc:
            raise ParameterError(f"mean limits need {', '.join(cls.__dataclass_fields__)}; got {d!r}") from exc


def variance_components(values, *, units, lots) -> tuple[float, float, float, float]:
    """(grand centre, σ_lot², σ_u², σ_w²) of values grouped by unit within lot (module docstring)."""
    v = np.asarray(values, dtype=float)
    u = np.asarray(units).astype(str)
    g = np.asarray(lots).astype(str)
    if v.ndim != 1 or u.shape != v.shape or g.shape != v.shape:
        raise ParameterError(f"values, units and lots must be 1-D of one length; got {v.shape}, {u.shape}, {g.shape}")
    ok = np.isfinite(v)
    v, u, g = v[ok], u[ok], g[ok]
    if v.size < 3:
        raise ParameterError(f"variance components need at least 3 finite values; got {v.size}")
    key = np.char.add(np.char.add(g, "\x1f"), u)  # a unit is named within its lot
    ukeys, uinv = np.unique(key, return_inverse=True)
    n_u = np.bincount(uinv).astype(float)
    mean_u = np.bincount(uinv, weights=v) / n_u
    resid = v - mean_u[uinv]
    df_w = v.size - ukeys.size
    var_w = float(np.sum(resid**2) / df_w) if df_w > 0 else 0.0
    lot_of_unit = np.array([k.split("\x1f", 1)[0] for k in ukeys])
    lkeys, linv = np.unique(lot_of_unit, return_inverse=True)
    k_l = np.bincount(linv).astype(float)  # units per lot
    mean_l = np.bincount(linv, weights=mean_u) / k_l
    dev = mean_u - mean_l[linv]
    df_u = ukeys.size - lkeys.size
    var_u = 0.0
    if df_u > 0:
        var_u = max(0.0, float(np.sum(dev**2) / df_u) - var_w * float(np.mean(1.0 / n_u)))
    var_lot = 0.0
    if lkeys.size > 1:
        between = float(np.var(mean_l, ddof=1))
        # A lot mean is the mean of its units' means: it carries (σ_u² + σ_w²/n)/k of unit-level variance.
        explained = float(np.mean((var_u + var_w * np.array([np.mean(1.0 / n_u[linv == i]) for i in
                                                            range(lkeys.size)])) / k_l))
        var_lot = max(0.0, between - explained)
    centre = float(np.mean(mean_l))
    return centre, var_lot, var_u, var_w


def fit_mean_limits(values, *, units, lots, alpha: float) -> MeanLimits:
    """MeanLimits from reference values grouped by unit within lot, at one-sided false-alarm rate ``alpha``."""
    if not (isinstance(alpha, (int, float)) and 0.0 < alpha < 1.0) or math.isnan(alpha):
        raise ParameterError(f"alpha must be a number between 0 and 1; got {alpha!r}")
    centre, var_lot, var_u, var_w = variance_components(values, units=units, lots=lots)
    u = np.asarray(units).astype(str)
    g = np.asarray(lots).astype(str)
    return MeanLimits(centre=centre, var_lot=var_lot, var_unit=var_u, var_within=var_w, alpha=float(alpha),
                      n_units=int(np.unique(np.char.add(np.char.add(g, "\x1f"), u)).size),
                      n_lots=int(np.unique(g).size))


#: The per-actuation statistics whose group means are given limits, and the model's held-out values of each.
GROUP_STATISTICS = {
    "event_spe_ratio": "calibration_event_spe_ratio_",
    "trajectory_distance": "calibration_distance_",
    "t2_ratio": "calibration_t2_ratio_",
    "spe_ratio": "calibration_spe_ratio_",
}


def group_limits_from_model(model, *, units, lots, alpha: float) -> dict[str, MeanLimits]:
    """MeanLimits per statistic of GROUP_STATISTICS (on the natural log of the ratio) from a fitted
    ReferenceModel's held-out calibration values, one per reference actuation in fit order; ``alpha`` is split
    evenly over the statistics (Bonferroni), so a new unit of an in-control lot signals on any of them with
    probability at most ``alpha``."""
    out = {}
    each = alpha / len(GROUP_STATISTICS)
    for key, attr in GROUP_STATISTICS.items():
        held = np.asarray(getattr(model, attr), dtype=float)
        if held.shape != np.shape(units):
            raise ParameterError(f"the model holds {held.size} held-out values of {key}; got {np.size(units)} units")
        logs = np.log(np.where(held > 0, held, np.nan))
        out[key] = fit_mean_limits(logs, units=units, lots=lots, alpha=each)
    return out
