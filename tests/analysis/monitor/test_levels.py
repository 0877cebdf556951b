"""Limits for group means from nested variance components (analysis.monitor.levels)."""

import math

import numpy as np
import pytest
from scipy import stats

from analysis.errors import ParameterError
from analysis.monitor.levels import MeanLimits, fit_mean_limits, variance_components


def nested(rng, *, lots, units, reps, sd_lot, sd_unit, sd_within, centre=0.0):
    v, u, g = [], [], []
    for i in range(lots):
        a = rng.normal(0, sd_lot)
        for j in range(units):
            b = rng.normal(0, sd_unit)
            v += list(centre + a + b + rng.normal(0, sd_within, reps))
            u += [f"U{j}"] * reps  # unit names repeat across lots: a unit is named within its lot
            g += [f"L{i}"] * reps
    return np.array(v), np.array(u), np.array(g)


def test_balanced_data_give_the_textbook_anova_estimators():
    # Montgomery, Design and Analysis of Experiments, two-stage nested design: E(MS_E) = σ², E(MS_B(A)) =
    # σ² + nσ_β², E(MS_A) = σ² + nσ_β² + bnσ_τ² (as remembered); the estimators solve these equations.
    rng = np.random.default_rng(1)
    a, b, n = 6, 5, 4
    v, u, g = nested(rng, lots=a, units=b, reps=n, sd_lot=0.7, sd_unit=0.5, sd_within=1.0, centre=2.0)
    y = v.reshape(a, b, n)
    cell = y.mean(axis=2)
    lot = y.mean(axis=(1, 2))
    ms_e = ((y - cell[:, :, None]) ** 2).sum() / (a * b * (n - 1))
    ms_b = n * ((cell - lot[:, None]) ** 2).sum() / (a * (b - 1))
    ms_a = b * n * ((lot - y.mean()) ** 2).sum() / (a - 1)
    centre, var_lot, var_unit, var_within = variance_components(v, units=u, lots=g)
    assert centre == pytest.approx(y.mean())
    assert var_within == pytest.approx(ms_e)
    assert var_unit == pytest.approx(max(0.0, (ms_b - ms_e) / n))
    assert var_lot == pytest.approx(max(0.0, (ms_a - ms_b) / (b * n)))


def test_negative_estimates_are_truncated_to_zero():
    rng = np.random.default_rng(2)
    v, u, g = nested(rng, lots=4, units=3, reps=10, sd_lot=0.0, sd_unit=0.0, sd_within=1.0)
    _, var_lot, var_unit, var_within = variance_components(v, units=u, lots=g)
    assert var_lot >= 0.0 and var_unit >= 0.0 and var_within == pytest.approx(1.0, rel=0.3)


def test_new_units_of_new_lots_signal_at_the_nominal_rate():
    # Monte Carlo: limits from 40 reference lots; new lots and units drawn from the same components. The rate
    # must be near alpha (binomial standard error of 20,000 new units at 1 %: 0.07 %).
    rng = np.random.default_rng(3)
    comps = dict(sd_lot=0.6, sd_unit=0.4, sd_within=1.0)
    v, u, g = nested(rng, lots=40, units=8, reps=12, **comps)
    lim = fit_mean_limits(v, units=u, lots=g, alpha=0.01)
    n_new = 20_000
    for n in (3, 12, 40):
        means = (rng.normal(0, comps["sd_lot"], n_new) + rng.normal(0, comps["sd_unit"], n_new)
                 + rng.normal(0, comps["sd_within"], (n_new, n)).mean(axis=1))
        rate = float(np.mean(means > lim.ucl(n)))
        assert abs(rate - 0.01) < 0.005, (n, rate)  # estimation error of the components included


def test_limit_ignoring_lots_would_be_too_tight():
    # Why the lot component matters: with it left out the same new units signal far more often than alpha.
    rng = np.random.default_rng(4)
    v, u, g = nested(rng, lots=30, units=6, reps=10, sd_lot=0.8, sd_unit=0.2, sd_within=1.0)
    lim = fit_mean_limits(v, units=u, lots=g, alpha=0.01)
    naive = MeanLimits(lim.centre, 0.0, lim.var_unit, lim.var_within, 0.01, lim.n_units, lim.n_lots)
    means = rng.normal(0, 0.8, 20_000) + rng.normal(0, 0.2, 20_000) + rng.normal(0, 1.0, (20_000, 10)).mean(axis=1)
    assert np.mean(means > naive.ucl(10)) > 3 * np.mean(means > lim.ucl(10))


def test_ucl_uses_the_normal_quantile_and_shrinks_with_n():
    lim = MeanLimits(centre=1.0, var_lot=0.0, var_unit=0.0, var_within=4.0, alpha=0.025, n_units=10, n_lots=3)
    assert lim.z == pytest.approx(stats.norm.ppf(0.975))  # scipy as the reference for the quantile
    assert lim.ucl(4) == pytest.approx(1.0 + 1.959964 * 1.0, rel=1e-6)  # sqrt(4/4) = 1
    assert lim.ucl(16) < lim.ucl(4)
    assert MeanLimits.from_dict(lim.to_dict()) == lim


def test_bad_input_is_refused_with_the_value():
    with pytest.raises(ParameterError, match="alpha"):
        fit_mean_limits([1.0, 2.0, 3.0], units=["a", "a", "b"], lots=["L", "L", "L"], alpha=2)
    with pytest.raises(ParameterError, match="at least 3"):
        variance_components([1.0, np.nan], units=["a", "b"], lots=["L", "L"])
    with pytest.raises(ParameterError, match="one length"):
        variance_components([1.0, 2.0, 3.0], units=["a"], lots=["L", "L", "L"])
    with pytest.raises(ParameterError, match="mean limits need"):
        MeanLimits.from_dict({"centre": 1.0})


# ---------------------------------------------------------------------------------------------------- the block
from analysis.monitor.levels import (  # noqa: E402
    BlockMeanLimits,
    block_variance_components,
    fit_block_limits,
)


def nested_block(rng, *, lots, units, reps, sd_lot, sd_unit, sd_within, corr=0.5):
    """Vectors (N, 2) with the nested structure, each level's effect correlated ``corr`` between the features."""
    c = np.array([[1.0, corr], [corr, 1.0]])
    chol = np.linalg.cholesky(c)
    v, u, g = [], [], []
    for i in range(lots):
        a = chol @ rng.normal(0, sd_lot, 2)
        for j in range(units):
            b = chol @ rng.normal(0, sd_unit, 2)
            v.append(a + b + rng.normal(0, sd_within, (reps, 2)) @ chol.T)
            u += [f"U{j}"] * reps
            g += [f"L{i}"] * reps
    return np.vstack(v), np.array(u), np.array(g)


def test_the_block_components_are_the_scalar_ones_feature_by_feature():
    # On its diagonal the matrix form is the scalar method of moments (checked above against Montgomery's
    # expected mean squares) applied to each feature alone; negative estimates truncated the same way.
    rng = np.random.default_rng(11)
    v, u, g = nested_block(rng, lots=5, units=6, reps=8, sd_lot=0.4, sd_unit=0.6, sd_within=1.0)
    centre, var_lot, var_unit, var_within = block_variance_components(v, units=u, lots=g)
    for j in range(2):
        c, vl, vu, vw = variance_components(v[:, j], units=u, lots=g)
        assert centre[j] == pytest.approx(c)
        assert var_within[j, j] == pytest.approx(vw)
        if vu > 0 and np.all(np.linalg.eigvalsh(var_unit) > 0):
            assert var_unit[j, j] == pytest.approx(vu)
    for m in (var_lot, var_unit, var_within):
        assert np.allclose(m, m.T) and np.all(np.linalg.eigvalsh(m) > -1e-12)


def test_with_one_feature_the_block_t2_is_the_square_of_the_scalar_standard_score():
    rng = np.random.default_rng(12)
    v, u, g = nested(rng, lots=4, units=5, reps=6, sd_lot=0.3, sd_unit=0.5, sd_within=1.0)
    scalar = fit_mean_limits(v, units=u, lots=g, alpha=0.01)
    blk = fit_block_limits(v[:, None], units=u, lots=g, alpha=0.01)
    means, n = np.array([[0.8], [-1.5], [0.1]]), np.array([4, 10, 25])
    np.testing.assert_allclose(blk.t2(means, n), scalar.standardised(means[:, 0], n) ** 2, rtol=1e-9)
    # the limit is the Phase II limit of a new observation with p = 1 (NIST/SEMATECH 6.5.4.4):
    # (m+1)(m-1)/(m(m-1))·F(1, m-1) = (m+1)/m·F
    m = blk.n_units
    assert blk.limit == pytest.approx((m + 1) / m * stats.f.isf(0.01, 1, m - 1), rel=1e-9)


def test_new_units_signal_at_about_alpha_and_a_shifted_unit_signals():
    # Monte Carlo as for the scalar limits: 8 reference sets of 30 lots x 8 units x 12 vectors, 1,000 new units
    # of new lots per set with 10 vectors each. One set's rate varies with how its components came out (0.35 %
    # to 2 % seen), so the rate meant, the average over sets, is tested: binomial SE of 8,000 units at 1 % is
    # 0.11 %, the spread over sets comes on top. A unit moved by 4 of its SDs in one feature signals nearly always.
    sd = dict(sd_lot=0.3, sd_unit=0.5, sd_within=1.0)
    rates, power = [], []
    for seed in range(8):
        rng = np.random.default_rng(300 + seed)
        v, u, g = nested_block(rng, lots=30, units=8, reps=12, **sd)
        lim = fit_block_limits(v, units=u, lots=g, alpha=0.01, names=("f", "bw"))
        new, nu, ng = nested_block(rng, lots=200, units=5, reps=10, **sd)
        _, inv = np.unique(np.char.add(ng, nu), return_inverse=True)
        means = np.stack([np.bincount(inv, weights=new[:, j]) / np.bincount(inv) for j in range(2)], axis=1)
        n = np.full(len(means), 10)
        rates.append(np.mean(lim.t2(means, n) > lim.limit))
        moved = means + np.array([4 * math.sqrt(0.3**2 + 0.5**2 + 1.0 / 10), 0.0])
        power.append(np.mean(lim.t2(moved, n) > lim.limit))
    assert abs(np.mean(rates) - 0.01) < 0.004, rates
    assert np.mean(power) > 0.9, power
    back = BlockMeanLimits.from_dict(lim.to_dict())
    assert back == lim and back.names == ("f", "bw")


def test_bad_block_limits_are_refused_with_what_was_wrong():
    with pytest.raises(ParameterError, match="matrices must be 2 x 2"):
        BlockMeanLimits.from_dict({"centre": [0, 0], "var_lot": [[0]], "var_unit": [[0, 0], [0, 0]],
                                   "var_within": [[1, 0], [0, 1]], "alpha": 0.01, "n_units": 5, "n_lots": 2})
    with pytest.raises(ParameterError, match=r"values must be \(N, p\)"):
        block_variance_components(np.zeros(5), units=["a"] * 5, lots=["L"] * 5)
