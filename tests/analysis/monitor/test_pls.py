import numpy as np
import pytest
from sklearn.cross_decomposition import PLSRegression

from analysis.errors import ModelError, ParameterError
from analysis.monitor import OPLS, PLS1, cross_validate


def data(seed=0, n=40, p=12):
    """Feature rows with correlated columns and a property depending on a few of them."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, p)) @ rng.normal(size=(p, p)) * 0.5 + 60
    y = 2.0 * x[:, 0] - x[:, 3] + 0.5 * x[:, 7] + rng.normal(size=n) * 0.3
    return x, y, rng.normal(size=(15, p)) @ rng.normal(size=(p, p)) * 0.5 + 60


@pytest.mark.parametrize("a", [1, 2, 4, 6])
def test_pls1_matches_sklearn_plsregression(a):
    x, y, new = data()
    ours = PLS1(n_components=a).fit(x, y)
    # scikit-learn PLSRegression(scale=False) as reference library.
    sk = PLSRegression(n_components=a, scale=False).fit(x, y)
    np.testing.assert_allclose(ours.predict(new), sk.predict(new).ravel(), rtol=1e-10, atol=1e-9)
    np.testing.assert_allclose(np.abs(ours.x_weights_), np.abs(sk.x_weights_), atol=1e-9)
    np.testing.assert_allclose(ours.predict(new), new @ ours.coef_ + ours.intercept_, rtol=1e-12)


def test_pls1_scaled_matches_sklearn_scale_true():
    x, y, new = data(1)
    np.testing.assert_allclose(PLS1(n_components=3, scale=True).fit(x, y).predict(new),
                               PLSRegression(3, scale=True).fit(x, y).predict(new).ravel(), rtol=1e-9)


@pytest.mark.parametrize("a", [1, 2, 3, 5])
def test_opls_predicts_like_pls_with_same_total_components(a):
    # Trygg & Wold 2002: for one y, OPLS with 1 predictive + (A-1) orthogonal components gives the same
    # predictions as PLS with A components.
    x, y, new = data(2)
    np.testing.assert_allclose(OPLS(n_orthogonal=a - 1).fit(x, y).predict(new),
                               PLS1(n_components=a).fit(x, y).predict(new), rtol=1e-9, atol=1e-8)


def test_opls_orthogonal_scores_are_uncorrelated_with_y():
    # Trygg & Wold 2002: the orthogonal components carry X variation orthogonal to y.
    x, y, _ = data(3)
    m = OPLS(n_orthogonal=2).fit(x, y)
    yc = y - y.mean()
    np.testing.assert_allclose(m.t_orthogonal_.T @ yc, 0.0, atol=1e-8 * np.linalg.norm(yc))
    t, t_o = m.transform(x)
    np.testing.assert_allclose(t, m.t_, atol=1e-9)
    np.testing.assert_allclose(t_o, m.t_orthogonal_, atol=1e-9)


def test_cross_validate_by_group_matches_manual_leave_group_out():
    x, y, _ = data(4, n=30)
    groups = np.repeat(["lot-a", "lot-b", "lot-c", "lot-d", "lot-e"], 6)
    res = cross_validate(PLS1(n_components=2), x, y, groups=groups)
    pred = np.empty_like(y)
    for g in np.unique(groups):  # leave-one-lot-out done by hand with scikit-learn
        test = groups == g
        pred[test] = PLSRegression(2, scale=False).fit(x[~test], y[~test]).predict(x[test]).ravel()
    np.testing.assert_allclose(res.predictions, pred, rtol=1e-9)
    assert res.rmse == pytest.approx(np.sqrt(np.mean((pred - y) ** 2)))
    assert res.folds == "group"
    assert cross_validate(OPLS(n_orthogonal=1), x, y, groups=groups).rmse == pytest.approx(res.rmse, rel=1e-8)
    kfold = cross_validate(PLS1(n_components=2), x, y, n_folds=5)
    assert kfold.folds == "interleaved" and set(kfold.fold) == set(range(5))


def test_pls_errors():
    x, y, _ = data()
    with pytest.raises(ModelError, match=r"PLS1 is not fitted; call fit\(\.\.\.\) first"):
        PLS1(n_components=2).predict(x)
    with pytest.raises(ParameterError, match="n_components must be an integer >= 1; got 0"):
        PLS1(n_components=0).fit(x, y)
    with pytest.raises(ParameterError, match=r"y must be 1-D with one finite value per row of X \(40\)"):
        OPLS(n_orthogonal=1).fit(x, y[:5])
    with pytest.raises(ModelError, match="X has 3 features but the model was fitted with 12"):
        PLS1(n_components=2).fit(x, y).predict(x[:, :3])
