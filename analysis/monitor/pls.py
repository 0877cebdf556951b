"""PLS1 (NIPALS) and OPLS regression from feature rows to one property (e.g. carrier particle size).

PLS1: Wold et al. 2001 (Chemometr. Intell. Lab. Syst. 58), NIPALS with deflation of X and y;
regression vector B = W(PᵀW)⁻¹q. OPLS: Trygg & Wold 2002 (J. Chemometrics 16), one predictive component and
``n_orthogonal`` components orthogonal to y; for a single y, OPLS with 1 + (A-1) components predicts the same
as PLS with A components.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from analysis.errors import ModelError, ParameterError

__all__ = ["PLS1", "OPLS", "CrossValidationResult", "cross_validate"]


def _xy(X, y=None):
    x = np.asarray(X, dtype=float)
    if x.ndim != 2 or x.shape[0] < 2 or not np.all(np.isfinite(x)):
        raise ParameterError(f"X must be a 2-D array (n_samples, n_features) of finite numbers; got shape {x.shape}")
    if y is None:
        return x
    yv = np.asarray(y, dtype=float)
    if yv.shape != (x.shape[0],) or not np.all(np.isfinite(yv)):
        raise ParameterError(f"y must be 1-D with one finite value per row of X ({x.shape[0]}); got shape {yv.shape}")
    return x, yv


def _check_count(value, name, minimum):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise ParameterError(f"{name} must be an integer >= {minimum}; got {value!r}")


class _Regressor:
    def get_params(self):
        return {k: getattr(self, k) for k in self._PARAMS}

    def __repr__(self):
        return f"{type(self).__name__}(" + ", ".join(f"{k}={v!r}" for k, v in self.get_params().items()) + ")"

    def _prepare(self, X, y):
        x, yv = _xy(X, y)
        if not isinstance(self.scale, bool):
            raise ParameterError(f"scale must be True or False; got {self.scale!r}")
        self.x_mean_ = x.mean(axis=0)
        sd = x.std(axis=0, ddof=1) if self.scale else np.ones(x.shape[1])
        self.x_scale_ = np.where(sd > 0, sd, 1.0)
        self.y_mean_ = float(yv.mean())
        return (x - self.x_mean_) / self.x_scale_, yv - self.y_mean_

    def _transform(self, X):
        if not hasattr(self, "x_mean_"):
            raise ModelError(f"this {type(self).__name__} is not fitted; call fit(...) first")
        x = _xy(X) if np.ndim(X) == 2 else _xy(np.atleast_2d(X))
        if x.shape[1] != self.x_mean_.size:
            raise ModelError(f"X has {x.shape[1]} features but the model was fitted with {self.x_mean_.size}")
        return (x - self.x_mean_) / self.x_scale_


class PLS1(_Regressor):
    """PLS regression of one response with ``n_components`` latent variables (NIPALS).

    Learned: x_weights_ W (n_features, A), x_loadings_ P, y_loadings_ q (A,), x_scores_ T, coef_ (n_features,)
    in the units of the original X, intercept_.
    """

    _PARAMS = ("n_components", "scale")

    def __init__(self, *, n_components=2, scale=False):
        self.n_components = n_components
        self.scale = scale

    def fit(self, X, y):
        _check_count(self.n_components, "n_components", 1)
        x, yv = self._prepare(X, y)
        a_max = min(x.shape[0] - 1, x.shape[1])
        if self.n_components > a_max:
            raise ParameterError(f"n_components must be at most {a_max} for X of shape {x.shape}; "
                                 f"got {self.n_components}")
        a = self.n_components
        w_all, p_all, q_all, t_all = (np.zeros((x.shape[1], a)), np.zeros((x.shape[1], a)), np.zeros(a),
                                      np.zeros((x.shape[0], a)))
        e, f = x.copy(), yv.copy()
        for i in range(a):
            w = e.T @ f
            w /= np.linalg.norm(w)
            t = e @ w
            tt = t @ t
            p = e.T @ t / tt
            q = f @ t / tt
            e -= np.outer(t, p)
            f -= q * t
            w_all[:, i], p_all[:, i], q_all[i], t_all[:, i] = w, p, q, t
        self.x_weights_, self.x_loadings_, self.y_loadings_, self.x_scores_ = w_all, p_all, q_all, t_all
        b = w_all @ np.linalg.solve(p_all.T @ w_all, q_all)
        self.coef_ = b / self.x_scale_
        self.intercept_ = self.y_mean_ - float(self.x_mean_ @ self.coef_)
        return self

    def predict(self, X):
        """Predicted property for rows X (n_samples, n_features)."""
        z = self._transform(X)
        return self.y_mean_ + z @ (self.coef_ * self.x_scale_)


class OPLS(_Regressor):
    """OPLS with one predictive and ``n_orthogonal`` y-orthogonal components (Trygg & Wold 2002).

    Learned: predictive weight w_ (n_features,), loading p_, score t_, y loading c_; orthogonal weights
    w_orthogonal_ and loadings p_orthogonal_ (n_features, n_orthogonal), scores t_orthogonal_.
    """

    _PARAMS = ("n_orthogonal", "scale")

    def __init__(self, *, n_orthogonal=1, scale=False):
        self.n_orthogonal = n_orthogonal
        self.scale = scale

    def fit(self, X, y):
        _check_count(self.n_orthogonal, "n_orthogonal", 0)
        x, yv = self._prepare(X, y)
        a_max = min(x.shape[0] - 2, x.shape[1] - 1)
        if self.n_orthogonal > a_max:
            raise ParameterError(f"n_orthogonal must be at most {a_max} for X of shape {x.shape}; "
                                 f"got {self.n_orthogonal}")
        e = x.copy()
        w = e.T @ yv / (yv @ yv)
        w /= np.linalg.norm(w)
        k = self.n_orthogonal
        wo_all, po_all, to_all = np.zeros((x.shape[1], k)), np.zeros((x.shape[1], k)), np.zeros((x.shape[0], k))
        for i in range(k):
            t = e @ w
            p = e.T @ t / (t @ t)
            wo = p - (w @ p) * w
            wo /= np.linalg.norm(wo)
            to = e @ wo
            po = e.T @ to / (to @ to)
            e -= np.outer(to, po)
            wo_all[:, i], po_all[:, i], to_all[:, i] = wo, po, to
        t = e @ w
        self.w_, self.t_ = w, t
        self.p_ = e.T @ t / (t @ t)
        self.c_ = float(yv @ t / (t @ t))
        self.w_orthogonal_, self.p_orthogonal_, self.t_orthogonal_ = wo_all, po_all, to_all
        return self

    def _filter(self, z):
        # Remove the orthogonal variation component by component, as in fitting.
        for i in range(self.n_orthogonal):
            to = z @ self.w_orthogonal_[:, i]
            z = z - np.outer(to, self.p_orthogonal_[:, i])
        return z

    def transform(self, X):
        """Predictive scores (n_samples,) and orthogonal scores (n_samples, n_orthogonal) of new rows."""
        z = self._transform(X)
        t_o = np.zeros((z.shape[0], self.n_orthogonal))
        for i in range(self.n_orthogonal):
            t_o[:, i] = z @ self.w_orthogonal_[:, i]
            z = z - np.outer(t_o[:, i], self.p_orthogonal_[:, i])
        return z @ self.w_, t_o

    def predict(self, X):
        """Predicted property for rows X (n_samples, n_features)."""
        z = self._filter(self._transform(X))
        return self.y_mean_ + self.c_ * (z @ self.w_)


@dataclass(frozen=True)
class CrossValidationResult:
    """Held-out predictions (n_samples,), their RMSE (units of y), the fold of each sample and how folds were made."""

    predictions: np.ndarray
    rmse: float
    fold: np.ndarray
    folds: str


def cross_validate(estimator, X, y, *, groups=None, n_folds=7):
    """Cross-validated RMSE of a PLS1/OPLS design (the estimator is refitted per fold; it is not changed).

    groups: (n_samples,) labels -> leave-one-group-out (e.g. whole lots); else n_folds interleaved folds.
    """
    x, yv = _xy(X, y)
    n = x.shape[0]
    if groups is not None:
        g = np.asarray(groups)
        if g.shape != (n,):
            raise ParameterError(f"groups must have one label per sample, shape ({n},); got {g.shape}")
        _, fold = np.unique(g, return_inverse=True)
        kind = "group"
        if fold.max() < 1:
            raise ParameterError("groups must contain at least 2 distinct labels for cross-validation; got 1")
    else:
        _check_count(n_folds, "n_folds", 2)
        fold = np.arange(n) % min(n_folds, n)
        kind = "interleaved"
    pred = np.empty(n)
    for f in np.unique(fold):
        test = fold == f
        model = type(estimator)(**estimator.get_params()).fit(x[~test], yv[~test])
        pred[test] = model.predict(x[test])
    return CrossValidationResult(pred, float(math.sqrt(np.mean((pred - yv) ** 2))), fold, kind)
