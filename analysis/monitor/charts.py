"""Control charts for per-actuation statistics: individuals/moving range, x̄–s, EWMA and tabular CUSUM.

Phase I and Phase II are kept apart: ``fit_*_limits(reference values)`` returns frozen limits estimated from
reference lots; ``limits.apply(new values)`` evaluates new points against those frozen limits. The
``*_chart`` functions are the one-call form (Phase I limits from ``phase1`` if given, else from the values).
Formulas: NIST/SEMATECH e-Handbook of Statistical Methods 6.3.2 and Montgomery, Introduction to Statistical
Quality Control, ch. 6 and 9.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal
from scipy.special import gammaln

from analysis.errors import ParameterError

__all__ = [
    "IndividualsLimits", "IndividualsChart", "fit_individuals_limits", "individuals_chart",
    "XbarSLimits", "XbarSChart", "fit_xbar_s_limits", "xbar_s_chart",
    "EwmaLimits", "EwmaChart", "fit_ewma_limits", "ewma_chart",
    "CusumLimits", "CusumChart", "fit_cusum_limits", "cusum_chart",
]

_D2_2 = 2.0 / math.sqrt(math.pi)  # d2 for n = 2: E|X1 - X2| = 2σ/√π


def _d3_2():
    # The range of two normals is √2·σ·|N(0,1)|: SD = √2·σ·√(1 - 2/π).
    return math.sqrt(2.0) * math.sqrt(1.0 - 2.0 / math.pi)


_D4_2 = 1.0 + 3.0 * _d3_2() / _D2_2


def _values(values, name="values", minimum=1):
    v = np.asarray(values, dtype=float)
    if v.ndim != 1 or v.size < minimum or not np.all(np.isfinite(v)):
        raise ParameterError(f"{name} must be a 1-D array of at least {minimum} finite numbers; got shape {v.shape}")
    return v


def _positive(x, name):
    if isinstance(x, bool) or not isinstance(x, (int, float, np.integer, np.floating)) or not math.isfinite(x) \
            or x <= 0:
        raise ParameterError(f"{name} must be a finite number > 0; got {x!r}")
    return float(x)


def _mr_sigma(v):
    mr = np.abs(np.diff(v))
    return float(mr.mean()) / _D2_2, float(mr.mean())


# ---------------------------------------------------------------------------- individuals
@dataclass(frozen=True)
class IndividualsChart:
    """Points, moving ranges (first is NaN) and which of them are beyond the limits."""

    values: np.ndarray
    moving_ranges: np.ndarray
    limits: IndividualsLimits
    beyond: np.ndarray
    mr_beyond: np.ndarray


@dataclass(frozen=True)
class IndividualsLimits:
    """Frozen individuals-chart limits: centre ± 3σ with σ = MR̄/d2(2); MR chart UCL = D4(2)·MR̄, LCL = 0."""

    centre: float
    sigma: float
    ucl: float
    lcl: float
    mr_bar: float
    mr_ucl: float
    mr_lcl: float
    n_phase1: int

    def apply(self, values):
        v = _values(values)
        mr = np.concatenate([[np.nan], np.abs(np.diff(v))])
        return IndividualsChart(v, mr, self, (v > self.ucl) | (v < self.lcl), np.nan_to_num(mr) > self.mr_ucl)


def fit_individuals_limits(values, *, groups=None):
    """Phase I individuals and moving-range limits from reference values (NIST e-Handbook 6.3.2.2).

    groups: one label per value (e.g. the rig of each lot point). The moving ranges are then taken within each
    group, in the order given, and pooled, so an offset between groups is not counted as point-to-point
    variation; when no group has two values, the moving ranges of the whole sequence are used.
    """
    v = _values(values, minimum=2)
    centre = float(v.mean())
    sigma, mr_bar = _mr_sigma(v)
    if groups is not None:
        g = np.asarray(groups)
        if g.shape != v.shape:
            raise ParameterError(f"groups must have one label per value, shape {v.shape}; got {g.shape}")
        mr = np.concatenate([np.abs(np.diff(v[g == label])) for label in dict.fromkeys(g.tolist())])
        if mr.size:
            mr_bar = float(mr.mean())
            sigma = mr_bar / _D2_2
    return IndividualsLimits(centre, sigma, centre + 3 * sigma, centre - 3 * sigma, mr_bar, _D4_2 * mr_bar, 0.0,
                             v.size)


def individuals_chart(values, *, phase1=None):
    """Individuals/MR chart of values; phase1: IndividualsLimits or reference values (default: values)."""
    limits = phase1 if isinstance(phase1, IndividualsLimits) else fit_individuals_limits(
        values if phase1 is None else phase1)
    return limits.apply(values)


# ---------------------------------------------------------------------------- x̄ and s
def _s_constants(n):
    """c4, A3, B3, B4 for subgroup sizes n (array), from c4 = √(2/(n-1))·Γ(n/2)/Γ((n-1)/2)."""
    n = np.asarray(n, dtype=float)
    c4 = np.sqrt(2.0 / (n - 1)) * np.exp(gammaln(n / 2) - gammaln((n - 1) / 2))
    r = 3.0 * np.sqrt(1.0 - c4**2) / c4
    return c4, 3.0 / (c4 * np.sqrt(n)), np.maximum(0.0, 1.0 - r), 1.0 + r


def _subgroups(values, groups):
    v = _values(values, minimum=2)
    g = np.asarray(groups)
    if g.shape != v.shape:
        raise ParameterError(f"groups must have one label per value, shape {v.shape}; got {g.shape}")
    labels, first, inverse, counts = np.unique(g, return_index=True, return_inverse=True, return_counts=True)
    order = np.argsort(first)  # subgroups in order of first appearance (time order)
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    idx = rank[inverse]
    n = counts[order]
    if np.any(n < 2):
        raise ParameterError(f"every subgroup needs at least 2 values for an s chart; subgroup "
                             f"{labels[order][np.argmin(n)].item()!r} has {int(n.min())}")
    sums = np.bincount(idx, weights=v)
    means = sums / n
    ss = np.bincount(idx, weights=(v - means[idx]) ** 2)
    return labels[order], n, means, np.sqrt(ss / (n - 1))


@dataclass(frozen=True)
class XbarSChart:
    """Per subgroup: label, size, mean, SD and their limits (limits vary with the subgroup size)."""

    groups: np.ndarray
    sizes: np.ndarray
    means: np.ndarray
    sds: np.ndarray
    xbar_ucl: np.ndarray
    xbar_lcl: np.ndarray
    s_ucl: np.ndarray
    s_lcl: np.ndarray
    mean_beyond: np.ndarray
    sd_beyond: np.ndarray
    limits: XbarSLimits


@dataclass(frozen=True)
class XbarSLimits:
    """Frozen x̄–s limits: grand mean and pooled s̄; per subgroup x̄̄ ± A3(n)s̄, s in [B3(n)s̄, B4(n)s̄]."""

    grand_mean: float
    s_bar: float

    def apply(self, values, groups):
        labels, n, means, sds = _subgroups(values, groups)
        _, a3, b3, b4 = _s_constants(n)
        xu, xl = self.grand_mean + a3 * self.s_bar, self.grand_mean - a3 * self.s_bar
        su, sl = b4 * self.s_bar, b3 * self.s_bar
        return XbarSChart(labels, n, means, sds, xu, xl, su, sl, (means > xu) | (means < xl), (sds > su) | (sds < sl),
                          self)


def fit_xbar_s_limits(values, groups):
    """Phase I x̄–s limits; variable subgroup sizes: x̄̄ = Σnᵢx̄ᵢ/Σnᵢ, s̄ = √(Σ(nᵢ-1)sᵢ²/Σ(nᵢ-1))
    (Montgomery, Introduction to SQC, section 6.3.2)."""
    _, n, means, sds = _subgroups(values, groups)
    s_bar = float(np.sqrt(np.sum((n - 1) * sds**2) / np.sum(n - 1)))
    return XbarSLimits(float(np.sum(n * means) / n.sum()), s_bar)


def xbar_s_chart(values, groups, *, phase1=None):
    """x̄–s chart of values grouped by label (e.g. actuations of one lot on one rig).

    phase1: XbarSLimits, or (values, groups) of the reference; default: limits from the data themselves.
    """
    if isinstance(phase1, XbarSLimits):
        limits = phase1
    elif phase1 is None:
        limits = fit_xbar_s_limits(values, groups)
    else:
        limits = fit_xbar_s_limits(*phase1)
    return limits.apply(values, groups)


# ---------------------------------------------------------------------------- EWMA
@dataclass(frozen=True)
class EwmaChart:
    """EWMA z_i with time-varying limits; first_signal is the 0-based index of the first point beyond, or None."""

    values: np.ndarray
    ewma: np.ndarray
    ucl: np.ndarray
    lcl: np.ndarray
    beyond: np.ndarray
    first_signal: int | None
    limits: EwmaLimits


@dataclass(frozen=True)
class EwmaLimits:
    """Frozen EWMA design: target μ0, σ, λ and L; asymptotic limits μ0 ± Lσ√(λ/(2-λ))."""

    target: float
    sigma: float
    lam: float
    L: float

    @property
    def ucl_asymptotic(self):
        return self.target + self.L * self.sigma * math.sqrt(self.lam / (2 - self.lam))

    @property
    def lcl_asymptotic(self):
        return self.target - self.L * self.sigma * math.sqrt(self.lam / (2 - self.lam))

    def apply(self, values):
        """z_i = λx_i + (1-λ)z_{i-1}, z_0 = μ0; limits μ0 ± Lσ√(λ/(2-λ)[1-(1-λ)^(2i)]) (NIST 6.3.2.4)."""
        v = _values(values)
        lam = self.lam
        z, _ = signal.lfilter([lam], [1.0, -(1.0 - lam)], v, zi=[(1.0 - lam) * self.target])
        i = np.arange(1, v.size + 1)
        half = self.L * self.sigma * np.sqrt(lam / (2 - lam) * (1 - (1 - lam) ** (2 * i)))
        ucl, lcl = self.target + half, self.target - half
        beyond = (z > ucl) | (z < lcl)
        hits = np.flatnonzero(beyond)
        return EwmaChart(v, z, ucl, lcl, beyond, int(hits[0]) if hits.size else None, self)


def _lam_L(lam, L):
    if isinstance(lam, bool) or not isinstance(lam, (int, float, np.integer, np.floating)) or not 0 < lam <= 1:
        raise ParameterError(f"lam must be a number with 0 < lam <= 1; got {lam!r}")
    return float(lam), _positive(L, "L")


def fit_ewma_limits(values=None, *, lam=0.2, L=3.0, target=None, sigma=None):
    """Phase I EWMA design: target and σ given, or estimated from reference values (mean, MR̄/d2)."""
    lam, L = _lam_L(lam, L)
    if target is None or sigma is None:
        if values is None:
            raise ParameterError("give reference values, or both target and sigma; got neither")
        v = _values(values, minimum=2)
        target = float(v.mean()) if target is None else target
        sigma = _mr_sigma(v)[0] if sigma is None else sigma
    if isinstance(target, bool) or not isinstance(target, (int, float, np.integer, np.floating)) \
            or not math.isfinite(target):
        raise ParameterError(f"target must be a finite number; got {target!r}")
    return EwmaLimits(float(target), _positive(sigma, "sigma"), lam, L)


def ewma_chart(values, *, lam=0.2, L=3.0, target=None, sigma=None):
    """EWMA chart; target/sigma default to the mean and MR̄/d2 of values (Phase I on the data)."""
    return fit_ewma_limits(values, lam=lam, L=L, target=target, sigma=sigma).apply(values)


# ---------------------------------------------------------------------------- CUSUM
@dataclass(frozen=True)
class CusumChart:
    """Upper and lower tabular CUSUMs; first_signal is the 0-based index of the first S > H, or None."""

    values: np.ndarray
    upper: np.ndarray
    lower: np.ndarray
    beyond: np.ndarray
    first_signal: int | None
    limits: CusumLimits


@dataclass(frozen=True)
class CusumLimits:
    """Frozen tabular CUSUM design in the units of the values: target μ0, reference value K, decision H."""

    target: float
    k: float
    h: float

    def apply(self, values):
        """S⁺_i = max(0, S⁺_{i-1} + x_i - μ0 - K), S⁻_i = max(0, S⁻_{i-1} + μ0 - K - x_i), S_0 = 0
        (NIST e-Handbook 6.3.2.3; Montgomery ch. 9). Signal when S > H."""
        v = _values(values)

        def lindley(y):
            # S_i = max(0, S_{i-1} + y_i) equals C_i - min(0, C_1..C_i) with C the cumulative sum.
            c = np.cumsum(y)
            return c - np.minimum(np.minimum.accumulate(c), 0.0)

        up = lindley(v - self.target - self.k)
        lo = lindley(self.target - self.k - v)
        beyond = (up > self.h) | (lo > self.h)
        hits = np.flatnonzero(beyond)
        return CusumChart(v, up, lo, beyond, int(hits[0]) if hits.size else None, self)


def fit_cusum_limits(values=None, *, target=None, sigma=None, k=0.5, h=5.0, units="sigma"):
    """Phase I CUSUM design. units="sigma": k and h are multiples of σ (K = kσ, H = hσ);
    units="absolute": k and h are in the units of the values (σ not needed). target/σ default to the
    mean and MR̄/d2 of reference values."""
    if units not in ("sigma", "absolute"):
        raise ParameterError(f"units must be 'sigma' or 'absolute'; got {units!r}")
    k, h = _positive(k, "k"), _positive(h, "h")
    need_sigma = units == "sigma" and sigma is None
    if target is None or need_sigma:
        if values is None:
            raise ParameterError("give reference values, or target (and sigma when units='sigma'); got neither")
        v = _values(values, minimum=2)
        target = float(v.mean()) if target is None else target
        sigma = _mr_sigma(v)[0] if need_sigma else sigma
    if units == "sigma":
        sigma = _positive(sigma, "sigma")
        k, h = k * sigma, h * sigma
    return CusumLimits(float(target), k, h)


def cusum_chart(values, *, target, sigma=None, k=0.5, h=5.0, units="sigma"):
    """Two-sided tabular CUSUM of values about target; see fit_cusum_limits for k, h and units."""
    return fit_cusum_limits(None, target=target, sigma=sigma, k=k, h=h, units=units).apply(values)
