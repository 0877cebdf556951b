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
from dataclasses import asdict, dataclass, replace

import numpy as np
from scipy import stats

from analysis.errors import ParameterError

__all__ = ["MeanLimits", "fit_mean_limits", "variance_components", "GROUP_STATISTICS", "group_limits_from_model",
           "BlockMeanLimits", "block_variance_components", "fit_block_limits", "block_limits_from_model",
           "BLOCK_STATISTIC", "limits_from_dict"]


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

    def standardised(self, mean, n) -> np.ndarray:
        """A group's mean of n values in SDs of a new group's mean from the centre."""
        return (np.asarray(mean, dtype=float) - self.centre) / np.asarray(self.sd(n), dtype=float)

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
    """(grand centre, σ_lot², σ_u², σ_w²) of values grouped by unit within lot (module docstring): the one-feature
    case of block_variance_components, whose matrix estimators reduce to these for p = 1."""
    v = np.asarray(values, dtype=float)
    u = np.asarray(units).astype(str)
    g = np.asarray(lots).astype(str)
    if v.ndim != 1 or u.shape != v.shape or g.shape != v.shape:
        raise ParameterError(f"values, units and lots must be 1-D of one length; got {v.shape}, {u.shape}, {g.shape}")
    if int(np.isfinite(v).sum()) < 3:
        raise ParameterError(f"variance components need at least 3 finite values; got {int(np.isfinite(v).sum())}")
    centre, var_lot, var_u, var_w = block_variance_components(v[:, None], units=u, lots=g)
    return float(centre[0]), float(var_lot[0, 0]), float(var_u[0, 0]), float(var_w[0, 0])


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

#: The statistic name of a model's resonance block (the actuation's T², and at the unit level the T² of the
#: unit's mean).
BLOCK_STATISTIC = "resonance_t2"


def group_limits_from_model(model, *, units, lots, alpha: float) -> dict:
    """Unit limits of a fitted ReferenceModel from its held-out calibration values (one per reference actuation
    in fit order): MeanLimits per statistic of GROUP_STATISTICS (on the natural log of the ratio) and, for a
    model with a resonance block, BlockMeanLimits under BLOCK_STATISTIC. ``alpha`` is split evenly over them
    (Bonferroni), so a new unit of an in-control lot signals on any of them with probability at most ``alpha``."""
    out: dict = {}
    has_block = getattr(model, "calibration_resonance_whitened_", None) is not None
    each = alpha / (len(GROUP_STATISTICS) + int(has_block))
    for key, attr in GROUP_STATISTICS.items():
        held = np.asarray(getattr(model, attr), dtype=float)
        if held.shape != np.shape(units):
            raise ParameterError(f"the model holds {held.size} held-out values of {key}; got {np.size(units)} units")
        logs = np.log(np.where(held > 0, held, np.nan))
        out[key] = fit_mean_limits(logs, units=units, lots=lots, alpha=each)
    if has_block:
        out[BLOCK_STATISTIC] = block_limits_from_model(model, units=units, lots=lots, alpha=each)
    return out


def limits_from_dict(statistic: str, d: dict):
    """Stored unit limits of one statistic: BlockMeanLimits for BLOCK_STATISTIC, else MeanLimits."""
    return BlockMeanLimits.from_dict(d) if statistic == BLOCK_STATISTIC else MeanLimits.from_dict(d)

def _psd(m):
    """The symmetric matrix m with negative eigenvalues set to zero (the truncation of negative estimates)."""
    m = 0.5 * (m + m.T)
    lam, v = np.linalg.eigh(m)
    return (v * np.maximum(lam, 0.0)) @ v.T


@dataclass(frozen=True)
class BlockMeanLimits:
    """Limit for the mean vector of a block of p features over n actuations of a new unit (module docstring, in
    matrix form): Hotelling's T² of the mean's departure from the centre, with the covariance
    Σ_lot + Σ_u + Σ_w/n, against the Phase II limit for a new observation with the covariance estimated from
    n_units reference units (NIST/SEMATECH e-Handbook 6.5.4.4). Matrices are (p, p) nested lists; names (p,)."""

    centre: tuple
    var_lot: tuple
    var_unit: tuple
    var_within: tuple
    alpha: float
    n_units: int
    n_lots: int
    names: tuple = ()
    unwhiten: tuple = ()  # (p, p): the model's whitened features back to log departures, when known

    @property
    def p(self) -> int:
        return len(self.centre)

    def covariance(self, n: float) -> np.ndarray:
        """Covariance (p, p) of a new unit's mean of n vectors."""
        return np.asarray(self.var_lot) + np.asarray(self.var_unit) + np.asarray(self.var_within) / float(n)

    def t2(self, means, n) -> np.ndarray:
        """T² of unit means (k, p) over n (k,) actuations each."""
        x = np.atleast_2d(np.asarray(means, dtype=float)) - np.asarray(self.centre)
        n = np.broadcast_to(np.asarray(n, dtype=float), (x.shape[0],))
        out = np.full(x.shape[0], np.nan)
        for i, (row, k) in enumerate(zip(x, n)):
            if k > 0 and np.all(np.isfinite(row)):
                out[i] = float(row @ np.linalg.solve(self.covariance(k) + 1e-12 * np.eye(self.p), row))
        return out

    def standardised(self, t2, n) -> np.ndarray:
        """T² as a normal deviate of the same upper-tail probability (chi-square with p degrees of freedom), so
        that it compares with MeanLimits.standardised."""
        return stats.norm.isf(stats.chi2.sf(np.asarray(t2, dtype=float), self.p))

    def departures(self, means) -> np.ndarray | None:
        """Unit means (k, p) of whitened features as natural-log departures from the reference centre per
        feature (exp(d) - 1 is the relative change), or None when the unwhitening is not known."""
        if not self.unwhiten:
            return None
        return np.atleast_2d(np.asarray(means, dtype=float)) @ np.asarray(self.unwhiten).T

    @property
    def limit(self) -> float:
        from analysis.monitor.limits import t2_limit_new

        return float(t2_limit_new(max(self.n_units, self.p + 2), self.p, self.alpha))

    def ucl(self, n):
        """The limit of T² (the same for every n: n enters the T² itself)."""
        return np.full(np.shape(n), self.limit) if np.ndim(n) else self.limit

    def to_dict(self) -> dict:
        return {"kind": "block", "centre": list(self.centre), "var_lot": [list(r) for r in self.var_lot],
                "var_unit": [list(r) for r in self.var_unit], "var_within": [list(r) for r in self.var_within],
                "alpha": self.alpha, "n_units": self.n_units, "n_lots": self.n_lots, "names": list(self.names),
                "unwhiten": [list(r) for r in self.unwhiten]}

    @classmethod
    def from_dict(cls, d: dict) -> BlockMeanLimits:
        try:
            p = len(d["centre"])
            mats = {k: tuple(tuple(float(v) for v in row) for row in d[k]) for k in ("var_lot", "var_unit",
                                                                                     "var_within")}
            if p < 1 or any(len(m) != p or any(len(row) != p for row in m) for m in mats.values()):
                raise ValueError(f"matrices must be {p} x {p}")
            return cls(centre=tuple(float(v) for v in d["centre"]), alpha=float(d["alpha"]),
                       n_units=int(d["n_units"]), n_lots=int(d["n_lots"]),
                       names=tuple(str(v) for v in d.get("names", ())),
                       unwhiten=tuple(tuple(float(v) for v in row) for row in d.get("unwhiten", ())), **mats)
        except (KeyError, TypeError, ValueError) as exc:
            raise ParameterError(f"block limits need centre, var_lot, var_unit, var_within, alpha, n_units, "
                                 f"n_lots; got {d!r} ({exc})") from exc


def block_variance_components(values, *, units, lots) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(centre (p,), Σ_lot, Σ_u, Σ_w (p, p)) of vectors values (N, p) grouped by unit within lot: the moment
    estimators of variance_components with outer products in place of squares (the multivariate nested
    analysis of variance), each matrix with negative eigenvalues set to zero. Rows with a NaN are left out."""
    v = np.asarray(values, dtype=float)
    if v.ndim != 2:
        raise ParameterError(f"values must be (N, p); got shape {v.shape}")
    u = np.asarray(units).astype(str)
    g = np.asarray(lots).astype(str)
    if u.shape != (v.shape[0],) or g.shape != (v.shape[0],):
        raise ParameterError(f"units and lots must have one label per row of values; got {u.shape}, {g.shape}")
    ok = np.all(np.isfinite(v), axis=1)
    v, u, g = v[ok], u[ok], g[ok]
    if v.shape[0] < 3:
        raise ParameterError(f"variance components need at least 3 finite rows; got {v.shape[0]}")
    p = v.shape[1]
    key = np.char.add(np.char.add(g, "\x1f"), u)
    ukeys, uinv = np.unique(key, return_inverse=True)
    n_u = np.bincount(uinv).astype(float)
    mean_u = np.stack([np.bincount(uinv, weights=v[:, j]) for j in range(p)], axis=1) / n_u[:, None]
    resid = v - mean_u[uinv]
    df_w = v.shape[0] - ukeys.size
    var_w = resid.T @ resid / df_w if df_w > 0 else np.zeros((p, p))
    lot_of_unit = np.array([k.split("\x1f", 1)[0] for k in ukeys])
    lkeys, linv = np.unique(lot_of_unit, return_inverse=True)
    k_l = np.bincount(linv).astype(float)
    mean_l = np.stack([np.bincount(linv, weights=mean_u[:, j]) for j in range(p)], axis=1) / k_l[:, None]
    dev = mean_u - mean_l[linv]
    df_u = ukeys.size - lkeys.size
    var_u = np.zeros((p, p))
    if df_u > 0:
        var_u = _psd(dev.T @ dev / df_u - var_w * float(np.mean(1.0 / n_u)))
    var_lot = np.zeros((p, p))
    if lkeys.size > 1:
        between = np.atleast_2d(np.cov(mean_l, rowvar=False, ddof=1))
        inv_n = np.array([np.mean(1.0 / n_u[linv == i]) for i in range(lkeys.size)])
        explained = np.mean([(var_u + var_w * inv_n[i]) / k_l[i] for i in range(lkeys.size)], axis=0)
        var_lot = _psd(between - explained)
    return mean_l.mean(axis=0), var_lot, var_u, _psd(var_w)


def fit_block_limits(values, *, units, lots, alpha: float, names=()) -> BlockMeanLimits:
    """BlockMeanLimits from reference vectors (N, p) grouped by unit within lot, at false-alarm rate ``alpha``
    per new unit."""
    if not (isinstance(alpha, (int, float)) and 0.0 < alpha < 1.0) or math.isnan(alpha):
        raise ParameterError(f"alpha must be a number between 0 and 1; got {alpha!r}")
    centre, var_lot, var_u, var_w = block_variance_components(values, units=units, lots=lots)
    u = np.asarray(units).astype(str)
    g = np.asarray(lots).astype(str)

    def mat(m):
        return tuple(tuple(float(x) for x in row) for row in m)

    return BlockMeanLimits(centre=tuple(float(c) for c in centre), var_lot=mat(var_lot), var_unit=mat(var_u),
                           var_within=mat(var_w), alpha=float(alpha),
                           n_units=int(np.unique(np.char.add(np.char.add(g, "\x1f"), u)).size),
                           n_lots=int(np.unique(g).size), names=tuple(names))


def block_limits_from_model(model, *, units, lots, alpha: float) -> BlockMeanLimits | None:
    """BlockMeanLimits of a fitted ReferenceModel's resonance block from its held-out whitened rows (one per
    reference actuation in fit order), or None for a model without one."""
    w = getattr(model, "calibration_resonance_whitened_", None)
    if w is None:
        return None
    w = np.asarray(w, dtype=float)
    if w.shape[0] != np.size(units):
        raise ParameterError(f"the model holds {w.shape[0]} held-out resonance rows; got {np.size(units)} units")
    lim = fit_block_limits(w, units=units, lots=lots, alpha=alpha, names=tuple(model.resonance_names_))
    back = np.linalg.inv(np.asarray(model.resonance_whiten_, dtype=float))
    return replace(lim, unwhiten=tuple(tuple(float(v) for v in row) for row in back))
