"""Limits for group means from nested variance components (analysis.monitor.levels)."""

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
