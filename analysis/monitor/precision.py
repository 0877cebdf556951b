"""Repeatability and reproducibility across rigs (ISO 5725-2), from per-rig counts, means and SDs (pure)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from analysis.errors import ParameterError

__all__ = ["Precision", "precision_from_groups"]


@dataclass(frozen=True)
class Precision:
    """p: groups (rigs) used; s_r: repeatability SD (within a rig); s_L: between-rig SD; s_R: reproducibility SD.
    All NaN when fewer than two groups have two values."""

    p: int
    s_r: float
    s_L: float
    s_R: float


def precision_from_groups(n, mean, sd) -> Precision:
    """ISO 5725-2 precision of a one-way layout with unequal group sizes, from each group's n, mean and SD:
    s_r² = Σ(n_i - 1)s_i² / Σ(n_i - 1); s_d² = Σ n_i (m_i - m̄)² / (p - 1) with m̄ the weighted mean;
    n̄ = (N - Σn_i²/N) / (p - 1); s_L² = max(0, (s_d² - s_r²) / n̄); s_R² = s_r² + s_L².
    Groups with fewer than two values or no SD are left out."""
    n = np.asarray(n, dtype=float)
    m = np.asarray(mean, dtype=float)
    sd = np.asarray(sd, dtype=float)
    if not (n.shape == m.shape == sd.shape) or n.ndim != 1:
        raise ParameterError(f"n, mean and sd must be 1-D arrays of one length; got shapes {n.shape}, {m.shape}, "
                             f"{sd.shape}")
    keep = (n >= 2) & np.isfinite(sd) & np.isfinite(m)
    n, m, sd = n[keep], m[keep], sd[keep]
    p = int(n.size)
    if p < 2:
        return Precision(p, math.nan, math.nan, math.nan)
    total = n.sum()
    sr2 = float(((n - 1) * sd**2).sum() / (n - 1).sum())
    mbar = float((n * m).sum() / total)
    sd2 = float((n * (m - mbar) ** 2).sum() / (p - 1))
    nbar = float((total - (n**2).sum() / total) / (p - 1))
    sl2 = max(0.0, (sd2 - sr2) / nbar)
    return Precision(p, math.sqrt(sr2), math.sqrt(sl2), math.sqrt(sr2 + sl2))
