"""Band contributions to Hotelling T² and SPE for scaled feature rows.

T² contribution of band j: z_j·(PΛ⁻¹Pᵀz)_j, which sum to T² (Westerhuis et al. 2000,
Chemometr. Intell. Lab. Syst. 51; Alcala & Qin 2009, Automatica 45 "complete decomposition").
SPE contribution of band j: e_j² with e = z - PPᵀz, which sum to SPE (Miller et al. 1998).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analysis.errors import ParameterError

__all__ = ["Contributions", "band_contributions"]


@dataclass(frozen=True)
class Contributions:
    """Per-band contributions for one slice row (shape (n_bands,)) or a batch (shape (n_rows, n_bands)).

    band_index: (n_bands,) int; band_centres_hz: (n_bands,) or None; t2 / spe: contributions on the
    scaled data, last axis = band; t2_total / spe_total: their sums (the row's T² and SPE).
    """

    band_index: np.ndarray
    band_centres_hz: np.ndarray | None
    t2: np.ndarray
    spe: np.ndarray

    @property
    def t2_total(self):
        return self.t2.sum(axis=-1)

    @property
    def spe_total(self):
        return self.spe.sum(axis=-1)


def band_contributions(z, loadings, eigenvalues, *, band_centres_hz=None):
    """T² and SPE contributions of each band for scaled rows z (n_bands,) or (n_rows, n_bands).

    loadings: (n_bands, A) orthonormal columns; eigenvalues: (A,) score variances.
    """
    z = np.asarray(z, dtype=float)
    p = np.asarray(loadings, dtype=float)
    lam = np.asarray(eigenvalues, dtype=float)
    if p.ndim != 2 or lam.shape != (p.shape[1],) or np.any(lam <= 0):
        raise ParameterError(
            f"loadings must be (n_bands, A) and eigenvalues (A,) and > 0; got shapes {p.shape} and {lam.shape}"
        )
    if z.ndim not in (1, 2) or z.shape[-1] != p.shape[0]:
        raise ParameterError(f"z must have shape ({p.shape[0]},) or (n_rows, {p.shape[0]}); got {z.shape}")
    t = z @ p
    t2 = z * ((t / lam) @ p.T)
    spe = (z - t @ p.T) ** 2
    centres = None if band_centres_hz is None else np.asarray(band_centres_hz, dtype=float)
    return Contributions(band_index=np.arange(p.shape[0]), band_centres_hz=centres, t2=t2, spe=spe)
