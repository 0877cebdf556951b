"""Control limits: Hotelling T², SPE (Q residual) and the Shewhart chart constants.

Pure functions of numbers and arrays; nothing here reads or writes files.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import integrate, special, stats

from analysis.errors import ParameterError

__all__ = [
    "t2_limit_new",
    "t2_limit_reference",
    "spe_limit_jackson_mudholkar",
    "spe_limit_box",
    "ControlConstants",
    "control_constants",
]


def _check_alpha(alpha, name="alpha"):
    if isinstance(alpha, bool) or not isinstance(alpha, (int, float, np.floating)) or not 0.0 < alpha < 1.0:
        raise ParameterError(f"{name} must be a number with 0 < {name} < 1; got {alpha!r}")
    return float(alpha)


def _check_int(value, name, minimum):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise ParameterError(f"{name} must be an integer >= {minimum}; got {value!r}")
    return int(value)


def t2_limit_new(n, n_components, alpha):
    """Phase II Hotelling T² limit for a new observation.

    A(n+1)(n-1) / (n(n-A)) · F_{1-α}(A, n-A), with n reference observations and A components
    (NIST/SEMATECH e-Handbook of Statistical Methods, 6.5.4.4). Requires n > A.
    """
    n = _check_int(n, "n", 2)
    a = _check_int(n_components, "n_components", 1)
    alpha = _check_alpha(alpha)
    if n <= a:
        raise ParameterError(f"n must be larger than n_components; got n={n}, n_components={a}")
    return float(a * (n + 1) * (n - 1) / (n * (n - a)) * stats.f.ppf(1.0 - alpha, a, n - a))


def t2_limit_reference(n, n_components, alpha):
    """Phase I Hotelling T² limit for an observation of the reference set itself.

    ((n-1)²/n) · Beta_{1-α}(A/2, (n-A-1)/2) (Tracy et al. 1992, J. Quality Technology 24(2)).
    Requires n > A + 1.
    """
    n = _check_int(n, "n", 3)
    a = _check_int(n_components, "n_components", 1)
    alpha = _check_alpha(alpha)
    if n <= a + 1:
        raise ParameterError(f"n must be larger than n_components + 1; got n={n}, n_components={a}")
    return float((n - 1) ** 2 / n * stats.beta.ppf(1.0 - alpha, a / 2.0, (n - a - 1) / 2.0))


def _thetas(residual_eigenvalues, name="residual_eigenvalues"):
    lam = np.asarray(residual_eigenvalues, dtype=float)
    if lam.ndim != 1 or lam.size == 0 or not np.all(np.isfinite(lam)) or np.any(lam < 0) or not np.any(lam > 0):
        raise ParameterError(
            f"{name} must be a non-empty 1-D array of finite, non-negative values with at least one > 0; "
            f"got {residual_eigenvalues!r}"
        )
    return lam.sum(), (lam**2).sum(), (lam**3).sum()


def spe_limit_jackson_mudholkar(residual_eigenvalues, alpha):
    """SPE (Q residual) limit from the eigenvalues of the components left out of the model.

    θi = Σ λj^i, h0 = 1 - 2θ1θ3/(3θ2²),
    Q = θ1 · [z_{1-α}·sqrt(2θ2h0²)/θ1 + 1 + θ2h0(h0-1)/θ1²]^(1/h0)
    (Jackson & Mudholkar 1979, Technometrics 21(3)).
    """
    alpha = _check_alpha(alpha)
    t1, t2, t3 = _thetas(residual_eigenvalues)
    h0 = 1.0 - 2.0 * t1 * t3 / (3.0 * t2**2)
    z = stats.norm.ppf(1.0 - alpha)
    base = z * math.sqrt(2.0 * t2 * h0**2) / t1 + 1.0 + t2 * h0 * (h0 - 1.0) / t1**2
    return float(t1 * base ** (1.0 / h0))


def spe_limit_box(*, residual_eigenvalues=None, spe_mean=None, spe_var=None, alpha):
    """SPE limit g·χ²_{1-α}(h) by Box's (1954, Ann. Math. Stat. 25(2)) scaled chi-square approximation.

    From eigenvalues: g = θ2/θ1, h = θ1²/θ2. From the mean m and variance v of reference SPE values:
    g = v/(2m), h = 2m²/v (moment matching, as in Nomikos & MacGregor 1995). Give one of the two.
    """
    alpha = _check_alpha(alpha)
    by_eig = residual_eigenvalues is not None
    by_mom = spe_mean is not None or spe_var is not None
    if by_eig == by_mom:
        raise ParameterError(
            "give either residual_eigenvalues, or both spe_mean and spe_var; "
            f"got residual_eigenvalues={residual_eigenvalues!r}, spe_mean={spe_mean!r}, spe_var={spe_var!r}"
        )
    if by_eig:
        t1, t2, _ = _thetas(residual_eigenvalues)
        g, h = t2 / t1, t1**2 / t2
    else:
        if spe_mean is None or spe_var is None or not (np.isfinite(spe_mean) and np.isfinite(spe_var)) \
                or spe_mean <= 0 or spe_var <= 0:
            raise ParameterError(
                f"spe_mean and spe_var must both be finite and > 0; got spe_mean={spe_mean!r}, spe_var={spe_var!r}"
            )
        g, h = spe_var / (2.0 * spe_mean), 2.0 * spe_mean**2 / spe_var
    return float(g * stats.chi2.ppf(1.0 - alpha, h))


@dataclass(frozen=True)
class ControlConstants:
    """Shewhart chart constants for subgroup size n (definitions in Montgomery, Introduction to SQC, ch. 6)."""

    n: int
    A2: float
    A3: float
    d2: float
    d3: float
    D3: float
    D4: float
    B3: float
    B4: float
    c4: float


def _c4(n):
    # c4 = sqrt(2/(n-1)) Γ(n/2)/Γ((n-1)/2): E[s] = c4·σ for normal samples of size n.
    return math.sqrt(2.0 / (n - 1)) * math.exp(special.gammaln(n / 2.0) - special.gammaln((n - 1) / 2.0))


def _range_moments(n):
    """E[R] and E[R²] of the range R of n standard normal values, by numerical integration.

    F_R(w) = n ∫ φ(x)[Φ(x+w) - Φ(x)]^(n-1) dx (the distribution of the range; Tippett 1925,
    Biometrika 17); E[R] = ∫ (1 - F_R(w)) dw and E[R²] = 2 ∫ w (1 - F_R(w)) dw, integrated with
    Simpson's rule on fine grids (all integrands are smooth and vanish beyond the grid ends).
    """
    x = np.linspace(-9.0, 9.0, 1801)  # φ(±9) < 1e-17
    w = np.linspace(0.0, 14.0, 1401)  # P(range of 25 normals > 14) is far below 1e-12
    inner = stats.norm.pdf(x)[None, :] * (special.ndtr(x[None, :] + w[:, None]) - special.ndtr(x)[None, :]) ** (n - 1)
    survival = 1.0 - n * integrate.simpson(inner, x=x, axis=1)
    return float(integrate.simpson(survival, x=w)), float(2.0 * integrate.simpson(w * survival, x=w))


def control_constants(n):
    """Shewhart constants A2, A3, d2, d3, D3, D4, B3, B4, c4 for subgroup size n (2 <= n <= 25).

    Computed from their definitions: d2 = E[R]/σ and d3 = SD[R]/σ by integrating the normal range
    distribution; c4 from gamma functions; A2 = 3/(d2√n), A3 = 3/(c4√n), D3/D4 = 1 ∓ 3d3/d2,
    B3/B4 = 1 ∓ 3√(1-c4²)/c4 (lower constants truncated at 0).
    """
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or not 2 <= n <= 25:
        raise ParameterError(f"n (subgroup size) must be an integer from 2 to 25; got {n!r}")
    n = int(n)
    d2, er2 = _range_moments(n)
    d3 = math.sqrt(er2 - d2**2)
    c4 = _c4(n)
    s_ratio = 3.0 * math.sqrt(1.0 - c4**2) / c4
    return ControlConstants(
        n=n,
        A2=3.0 / (d2 * math.sqrt(n)),
        A3=3.0 / (c4 * math.sqrt(n)),
        d2=d2,
        d3=d3,
        D3=max(0.0, 1.0 - 3.0 * d3 / d2),
        D4=1.0 + 3.0 * d3 / d2,
        B3=max(0.0, 1.0 - s_ratio),
        B4=1.0 + s_ratio,
        c4=c4,
    )
