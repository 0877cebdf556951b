import math

import numpy as np
import pytest

from analysis.errors import ParameterError
from analysis.monitor import (
    control_constants,
    cusum_chart,
    ewma_chart,
    fit_cusum_limits,
    fit_ewma_limits,
    fit_individuals_limits,
    fit_xbar_s_limits,
    individuals_chart,
    xbar_s_chart,
)

# NIST/SEMATECH e-Handbook 6.3.2.2 individuals example data.
NIST_IND = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]
# NIST/SEMATECH e-Handbook 6.3.2.4 EWMA example data.
NIST_EWMA = [52.0, 47.0, 53.0, 49.3, 50.1, 47.0, 51.0, 50.1, 51.2, 50.5, 49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6,
             52.4, 53.6, 52.1]
# NIST/SEMATECH e-Handbook 6.3.2.3 tabular CUSUM example (subgroup means).
NIST_CUSUM = [324.925, 324.675, 324.725, 324.350, 325.350, 325.225, 324.125, 324.525, 325.225, 324.600, 324.625,
              325.150, 328.325, 327.250, 327.825, 328.500, 326.675, 327.775, 326.875, 328.350]


def test_individuals_chart_nist_example():
    lim = fit_individuals_limits(NIST_IND)
    # NIST 6.3.2.2: mean 50.81, MR-bar 1.8778, UCL 55.8041, LCL 45.8159, UCL_MR 6.1347. NIST uses the rounded
    # table constants d2 = 1.128 and D4 = 3.267; we use the exact ones, hence atol 2e-3.
    assert lim.centre == pytest.approx(50.81, abs=1e-9)
    assert lim.mr_bar == pytest.approx(1.8778, abs=1e-4)
    assert lim.ucl == pytest.approx(55.8041, abs=2e-3)
    assert lim.lcl == pytest.approx(45.8159, abs=2e-3)
    assert lim.mr_ucl == pytest.approx(6.1347, abs=2e-3)
    # With the exact d2(2) = 2/√π (textbook identity) the UCL is exact.
    assert lim.ucl == pytest.approx(50.81 + 3 * lim.mr_bar * math.sqrt(math.pi) / 2, rel=1e-12)
    chart = individuals_chart(NIST_IND)
    assert not chart.beyond.any() and np.isnan(chart.moving_ranges[0])


def test_individuals_phase2_uses_frozen_limits():
    lim = fit_individuals_limits(NIST_IND)
    new = [50.0, 56.5, 45.0, 51.0]
    chart = individuals_chart(new, phase1=lim)
    assert chart.limits is lim
    np.testing.assert_array_equal(chart.beyond, [False, True, True, False])
    # The same when the Phase I values are given instead of the limits.
    np.testing.assert_array_equal(individuals_chart(new, phase1=NIST_IND).beyond, chart.beyond)
    # MR of 56.5 -> 45.0 is 11.5 > UCL_MR.
    assert chart.mr_beyond[2]


def test_ewma_chart_nist_example():
    chart = ewma_chart(NIST_EWMA, lam=0.3, L=3.0, target=50.0, sigma=2.0539)
    # NIST 6.3.2.4: z20 = 51.99; asymptotic UCL 52.5884, LCL 47.4116.
    assert chart.ewma[-1] == pytest.approx(51.99, abs=5e-3)
    assert chart.limits.ucl_asymptotic == pytest.approx(52.5884, abs=1e-4)
    assert chart.limits.lcl_asymptotic == pytest.approx(47.4116, abs=1e-4)
    # First point: z1 = 0.3·52 + 0.7·50 (the EWMA definition) and limit half-width Lσλ (i = 1).
    assert chart.ewma[0] == pytest.approx(50.6)
    assert chart.ucl[0] - 50 == pytest.approx(3 * 2.0539 * 0.3, rel=1e-12)
    assert chart.first_signal is None


def _ewma_run_lengths(lam, L, n_runs, n_steps, seed):
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((n_runs, n_steps))
    z = np.empty_like(x)
    prev = np.zeros(n_runs)
    for i in range(n_steps):  # over time only; vectorised across runs
        prev = lam * x[:, i] + (1 - lam) * prev
        z[:, i] = prev
    half = L * np.sqrt(lam / (2 - lam) * (1 - (1 - lam) ** (2 * np.arange(1, n_steps + 1))))
    out = np.abs(z) > half
    assert out.any(axis=1).all()
    return out.argmax(axis=1) + 1


def test_ewma_in_control_arl_lucas_saccucci():
    # Lucas & Saccucci 1990 (Technometrics 32(1)) table: λ = 0.2, L = 2.962 -> ARL0 ≈ 500.
    # Cross-check that our limits reproduce it on one run from the chart function.
    lim = fit_ewma_limits(lam=0.2, L=2.962, target=0.0, sigma=1.0)
    x = np.random.default_rng(1).standard_normal(200)
    z_ref = np.empty(200)
    prev = 0.0
    for i, v in enumerate(x):
        prev = 0.2 * v + 0.8 * prev
        z_ref[i] = prev
    np.testing.assert_allclose(lim.apply(x).ewma, z_ref, rtol=1e-12, atol=1e-12)
    rl = _ewma_run_lengths(0.2, 2.962, 2000, 5000, seed=3)
    se = rl.std(ddof=1) / math.sqrt(rl.size)
    # Time-varying limits shorten the ARL slightly versus the table's asymptotic limits: 4 standard errors.
    assert abs(rl.mean() - 500) < 4 * se, (rl.mean(), se)


def test_cusum_nist_example_absolute_units():
    chart = cusum_chart(NIST_CUSUM, target=325.0, k=0.3175, h=4.1959, units="absolute")
    # NIST 6.3.2.3: first signal at observation 14 (1-based) -> index 13; S_hi(20) = 19.035.
    assert chart.first_signal == 13
    assert chart.upper[-1] == pytest.approx(19.035, abs=1e-9)
    # σ units give the same chart when k and h are divided by σ.
    same = cusum_chart(NIST_CUSUM, target=325.0, sigma=0.635, k=0.3175 / 0.635, h=4.1959 / 0.635)
    np.testing.assert_allclose(same.upper, chart.upper)


def test_cusum_matches_the_recursion():
    x = np.random.default_rng(2).normal(0.3, 1.0, 300)
    chart = cusum_chart(x, target=0.0, sigma=1.0, k=0.5, h=5.0)
    up = lo = 0.0
    for i, v in enumerate(x):  # the textbook recursion (Montgomery ch. 9)
        up, lo = max(0.0, up + v - 0.5), max(0.0, lo - 0.5 - v)
        assert chart.upper[i] == pytest.approx(up, abs=1e-9) and chart.lower[i] == pytest.approx(lo, abs=1e-9)


def test_cusum_in_control_arl():
    # Two-sided tabular CUSUM k = 0.5, h = 5: ARL0 ≈ 465 (REFERENCES.md, computed; matches Montgomery's table
    # as remembered [M]). Simulation: 2,000 runs vectorised across runs.
    rng = np.random.default_rng(11)
    n_runs, n_steps = 2000, 6000
    x = rng.standard_normal((n_runs, n_steps))
    up = np.zeros(n_runs)
    lo = np.zeros(n_runs)
    rl = np.zeros(n_runs, dtype=int)
    for i in range(n_steps):
        up = np.maximum(0, up + x[:, i] - 0.5)
        lo = np.maximum(0, lo - x[:, i] - 0.5)
        hit = (rl == 0) & ((up > 5) | (lo > 5))
        rl[hit] = i + 1
    assert (rl > 0).all()
    # Same run lengths from cusum_chart on a few runs.
    for j in range(5):
        assert cusum_chart(x[j], target=0.0, sigma=1.0).first_signal + 1 == rl[j]
    se = rl.std(ddof=1) / math.sqrt(n_runs)
    assert abs(rl.mean() - 465.4) < 4 * se, (rl.mean(), se)


def test_fit_cusum_limits_from_reference_values():
    ref = np.random.default_rng(4).normal(10, 2, 500)
    lim = fit_cusum_limits(ref, k=0.5, h=5.0)
    mr = np.abs(np.diff(ref)).mean()
    sigma = mr / (2 / math.sqrt(math.pi))  # MR-bar/d2(2), NIST 6.3.2.2
    assert lim.target == pytest.approx(ref.mean()) and lim.h == pytest.approx(5 * sigma)
    with pytest.raises(ParameterError, match="units must be 'sigma' or 'absolute'; got 'sd'"):
        fit_cusum_limits(ref, units="sd")


def test_xbar_s_chart_variable_subgroups():
    rng = np.random.default_rng(5)
    sizes = [4, 6, 5, 3, 8]
    values = np.concatenate([rng.normal(20, 1, n) for n in sizes])
    groups = np.repeat(["lot-c", "lot-a", "lot-e", "lot-b", "lot-d"], sizes)  # time order is not alphabetical
    chart = xbar_s_chart(values, groups)
    np.testing.assert_array_equal(chart.groups, ["lot-c", "lot-a", "lot-e", "lot-b", "lot-d"])
    np.testing.assert_array_equal(chart.sizes, sizes)
    # Montgomery section 6.3.2: weighted grand mean and pooled s-bar; limits with A3(n), B3(n), B4(n).
    parts = np.split(values, np.cumsum(sizes)[:-1])
    sds = np.array([p.std(ddof=1) for p in parts])
    s_bar = math.sqrt(np.sum((np.array(sizes) - 1) * sds**2) / np.sum(np.array(sizes) - 1))
    assert chart.limits.grand_mean == pytest.approx(values.mean())
    assert chart.limits.s_bar == pytest.approx(s_bar)
    for i, n in enumerate(sizes):
        c = control_constants(n)
        assert chart.xbar_ucl[i] == pytest.approx(values.mean() + c.A3 * s_bar)
        assert chart.s_ucl[i] == pytest.approx(c.B4 * s_bar)
        assert chart.s_lcl[i] == pytest.approx(c.B3 * s_bar)
        assert chart.sds[i] == pytest.approx(sds[i])


def test_xbar_s_phase2_and_errors():
    lim = fit_xbar_s_limits([1.0, 2.0, 3.0, 2.0, 3.0, 4.0], [0, 0, 0, 1, 1, 1])
    chart = xbar_s_chart([9.0, 10.0, 11.0], ["new"] * 3, phase1=lim)
    assert chart.mean_beyond[0]
    with pytest.raises(ParameterError, match="every subgroup needs at least 2 values.*'b' has 1"):
        xbar_s_chart([1.0, 2.0, 3.0], ["a", "a", "b"])
    with pytest.raises(ParameterError, match="lam must be a number with 0 < lam <= 1; got 0"):
        ewma_chart([1.0, 2.0], lam=0)


def test_individuals_limits_pool_moving_ranges_within_groups():
    # Two rigs offset by 10: within each rig the moving ranges are |2-1|, |4-2| and |13-11|, |12-13|, so
    # MR-bar = (1 + 2 + 2 + 1)/4 = 1.5 and sigma = MR-bar/d2(2) with d2(2) = 1.128 (ASTM E2587 table);
    # across the offset the plain sequence would also count |11-4| = 7.
    from analysis.monitor import fit_individuals_limits

    values = [1.0, 2.0, 4.0, 11.0, 13.0, 12.0]
    rigs = ["A", "A", "A", "B", "B", "B"]
    lim = fit_individuals_limits(values, groups=rigs)
    assert lim.mr_bar == pytest.approx(1.5)
    assert lim.sigma == pytest.approx(1.5 / 1.128, rel=1e-3)
    assert lim.centre == pytest.approx(np.mean(values))
    plain = fit_individuals_limits(values)
    assert plain.mr_bar == pytest.approx((1 + 2 + 7 + 2 + 1) / 5)
    one_each = fit_individuals_limits([1.0, 5.0], groups=["A", "B"])  # no group has two: whole sequence
    assert one_each.mr_bar == pytest.approx(4.0)
    with pytest.raises(ParameterError, match="groups must have one label per value"):
        fit_individuals_limits(values, groups=rigs[:3])
