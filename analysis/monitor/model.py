"""The reference model: PCA of band features with Hotelling T², SPE, a score envelope and actuation flags.

Data: X of shape (n_actuations, n_slices, n_bands), band levels in dB of one event on a fixed slice grid.
Every slice of every reference actuation is one row of the PCA (rows = n_actuations·n_slices, columns = bands).

Centring (``centring``)
    "slice" (default): each slice is centred (and scaled) by the reference mean (and spread) of that slice,
    band by band, before the rows are pooled. The event's own time pattern (a click decays, a flow swells) is
    then not something the components have to spend themselves on, and a lot whose spectrum moves by a few dB
    stands out against the slice-to-slice spread of normal actuations instead of against the far larger spread
    of the event's own course. This is the centring of each time point by its mean trajectory used for batch
    processes (Nomikos & MacGregor 1994, AIChE J. 40(8); 1995, Technometrics 37(1)), with the PCA over bands
    shared by all slices. "global": one mean (and spread) per band over all rows.

Number of components (when ``n_components=None``)
    Cross-validation with folds of whole lots (leave-one-lot-out, when at least 3 lots are given) or whole
    actuations (``cv_folds`` interleaved folds otherwise). For every fold the scaling and PCA are fitted on the
    training actuations; each held-out element x_ij is predicted from the other bands of its own row by
    least-squares projection on the training loadings (missing-column imputation; the "element-wise" scheme
    recommended by Bro et al. 2008, Anal. Bioanal. Chem. 390). With orthonormal loadings P
    this has the closed form x_ij - x̂_ij = e_ij / (1 - h_j), e = z - zPPᵀ and h_j = Σ_a P_ja², so PRESS does not
    fall trivially as components are added (it grows without bound as h_j -> 1). The chosen A is the first one
    for which one more component lowers PRESS by less than ``cv_min_gain`` (2 % by default), which is never past
    the PRESS minimum.

Per-slice limits
    T²: Phase II limit for a new observation (NIST/SEMATECH e-Handbook 6.5.4.4) with n = number of reference
    rows; SPE: Jackson & Mudholkar (1979) from the residual eigenvalues (``spe_limit_``), and Box (1954) scaled
    chi-square matched to the mean and variance of the reference SPE values (``spe_limit_box_``), both at ``alpha``.

Reference envelope
    Per slice, the mean (``envelope_centre_``) and SD with n-1 (``envelope_spread_``) of each score over the
    reference actuations; a slice is outside when any component lies beyond centre ± ``envelope_k``·spread.

Actuation-level decision
    An actuation has many slices, so per-slice limits at α flag far more than α of actuations. Four
    actuation statistics are used: max T²/t2 limit, max SPE/spe limit, the trajectory distance (mean over
    slices and components of ((t - centre)/spread)²), and the event residual: the squared norm of the residual
    averaged over the event's slices, over its median in the reference. The maxima catch a short, strong
    departure; the event residual a small one that lasts the whole event (a dB or two in some bands): averaging
    the residual over n slices cuts the slice-to-slice noise by about n while a lasting shift stays whole, so
    it shows where the noisy per-slice maxima hide it. Their distribution for new in-control actuations is
    learned from reference actuations held out of the fit (same folds as above: leave-one-lot-out with >= 3
    lots, else K-fold by actuation), each fold model with its own limits and envelope. Each statistic's tail is
    fitted to its held-out values: the empirical distribution up to the 80th percentile and a generalised Pareto
    tail above it (peaks over threshold, Davison & Smith 1990), its shape ξ (``calibration_tail_shape_``) 0
    unless a likelihood-ratio test at 5 % finds a heavier tail, ξ > 0, by maximum likelihood: ξ = 0, the
    exponential tail, matched the nominal tail rate of chi-square-like statistics better than Gumbel, log-normal
    or Box scaled chi-square fits in simulation; ξ > 0 follows a heavier tail where actuations, units or lots
    mix different spreads. The held-out values are turned into
    normal scores from their ranks, their 4×4 correlation estimated, and a common tail probability α'
    (``actuation_alpha_each_``) chosen so that, under that Gaussian copula, P(any statistic beyond its
    threshold) = ``actuation_alpha``; α' is found from a fixed-seed simulation of the copula (reproducible).
    This spends α where the statistics overlap instead of the conservative Bonferroni split α/4.

    The rate is meant for an actuation of a *new* lot, and a few reference lots show only a few lot effects. With
    leave-one-lot-out folds each statistic's normal scores are split by a one-way random-effects analysis of
    variance with lots as groups into a between-lot variance σ_b² (``calibration_lot_variance_``) and a
    within-lot one σ_w² (``calibration_within_variance_``). A new actuation's score then varies by
    σ_b²(1 + Σn_i²/N²) + σ_w²(1 + 1/N) (its lot effect drawn anew, the centre known through the reference lots
    only), with Student's t of Satterthwaite's degrees of freedom for σ_b² known from g - 1 of them; each
    threshold is the fitted quantile at the normal score that a new lot's actuation exceeds with probability α'.
    When lots differ little or are many this is close to the pooled quantile; when they differ a lot and are
    few the thresholds widen. Without lot folds the thresholds are the pooled (1 - α') quantiles. An actuation is
    flagged when any statistic exceeds its threshold. The rate rests on new lots' effects being drawn like the
    reference lots' (Gaussian on the normal-score scale) and on the reference lots showing the variation within
    a lot (units, days, rigs) as it will be: what they do not show (a rig or day that varies more later) is not
    in the rate.

Resonance block (``fit(..., resonance=R)``)
    Band levels cannot see a resonance that moves a few per cent inside one band. An event may therefore carry a
    block of per-actuation resonance features (analysis.signal.resonance: peak frequencies and half-power
    bandwidths, in Hz), scaled as a block of its own: their natural logs (a shift in per cent is then one size
    everywhere), centred on the reference mean and whitened by the reference covariance (Cholesky), so that
    the fifth actuation statistic, T² = |W(r - centre)|², is Hotelling's T² of the block; it joins the four in
    the held-out calibration (each fold with its own centre and covariance) and the copula, so the actuation's
    nominal rate is kept with it. The block does not enter the PCA: a few features among tens of bands would
    weigh on the components only as much as the scaling let them, and their own covariance is the natural
    metric for them. The whitened held-out rows (``calibration_resonance_whitened_``) carry the unit-level
    limits (analysis.monitor.levels.BlockMeanLimits), where a unit's mean over its actuations sees a shift the
    single actuation cannot. A feature not found (NaN) reads as the reference median.
"""

from __future__ import annotations

import hashlib
import io
import json
import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

from analysis.errors import ModelError, ParameterError
from analysis.monitor.contributions import band_contributions
from analysis.monitor.limits import spe_limit_box, spe_limit_jackson_mudholkar, t2_limit_new, t2_limit_reference

__all__ = ["ReferenceModel", "MonitoringResult", "CrossValidationCurve", "FORMAT_NAME", "FORMAT_VERSION"]

FORMAT_NAME = "harken-reference-model"
FORMAT_VERSION = 1

_SCALINGS = ("centre", "unit", "pareto")
_CENTRINGS = ("slice", "global")
_COPULA_DRAWS = 200_000
_COPULA_SEED = 20260101


@dataclass(frozen=True)
class CrossValidationCurve:
    """PRESS for 0..max components (index = number of components), the folds used and the chosen A."""

    n_components: np.ndarray
    press: np.ndarray
    chosen: int
    folds: str
    n_folds: int


@dataclass(frozen=True)
class MonitoringResult:
    """Monitoring statistics of actuations scored against a reference model.

    Shapes: scores (n_act, n_slices, A); t2, spe, outside_envelope (n_act, n_slices); the rest (n_act,).
    t2_limit and spe_limit are the per-slice limits at the model's alpha; the *_threshold values are the
    calibrated actuation-level thresholds; slice_times_s (n_slices,) in s or None. event_residual (n_act, n_bands)
    is the residual of the slice-mean scaled band levels (the event residual's vector: which bands carry a
    departure, its signature). The resonance fields are None
    for a model without a resonance block; resonance_whitened and resonance_departure are (n_act, p): the
    features whitened by the reference covariance, and their natural-log departures from the reference centre;
    resonance_spread (p,) the reference SD of each log feature.
    """

    scores: np.ndarray
    t2: np.ndarray
    spe: np.ndarray
    t2_limit: float
    spe_limit: float
    outside_envelope: np.ndarray
    slices_outside: np.ndarray
    trajectory_distance: np.ndarray
    t2_max: np.ndarray
    spe_max: np.ndarray
    t2_max_slice: np.ndarray
    spe_max_slice: np.ndarray
    t2_ratio: np.ndarray
    spe_ratio: np.ndarray
    t2_ratio_threshold: float
    spe_ratio_threshold: float
    distance_threshold: float
    t2_flag: np.ndarray
    spe_flag: np.ndarray
    trajectory_flag: np.ndarray
    flagged: np.ndarray
    slice_times_s: np.ndarray | None
    event_spe_ratio: np.ndarray | None = None
    event_spe_threshold: float = math.inf
    event_spe_flag: np.ndarray | None = None
    event_residual: np.ndarray | None = None
    resonance_t2: np.ndarray | None = None
    resonance_threshold: float = math.inf
    resonance_flag: np.ndarray | None = None
    resonance_whitened: np.ndarray | None = None
    resonance_departure: np.ndarray | None = None
    resonance_names: tuple = ()
    resonance_spread: np.ndarray | None = None

    def raised(self, i):
        """The statistics that flag actuation i, as (statistic, value, threshold, plain-language reason) tuples;
        statistic is "t2", "spe", "trajectory", "event_residual" or "resonance". Empty when the actuation is not
        flagged."""
        n_slices = self.t2.shape[1]

        def at(s):
            s = int(s)
            return f"slice {s}" if self.slice_times_s is None else f"slice {s} ({self.slice_times_s[s]:.2f} s)"

        out = []
        if self.t2_flag[i]:
            out.append(("t2", self.t2_ratio[i], self.t2_ratio_threshold,
                        f"T² {self.t2_ratio[i]:.1f}× its limit at {at(self.t2_max_slice[i])}"))
        if self.spe_flag[i]:
            out.append(("spe", self.spe_ratio[i], self.spe_ratio_threshold,
                        f"SPE {self.spe_ratio[i]:.1f}× its limit at {at(self.spe_max_slice[i])}"))
        if self.trajectory_flag[i]:
            out.append(("trajectory", self.trajectory_distance[i], self.distance_threshold,
                        f"score trajectory outside the reference envelope on {int(self.slices_outside[i])} of "
                        f"{n_slices} slices (distance {self.trajectory_distance[i]:.1f}, threshold "
                        f"{self.distance_threshold:.1f})"))
        if self.event_spe_flag is not None and self.event_spe_flag[i]:
            out.append(("event_residual", self.event_spe_ratio[i], self.event_spe_threshold,
                        f"the event's mean spectrum departs from the model: residual {self.event_spe_ratio[i]:.1f}× "
                        f"its reference median (threshold {self.event_spe_threshold:.1f}), a small change that lasts "
                        "the whole event"))
        if self.resonance_flag is not None and self.resonance_flag[i]:
            d = self.resonance_departure[i]
            j = int(np.argmax(np.abs(d) / self.resonance_spread)) if self.resonance_spread is not None else 0
            out.append(("resonance", self.resonance_t2[i], self.resonance_threshold,
                        f"the resonances depart: T² {self.resonance_t2[i]:.1f} (threshold "
                        f"{self.resonance_threshold:.1f}), most the {self.resonance_names[j]} at "
                        f"{100.0 * math.expm1(float(d[j])):+.1f} % of the reference's"))
        return out

    def reasons(self, i):
        """Plain-language reasons why actuation i is flagged (empty list when it is not)."""
        return [why for *_, why in self.raised(i)]


def _scale_fit(x3, scaling, centring="global"):
    """Mean and scale: (n_bands,) over all rows ("global") or (n_slices, n_bands) per slice ("slice")."""
    data = x3.reshape(-1, x3.shape[2]) if centring == "global" else x3
    mean = data.mean(axis=0)
    if scaling == "centre":
        return mean, np.ones_like(mean)
    sd = data.std(axis=0, ddof=1)
    sd = np.where(sd > 0, sd, 1.0)  # a constant band carries no information; leave it centred, unscaled
    return mean, (sd if scaling == "unit" else np.sqrt(sd))


def _scaled_rows(x3, mean, scale):
    """(n·s, b) rows of (x - mean) / scale; mean and scale are (b,) or (s, b)."""
    n, s, b = x3.shape
    return ((x3 - mean) / scale).reshape(n * s, b)


def _pca(z):
    """Eigenvalues (n-1 divisor, all n_bands of them) and loadings (n_bands, n_bands) of scaled rows z."""
    _, s, vt = np.linalg.svd(z, full_matrices=False)
    lam = np.zeros(z.shape[1])
    lam[: s.size] = s**2 / (z.shape[0] - 1)
    v = np.zeros((z.shape[1], z.shape[1]))
    v[:, : vt.shape[0]] = vt.T
    # Deterministic signs: the largest-magnitude loading of each component is positive.
    big = np.argmax(np.abs(v), axis=0)
    sign = np.sign(v[big, np.arange(v.shape[1])])
    return lam, v * np.where(sign == 0, 1.0, sign)


def _project(x3, mean, scale, loadings, eigenvalues, *, residual=False):
    """Scores (n, s, A), T² (n, s), SPE (n, s) and the squared norm of the slice-mean residual (n,); with
    ``residual`` also the slice-mean residual itself (n, b).

    One matmul for the scores, one for the reconstruction."""
    n, s, b = x3.shape
    if np.ndim(mean) == 1:
        z = x3.reshape(n * s, b) - mean
        z /= scale
    else:
        z = _scaled_rows(x3, mean, scale)
    t = z @ loadings
    t2 = np.einsum("ij,ij->i", t, t / eigenvalues)
    z -= t @ loadings.T
    spe = np.einsum("ij,ij->i", z, z)
    e_mean = z.reshape(n, s, b).mean(axis=1)
    out = t.reshape(n, s, -1), t2.reshape(n, s), spe.reshape(n, s), np.einsum("ij,ij->i", e_mean, e_mean)
    return (*out, e_mean) if residual else out


def _envelope(scores):
    centre = scores.mean(axis=0)
    spread = scores.std(axis=0, ddof=1)
    floor = 1e-9 * max(float(np.max(spread)), 1e-300)  # keep the distance finite on a degenerate slice
    return centre, np.maximum(spread, floor)


def _actuation_stats(scores, t2, spe, event_spe, t2_limit, spe_limit, event_spe_ref, centre, spread):
    """(max T² ratio, max SPE ratio, trajectory distance, event residual ratio), each (n_act,)."""
    d = (scores - centre) / spread
    return (t2.max(axis=1) / t2_limit, spe.max(axis=1) / spe_limit, np.mean(d**2, axis=(1, 2)),
            event_spe / event_spe_ref)


def _block_fit(r):
    """(centre (p,), whitening W (p, p), fill (p,)) of a block of log features r (n, p): w = W·(r - centre) has
    identity covariance over the reference rows. A missing value (NaN) is filled with its column's median."""
    fill = np.array([np.median(c[np.isfinite(c)]) if np.any(np.isfinite(c)) else 0.0 for c in r.T])
    r = np.where(np.isfinite(r), r, fill)
    centre = r.mean(axis=0)
    cov = np.atleast_2d(np.cov(r, rowvar=False, ddof=1))
    # a feature constant in the reference (or two that move together) keeps the inverse finite
    ridge = 1e-9 * max(float(np.trace(cov)) / cov.shape[0], 1e-12)
    whiten = np.linalg.inv(np.linalg.cholesky(cov + ridge * np.eye(cov.shape[0])))
    return centre, whiten, fill


def _block_stats(r, centre, whiten, fill):
    """(T² (n,), whitened rows (n, p), departures r - centre (n, p)) of log features r (n, p)."""
    d = np.where(np.isfinite(r), r, fill) - centre
    w = d @ whiten.T
    return np.einsum("ij,ij->i", w, w), w, d


def _median_ref(values):
    return max(float(np.median(values)), 1e-300)


def _oneway_anova(z, groups):
    """One-way analysis of variance of z (N,) by groups (N,): (MS_between, MS_within, n0, g, Σn_i²/N²).

    n0 = (N - Σn_i²/N)/(g - 1) is the group size in E[MS_between] = σ_w² + n0·σ_b² (n for balanced groups), so
    σ_b² = (MS_between - MS_within)/n0 and σ_w² = MS_within by the method of moments (Montgomery, Design and
    Analysis of Experiments, the random-effects model of ch. 3; Searle, Casella & McCulloch 1992, Variance
    Components, §3.6, for unbalanced groups)."""
    _, inv = np.unique(groups, return_inverse=True)
    n_i = np.bincount(inv).astype(float)
    g, big_n = n_i.size, float(z.size)
    means = np.bincount(inv, weights=z) / n_i
    ms_between = float(np.sum(n_i * (means - z.mean()) ** 2) / (g - 1))
    ms_within = float(np.sum((z - means[inv]) ** 2) / (big_n - g))
    n0 = float((big_n - np.sum(n_i**2) / big_n) / (g - 1))
    return ms_between, ms_within, n0, g, float(np.sum(n_i**2) / big_n**2)


def _gpd_fit_heavy(excess):
    """(ξ̂, β̂, deviance): the generalised Pareto fit to excesses (n,) > 0 by maximum likelihood over ξ > 0, and
    2(ℓ(ξ̂, β̂) - ℓ(0, mean excess)), its gain over the exponential.

    With θ = ξ/β the likelihood is maximised over ξ in closed form, ξ(θ) = mean(log(1 + θx)), leaving a
    one-dimensional profile ℓ(θ) = -n·log(ξ(θ)/θ) - n - Σlog(1 + θx) (Grimshaw 1993, Technometrics 35(2)); θ -> 0
    is the exponential. θ is searched on a log scale between 1e-6 and 1e4 over the mean excess."""
    n, mean = excess.size, float(excess.mean())

    def neg_profile(log_theta):
        theta = math.exp(log_theta) / mean
        s = float(np.sum(np.log1p(theta * excess)))
        return n * math.log(s / (n * theta)) + n + s

    best = optimize.minimize_scalar(neg_profile, bounds=(math.log(1e-6), math.log(1e4)), method="bounded",
                                    options={"xatol": 1e-9})
    theta = math.exp(best.x) / mean
    xi = float(np.mean(np.log1p(theta * excess)))
    return xi, xi / theta, 2.0 * max(-float(best.fun) + n * math.log(mean) + n, 0.0)


class _Tail:
    """Empirical distribution with a generalised Pareto tail above its 80th percentile u.

    Excesses over a high threshold are approximately generalised Pareto (Pickands 1975, Ann. Stat. 3):
    P(X > x) = f·(1 + ξ(x - u)/β)^(-1/ξ) for x > u, f = 0.2 (Davison & Smith 1990, JRSS B 52). ξ = 0, the
    exponential tail f·exp(-(x - u)/β) with β the mean excess, is the tail of maxima and means of chi-square-like
    values; a mixture of spreads (actuations, units or lots that vary more than others) makes it heavier, ξ > 0;
    ξ < 0 would put an upper end point on statistics that have none. So ξ = 0 unless the maximum-likelihood ξ̂ is
    > 0 and the deviance 2(ℓ(ξ̂, β̂) - ℓ(0, mean excess)) rejects ξ = 0 at ``shape_test_alpha``: the null lies on
    the edge of ξ ≥ 0, where the deviance is a 50:50 mixture of χ²₀ and χ²₁ (Self & Liang 1987, JASA 82), so
    the critical value is the χ²₁ point of 2·alpha. (In simulation, with 128 excesses, the tail rate at 0.14 %
    was 0.95-1.0 times the nominal one for ξ = 0 and 1.4-1.6 times for ξ = 0.2-0.4, where ξ fixed at 0 gave
    2.6-3.9 times and ξ estimated freely 1.3-1.65 times.)
    """

    tail_fraction = 0.2
    min_excesses = 10
    shape_test_alpha = 0.05

    def __init__(self, values):
        self.values = np.sort(np.asarray(values, dtype=float))
        self.u = float(np.quantile(self.values, 1.0 - self.tail_fraction))
        excess = self.values[self.values > self.u] - self.u
        self.beta = float(excess.mean()) if excess.size else 0.0
        self.shape = 0.0
        if excess.size >= self.min_excesses and self.beta > 0:
            xi, beta, deviance = _gpd_fit_heavy(excess)
            if deviance > stats.chi2.isf(2 * self.shape_test_alpha, 1):
                self.shape, self.beta = xi, beta

    def ppf(self, p):
        q = 1.0 - p
        if q >= self.tail_fraction:
            return float(np.quantile(self.values, p))
        r = self.tail_fraction / q
        if self.shape == 0.0:
            return self.u + self.beta * math.log(r)
        return self.u + self.beta * math.expm1(self.shape * math.log(r)) / self.shape


def _new_lot_level(z, lots, q):
    """(σ_b², σ_w², level) for normal scores z (N,) of one statistic held out by lot: the level, in spreads of
    the pooled scores, that an actuation of a new lot exceeds with probability q under z = μ + b_lot + e.

    The new lot's effect is drawn anew and μ is known only through the reference lots, so the new actuation's
    deviation from the pooled mean has variance V = σ_b²(1 + Σn_i²/N²) + σ_w²(1 + 1/N); the pooled scores, to
    which the marginal is fitted, spread only as much as the reference lots' own effects happen to. V is a sum
    of multiples of MS_between (g - 1 degrees of freedom) and MS_within (N - g); its uncertainty is carried by
    Student's t with Satterthwaite's degrees of freedom (Satterthwaite 1946, Biometrics Bull. 2), which tends to
    the normal when lots differ little or are many."""
    ms_b, ms_w, n0, g, w2 = _oneway_anova(z, lots)
    big_n = float(z.size)
    if big_n - g < 1:  # one actuation per lot: lot and actuation cannot be told apart
        return 0.0, 0.0, float(stats.norm.isf(q))
    var_b = max((ms_b - ms_w) / n0, 0.0)
    pooled = float(np.mean((z - z.mean()) ** 2))
    if var_b > 0.0:
        a_b = (1.0 + w2) / n0
        a_w = 1.0 + 1.0 / big_n - a_b
        v = a_b * ms_b + a_w * ms_w
        dof = v**2 / ((a_b * ms_b) ** 2 / (g - 1) + (a_w * ms_w) ** 2 / (big_n - g))
    else:
        v, dof = ms_w * (1.0 + 1.0 / big_n), big_n - g
    if not (pooled > 0.0 and v > 0.0):  # constant scores: nothing to widen
        return var_b, ms_w, float(stats.norm.isf(q))
    return var_b, ms_w, float(stats.t.isf(q, dof)) * math.sqrt(v / pooled)


def _calibrate(held_out, actuation_alpha, lots=None):
    """Thresholds for each row of held_out (k statistics, m actuations) with P(any exceeds) = actuation_alpha
    for an actuation of a new lot; lots: (m,) lot labels of the held-out actuations (leave-one-lot-out) or None.

    Returns (thresholds, common tail probability, between-lot variances, within-lot variances, tail shapes)."""
    k, m = held_out.shape
    # Normal scores from ranks (van der Waerden) carry the dependence between the statistics.
    ranks = np.argsort(np.argsort(held_out, axis=1), axis=1) + 1.0
    z = stats.norm.ppf(ranks / (m + 1.0))
    corr = np.corrcoef(z)
    if not np.all(np.isfinite(corr)):
        corr = np.eye(k)
    chol = np.linalg.cholesky(corr + 1e-9 * np.eye(k))
    draws = np.random.default_rng(_COPULA_SEED).standard_normal((_COPULA_DRAWS, k)) @ chol.T
    c = float(np.quantile(draws.max(axis=1), 1.0 - actuation_alpha))
    q = float(stats.norm.sf(c))
    var_lot, var_within, level = np.zeros(k), np.zeros(k), np.full(k, c)
    if lots is not None and np.unique(lots).size >= 2:
        for j in range(k):
            var_lot[j], var_within[j], level[j] = _new_lot_level(z[j], lots, q)
    tails = [_Tail(v) for v in held_out]
    thresholds = tuple(t.ppf(float(stats.norm.cdf(lv))) for t, lv in zip(tails, level))
    return thresholds, q, var_lot, var_within, np.array([t.shape for t in tails])


def _check_x(x, name="X"):
    x = np.asarray(x, dtype=float)
    if x.ndim != 3:
        raise ParameterError(f"{name} must have shape (n_actuations, n_slices, n_bands); got shape {x.shape}")
    if not np.all(np.isfinite(x)):
        raise ParameterError(f"{name} must be finite; it contains {int(np.sum(~np.isfinite(x)))} NaN/inf values")
    return x


def _is_int(v):
    return isinstance(v, (int, np.integer)) and not isinstance(v, bool)


def _is_real(v):
    return isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool) and math.isfinite(v)


class ReferenceModel:
    """PCA reference model of band features for one event; see the module docstring for the methods.

    Parameters (keyword only): n_components (None: chosen by cross-validation), max_components,
    scaling ("centre" | "unit" | "pareto"), centring ("slice" | "global"), cv_folds (folds by actuation when lots
    are not used), cv_min_gain (relative PRESS gain needed to add a component), alpha (per-slice limits),
    envelope_k (envelope half-width in spreads), actuation_alpha (actuation false-alarm rate).
    """

    def __init__(
        self,
        *,
        n_components=None,
        max_components=10,
        scaling="unit",
        centring="slice",
        cv_folds=7,
        cv_min_gain=0.02,
        alpha=0.01,
        envelope_k=3.0,
        actuation_alpha=0.01,
    ):
        self.n_components = n_components
        self.max_components = max_components
        self.scaling = scaling
        self.centring = centring
        self.cv_folds = cv_folds
        self.cv_min_gain = cv_min_gain
        self.alpha = alpha
        self.envelope_k = envelope_k
        self.actuation_alpha = actuation_alpha

    _PARAMS = ("n_components", "max_components", "scaling", "centring", "cv_folds", "cv_min_gain", "alpha",
               "envelope_k", "actuation_alpha")

    def get_params(self):
        return {k: getattr(self, k) for k in self._PARAMS}

    def __repr__(self):
        return "ReferenceModel(" + ", ".join(f"{k}={v!r}" for k, v in self.get_params().items()) + ")"

    # ------------------------------------------------------------------ validation
    def _validate_params(self):
        def bad(name, allowed):
            raise ParameterError(f"{name} must be {allowed}; got {getattr(self, name)!r}")

        if self.n_components is not None and not (_is_int(self.n_components) and self.n_components >= 1):
            bad("n_components", "None or an integer >= 1")
        if not (_is_int(self.max_components) and self.max_components >= 1):
            bad("max_components", "an integer >= 1")
        if self.scaling not in _SCALINGS:
            bad("scaling", "one of " + ", ".join(repr(s) for s in _SCALINGS))
        if self.centring not in _CENTRINGS:
            bad("centring", "one of " + ", ".join(repr(s) for s in _CENTRINGS))
        if not (_is_int(self.cv_folds) and self.cv_folds >= 2):
            bad("cv_folds", "an integer >= 2")
        if not (_is_real(self.cv_min_gain) and 0.0 <= self.cv_min_gain < 1.0):
            bad("cv_min_gain", "a number with 0 <= cv_min_gain < 1")
        for name in ("alpha", "actuation_alpha"):
            if not (_is_real(getattr(self, name)) and 0.0 < getattr(self, name) < 1.0):
                bad(name, f"a number with 0 < {name} < 1")
        if not (_is_real(self.envelope_k) and self.envelope_k > 0):
            bad("envelope_k", "a number > 0")

    def _check_fitted(self):
        if not hasattr(self, "loadings_"):
            raise ModelError(f"this {type(self).__name__} is not fitted; call fit(...) first")

    def _check_shape(self, x):
        _, s, b = x.shape
        if b != self.n_bands_:
            raise ModelError(f"X has {b} bands but the reference model was fitted with {self.n_bands_} bands")
        if s != self.n_slices_:
            raise ModelError(f"X has {s} slices but the reference model was fitted with {self.n_slices_} slices")

    # ------------------------------------------------------------------ fit
    def fit(self, X, *, lots=None, slice_times_s=None, band_centres_hz=None, resonance=None,
            resonance_names=None):
        """Learn scaling, loadings, limits, envelope and actuation thresholds from reference actuations.

        X: (n_actuations, n_slices, n_bands) band levels in dB; lots: (n_actuations,) lot labels or None;
        slice_times_s: (n_slices,) slice times in s; band_centres_hz: (n_bands,) band centres in Hz;
        resonance: (n_actuations, p) positive resonance features (frequencies and bandwidths in Hz; NaN where
        one was not found) or None, with resonance_names: p names for messages. Returns self.
        """
        self._validate_params()
        x = _check_x(X)
        n_act, n_slices, n_bands = x.shape
        r = self._check_resonance(resonance, n_act)
        if r is not None:
            names = tuple(str(v) for v in (resonance_names if resonance_names is not None else
                                           [f"resonance feature {j + 1}" for j in range(r.shape[1])]))
            if len(names) != r.shape[1]:
                raise ParameterError(f"resonance_names must name the {r.shape[1]} resonance features; got "
                                     f"{len(names)}")
            if r.shape[1] >= n_act - 1:
                raise ParameterError(f"a resonance block of {r.shape[1]} features needs more than "
                                     f"{r.shape[1] + 1} reference actuations; got {n_act}")
        if n_act < 3 or n_bands < 2:
            raise ParameterError(f"X needs at least 3 actuations and 2 bands; got shape {x.shape}")
        if slice_times_s is not None:
            slice_times_s = np.asarray(slice_times_s, dtype=float)
            if slice_times_s.shape != (n_slices,):
                raise ParameterError(f"slice_times_s must have shape ({n_slices},); got {slice_times_s.shape}")
        if band_centres_hz is not None:
            band_centres_hz = np.asarray(band_centres_hz, dtype=float)
            if band_centres_hz.shape != (n_bands,):
                raise ParameterError(f"band_centres_hz must have shape ({n_bands},); got {band_centres_hz.shape}")
        folds, fold_kind, lot_labels = self._folds(n_act, lots)
        n_rows = n_act * n_slices
        a_cap = min(self.max_components, n_bands - 1, n_rows - 2)
        if self.n_components is not None and self.n_components > min(n_bands - 1, n_rows - 2):
            raise ParameterError(
                f"n_components must be at most {min(n_bands - 1, n_rows - 2)} (n_bands - 1) for this X; "
                f"got {self.n_components}"
            )
        a_cap = max(a_cap, self.n_components or 1)

        # Fold models are fitted once and reused for PRESS and for the actuation calibration.
        fold_fits = []
        press = np.zeros(a_cap + 1)
        for test in folds:
            train = np.setdiff1d(np.arange(n_act), test)
            mean, scale = _scale_fit(x[train], self.scaling, self.centring)
            lam, v = _pca(_scaled_rows(x[train], mean, scale))
            fold_fits.append((train, test, mean, scale, lam, v))
            z = _scaled_rows(x[test], mean, scale)
            e = z.copy()
            h = np.zeros(n_bands)
            press[0] += np.sum(z**2)
            for a in range(1, a_cap + 1):
                p = v[:, a - 1]
                e -= np.outer(z @ p, p)
                h += p**2
                press[a] += np.inf if np.any(h >= 1.0 - 1e-10) else np.sum((e / (1.0 - h)) ** 2)

        if self.n_components is None:
            chosen = a_cap
            for a in range(1, a_cap):
                if not press[a + 1] < (1.0 - self.cv_min_gain) * press[a]:
                    chosen = a
                    break
        else:
            chosen = int(self.n_components)
        a = chosen

        # Final model on all reference rows.
        mean, scale = _scale_fit(x, self.scaling, self.centring)
        lam, v = _pca(_scaled_rows(x, mean, scale))
        self.mean_, self.scale_ = mean, scale
        self.loadings_ = v[:, :a].copy()
        self.eigenvalues_ = lam[:a].copy()
        self.residual_eigenvalues_ = lam[a:].copy()
        self.explained_variance_ratio_ = lam[:a] / lam.sum()
        self.n_components_ = a
        self.n_reference_ = n_rows
        self.n_actuations_, self.n_slices_, self.n_bands_ = n_act, n_slices, n_bands
        self.slice_times_s_ = slice_times_s
        self.band_centres_hz_ = band_centres_hz
        self.reference_lots_ = lot_labels
        self.cv_ = CrossValidationCurve(np.arange(a_cap + 1), press, chosen, fold_kind, len(folds))
        self.t2_limit_ = t2_limit_new(n_rows, a, self.alpha)
        # For the reference rows themselves (Phase I, Tracy et al. 1992): the beta form.
        self.t2_limit_reference_ = t2_limit_reference(n_rows, a, self.alpha)
        self.spe_limit_ = spe_limit_jackson_mudholkar(self.residual_eigenvalues_, self.alpha)
        scores, t2, spe, event_spe = _project(x, mean, scale, self.loadings_, self.eigenvalues_)
        self.event_spe_reference_ = _median_ref(event_spe)
        self.spe_limit_box_ = spe_limit_box(spe_mean=float(spe.mean()), spe_var=float(spe.var(ddof=1)),
                                            alpha=self.alpha)
        self.envelope_centre_, self.envelope_spread_ = _envelope(scores)
        self.resonance_names_ = names if r is not None else ()
        self.resonance_centre_ = self.resonance_whiten_ = self.resonance_fill_ = None
        self.calibration_resonance_t2_ = self.calibration_resonance_whitened_ = None
        self.resonance_threshold_ = math.inf
        if r is not None:
            self.resonance_centre_, self.resonance_whiten_, self.resonance_fill_ = _block_fit(r)

        # Actuation-level calibration on held-out actuations (module docstring).
        held = np.zeros((4 if r is None else 5, n_act))
        held_w = None if r is None else np.zeros_like(r)
        for train, test, f_mean, f_scale, f_lam, f_v in fold_fits:
            p_f, lam_f = f_v[:, :a], f_lam[:a]
            sc_tr, _, _, ev_tr = _project(x[train], f_mean, f_scale, p_f, lam_f)
            centre, spread = _envelope(sc_tr)
            t2_lim = t2_limit_new(train.size * n_slices, a, self.alpha)
            spe_lim = spe_limit_jackson_mudholkar(f_lam[a:], self.alpha)
            sc, t2_h, spe_h, ev_h = _project(x[test], f_mean, f_scale, p_f, lam_f)
            held[:4, test] = _actuation_stats(sc, t2_h, spe_h, ev_h, t2_lim, spe_lim, _median_ref(ev_tr), centre,
                                              spread)
            if r is not None:
                held[4, test], held_w[test], _ = _block_stats(r[test], *_block_fit(r[train]))
        (self.calibration_t2_ratio_, self.calibration_spe_ratio_, self.calibration_distance_,
         self.calibration_event_spe_ratio_) = held[:4].copy()
        if r is not None:
            self.calibration_resonance_t2_, self.calibration_resonance_whitened_ = held[4].copy(), held_w
        (thresholds, self.actuation_alpha_each_, self.calibration_lot_variance_, self.calibration_within_variance_,
         self.calibration_tail_shape_) = _calibrate(held, self.actuation_alpha,
                                                    lots=np.asarray(lots) if fold_kind == "lot" else None)
        (self.t2_ratio_threshold_, self.spe_ratio_threshold_, self.distance_threshold_,
         self.event_spe_threshold_) = thresholds[:4]
        if r is not None:
            self.resonance_threshold_ = thresholds[4]
        return self

    def _check_resonance(self, resonance, n_act):
        """The block's natural logs (n_act, p), or None; the block's shape and values checked."""
        if resonance is None:
            return None
        r = np.asarray(resonance, dtype=float)
        if r.ndim != 2 or r.shape[0] != n_act or r.shape[1] < 1:
            raise ParameterError(f"resonance must have shape ({n_act}, n_features) (one row per actuation); got "
                                 f"shape {r.shape}")
        bad = np.isfinite(r) & (r <= 0)
        if np.any(bad) or np.any(np.isinf(r)):
            raise ParameterError(f"resonance features must be positive (Hz) or NaN (not found); got "
                                 f"{int(np.sum(bad | np.isinf(r)))} non-positive or infinite values")
        return np.log(np.where(np.isfinite(r), r, np.nan))

    def _folds(self, n_act, lots):
        """Held-out actuation index sets: leave-one-lot-out with >= 3 lots, else interleaved K-fold."""
        lot_labels = None
        if lots is not None:
            lots = np.asarray(lots)
            if lots.shape != (n_act,):
                raise ParameterError(f"lots must have shape ({n_act},) (one label per actuation); got {lots.shape}")
            uniq, inverse = np.unique(lots, return_inverse=True)
            lot_labels = [str(u) for u in uniq]
            if uniq.size >= 3:
                return [np.flatnonzero(inverse == g) for g in range(uniq.size)], "lot", lot_labels
        k = min(self.cv_folds, n_act)
        idx = np.arange(n_act)
        return [idx[idx % k == f] for f in range(k)], "actuation", lot_labels

    # ------------------------------------------------------------------ score
    @property
    def has_resonance(self) -> bool:
        """Whether the model has a resonance block (then score() needs the actuations' resonance features)."""
        return getattr(self, "resonance_centre_", None) is not None

    def score(self, X, *, resonance=None):
        """Score actuations X (n_act, n_slices, n_bands) against the model; returns a MonitoringResult.

        resonance: (n_act, p) resonance features as given to fit(), required when the model has a resonance
        block (and ignored when it has none)."""
        self._check_fitted()
        x = _check_x(X)
        self._check_shape(x)
        block = {}
        if self.has_resonance:
            if resonance is None:
                raise ModelError(f"this model has a resonance block ({', '.join(self.resonance_names_)}); score() "
                                 "needs the actuations' resonance features")
            r = self._check_resonance(resonance, x.shape[0])
            if r.shape[1] != self.resonance_centre_.size:
                raise ModelError(f"resonance has {r.shape[1]} features but the model was fitted with "
                                 f"{self.resonance_centre_.size}")
            t2_r, w_r, d_r = _block_stats(r, self.resonance_centre_, self.resonance_whiten_, self.resonance_fill_)
            block = dict(resonance_t2=t2_r, resonance_threshold=self.resonance_threshold_,
                         resonance_flag=t2_r > self.resonance_threshold_, resonance_whitened=w_r,
                         resonance_departure=d_r, resonance_names=tuple(self.resonance_names_),
                         resonance_spread=np.sqrt(np.sum(np.linalg.inv(self.resonance_whiten_) ** 2, axis=1)))
        scores, t2, spe, event_spe, e_mean = _project(x, self.mean_, self.scale_, self.loadings_, self.eigenvalues_,
                                                      residual=True)
        dev = np.abs(scores - self.envelope_centre_) > self.envelope_k * self.envelope_spread_
        outside = dev.any(axis=2)
        t2_ratio, spe_ratio, dist, event_spe_ratio = _actuation_stats(
            scores, t2, spe, event_spe, self.t2_limit_, self.spe_limit_, self.event_spe_reference_,
            self.envelope_centre_, self.envelope_spread_,
        )
        event_spe_flag = event_spe_ratio > self.event_spe_threshold_
        t2_flag = t2_ratio > self.t2_ratio_threshold_
        spe_flag = spe_ratio > self.spe_ratio_threshold_
        traj_flag = dist > self.distance_threshold_
        return MonitoringResult(
            scores=scores,
            t2=t2,
            spe=spe,
            t2_limit=self.t2_limit_,
            spe_limit=self.spe_limit_,
            outside_envelope=outside,
            slices_outside=outside.sum(axis=1),
            trajectory_distance=dist,
            t2_max=t2.max(axis=1),
            spe_max=spe.max(axis=1),
            t2_max_slice=t2.argmax(axis=1),
            spe_max_slice=spe.argmax(axis=1),
            t2_ratio=t2_ratio,
            spe_ratio=spe_ratio,
            t2_ratio_threshold=self.t2_ratio_threshold_,
            spe_ratio_threshold=self.spe_ratio_threshold_,
            distance_threshold=self.distance_threshold_,
            t2_flag=t2_flag,
            spe_flag=spe_flag,
            trajectory_flag=traj_flag,
            flagged=t2_flag | spe_flag | traj_flag | event_spe_flag | block.get("resonance_flag", False),
            slice_times_s=self.slice_times_s_,
            event_spe_ratio=event_spe_ratio,
            event_spe_threshold=self.event_spe_threshold_,
            event_spe_flag=event_spe_flag,
            event_residual=e_mean,
            **block,
        )

    def contributions(self, x_slice, *, slice_index=None):
        """Band contributions to T² and SPE for one slice row (n_bands,) or a batch (n_rows, n_bands).

        With slice centring a row needs its slice: give ``slice_index`` (an int, or one per row), or pass a
        whole actuation (n_slices, n_bands). Computed on the scaled data; each row's contributions sum to its
        T² and SPE (in the model's scaled units, not dB).
        """
        self._check_fitted()
        x = np.asarray(x_slice, dtype=float)
        if x.ndim not in (1, 2) or x.shape[-1] != self.n_bands_:
            raise ModelError(
                f"x_slice must have shape ({self.n_bands_},) or (n_rows, {self.n_bands_}) for this reference "
                f"model; got shape {x.shape}"
            )
        mean, scale = np.asarray(self.mean_), np.asarray(self.scale_)
        if mean.ndim == 2:
            if slice_index is None:
                if x.ndim == 2 and x.shape[0] == self.n_slices_:
                    slice_index = np.arange(self.n_slices_)
                else:
                    raise ModelError(
                        "this reference model centres each slice by its own reference mean: give slice_index "
                        f"(0..{self.n_slices_ - 1}) or a whole actuation of shape ({self.n_slices_}, {self.n_bands_})"
                    )
            idx = np.asarray(slice_index)
            if np.any(idx < 0) or np.any(idx >= self.n_slices_):
                raise ModelError(f"slice_index must lie in 0..{self.n_slices_ - 1}; got {slice_index!r}")
            mean, scale = mean[idx], scale[idx]
        z = (x - mean) / scale
        return band_contributions(z, self.loadings_, self.eigenvalues_, band_centres_hz=self.band_centres_hz_)

    def band_envelope(self):
        """The reference's band levels per slice: (mean (n_slices, n_bands), spread (n_slices, n_bands) or None),
        in the features' level unit. The spread is each band's reference SD per slice (under global centring,
        one per band for every slice), recovered from the scaling: the scale itself for unit scaling, its square
        for Pareto scaling; plain centring keeps no spread (None). A band constant in the reference reads 1."""
        self._check_fitted()
        mean = np.asarray(self.mean_, dtype=float)
        scale = np.asarray(self.scale_, dtype=float)
        if mean.ndim == 1:
            mean = np.broadcast_to(mean, (int(self.n_slices_), mean.size)).copy()
            scale = np.broadcast_to(scale, mean.shape).copy()
        if self.scaling == "unit":
            return mean, scale
        if self.scaling == "pareto":
            return mean, scale**2
        return mean, None

    # ------------------------------------------------------------------ persistence
    _ARRAYS = ("mean_", "scale_", "loadings_", "eigenvalues_", "residual_eigenvalues_", "explained_variance_ratio_",
               "envelope_centre_", "envelope_spread_", "calibration_t2_ratio_", "calibration_spe_ratio_",
               "calibration_distance_", "calibration_event_spe_ratio_", "slice_times_s_", "band_centres_hz_",
               "calibration_lot_variance_", "calibration_within_variance_", "calibration_tail_shape_",
               "resonance_centre_", "resonance_whiten_", "resonance_fill_", "calibration_resonance_t2_",
               "calibration_resonance_whitened_")
    # The last three came after the first models were stored: an array missing from an older file loads as None
    # (its thresholds, stored as scalars, score as they did), so the format version stays 1; so do the
    # resonance block's (a model without one has none).
    _SCALARS = ("n_components_", "n_reference_", "n_actuations_", "n_slices_", "n_bands_", "t2_limit_",
                "t2_limit_reference_",
                "spe_limit_", "spe_limit_box_", "t2_ratio_threshold_", "spe_ratio_threshold_",
                "distance_threshold_", "event_spe_threshold_", "event_spe_reference_", "actuation_alpha_each_")

    def to_documents(self, *, metadata=None):
        """The model as (JSON text, npz bytes): parameters, scalars, limits and caller metadata in the JSON, the
        arrays in the npz (plain numeric arrays only, no pickled objects; its SHA-256 is recorded in the JSON).

        metadata: JSON-serialisable dict supplied by the caller (e.g. profile, event, lots, created_at,
        created_by). Writing them to files is the caller's business (analysis.modelfile).
        """
        self._check_fitted()
        if metadata is not None and not isinstance(metadata, dict):
            raise ParameterError(f"metadata must be a dict or None; got {type(metadata).__name__}")
        arrays = {k.rstrip("_"): np.asarray(getattr(self, k), dtype=float)
                  for k in self._ARRAYS if getattr(self, k, None) is not None}
        buf = io.BytesIO()
        np.savez(buf, **arrays)
        blob = buf.getvalue()
        doc = {
            "format": FORMAT_NAME,
            "format_version": FORMAT_VERSION,
            "arrays_sha256": hashlib.sha256(blob).hexdigest(),
            "parameters": self.get_params(),
            "learned": {k: (int(v) if _is_int(v) else float(v)) for k, v in
                        ((k, getattr(self, k)) for k in self._SCALARS)},
            "reference_lots": self.reference_lots_,
            "resonance": ({"names": list(self.resonance_names_), "threshold": float(self.resonance_threshold_)}
                          if self.has_resonance else None),
            "cross_validation": {
                "press": [float(p) if np.isfinite(p) else None for p in self.cv_.press],
                "chosen": self.cv_.chosen, "folds": self.cv_.folds, "n_folds": self.cv_.n_folds,
            },
            "metadata": metadata if metadata is not None else (getattr(self, "metadata_", None) or {}),
        }
        try:
            text = json.dumps(doc, indent=2, ensure_ascii=False, allow_nan=False)
        except (TypeError, ValueError) as exc:
            raise ParameterError(f"metadata must be JSON-serialisable: {exc}") from exc
        return text, blob

    @classmethod
    def from_documents(cls, json_text, npz_bytes, *, source="reference model"):
        """A model from to_documents() output; ``source`` names it in errors (a file or store row)."""
        try:
            doc = json.loads(json_text)
        except json.JSONDecodeError as exc:
            raise ModelError(f"{source}: not a reference model (invalid JSON: {exc.msg})") from exc
        if not isinstance(doc, dict) or doc.get("format") != FORMAT_NAME:
            raise ModelError(f"{source}: not a reference model (format is not {FORMAT_NAME!r})")
        version = doc.get("format_version")
        if not _is_int(version) or version > FORMAT_VERSION or version < 1:
            raise ModelError(
                f"{source}: format version {version!r} is not supported; this program reads version "
                f"{FORMAT_VERSION} (a newer model needs a newer Harken)"
            )
        if hashlib.sha256(npz_bytes).hexdigest() != doc.get("arrays_sha256"):
            raise ModelError(f"{source}: arrays do not match the checksum in the model's JSON (file changed?)")
        try:
            with np.load(io.BytesIO(npz_bytes), allow_pickle=False) as npz:
                arrays = {k: npz[k] for k in npz.files}
            model = cls(**doc["parameters"])
            for k in cls._ARRAYS:
                setattr(model, k, arrays.get(k.rstrip("_")))
            for k in cls._SCALARS:
                setattr(model, k, doc["learned"][k])
            cv = doc["cross_validation"]
            press = np.array([np.inf if p is None else p for p in cv["press"]], dtype=float)
            model.cv_ = CrossValidationCurve(np.arange(press.size), press, cv["chosen"], cv["folds"], cv["n_folds"])
            model.reference_lots_ = doc.get("reference_lots")
            block = doc.get("resonance")
            model.resonance_names_, model.resonance_threshold_ = (), math.inf
            if block is not None:
                model.resonance_names_ = tuple(str(v) for v in block["names"])
                model.resonance_threshold_ = float(block["threshold"])
                if model.resonance_centre_ is None or model.resonance_centre_.size != len(model.resonance_names_):
                    raise ValueError("the resonance block's arrays do not match its names")
            elif model.resonance_centre_ is not None:
                raise ValueError("resonance arrays without the resonance block's names")
        except (KeyError, TypeError, ValueError) as exc:
            raise ModelError(f"{source}: reference model is incomplete or damaged ({exc!r})") from exc
        model.metadata_ = doc.get("metadata", {})
        return model
