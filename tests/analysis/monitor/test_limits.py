import math

import numpy as np
import pytest
from scipy import stats

from analysis.errors import ParameterError
from analysis.monitor import (
    control_constants,
    spe_limit_box,
    spe_limit_jackson_mudholkar,
    t2_limit_new,
    t2_limit_reference,
)

# Shewhart constants, ASTM E2587 / Montgomery (Introduction to SQC, appendix VI), as in REFERENCES.md.
TABLE = {
    2: (1.880, 2.659, 1.128, 0.853, 0, 3.267, 0, 3.267, 0.7979),
    3: (1.023, 1.954, 1.693, 0.888, 0, 2.574, 0, 2.568, 0.8862),
    4: (0.729, 1.628, 2.059, 0.880, 0, 2.282, 0, 2.266, 0.9213),
    5: (0.577, 1.427, 2.326, 0.864, 0, 2.114, 0, 2.089, 0.9400),
    6: (0.483, 1.287, 2.534, 0.848, 0, 2.004, 0.030, 1.970, 0.9515),
    7: (0.419, 1.182, 2.704, 0.833, 0.076, 1.924, 0.118, 1.882, 0.9594),
    8: (0.373, 1.099, 2.847, 0.820, 0.136, 1.864, 0.185, 1.815, 0.9650),
    9: (0.337, 1.032, 2.970, 0.808, 0.184, 1.816, 0.239, 1.761, 0.9693),
    10: (0.308, 0.975, 3.078, 0.797, 0.223, 1.777, 0.284, 1.716, 0.9727),
}
NAMES = ("A2", "A3", "d2", "d3", "D3", "D4", "B3", "B4", "c4")


@pytest.mark.parametrize("n", sorted(TABLE))
def test_control_constants_match_astm_e2587_table(n):
    c = control_constants(n)
    got = [getattr(c, k) for k in NAMES]
    # Table values are rounded to 3-4 decimals (some tables print D4 2.575 at n=3): atol 1e-3.
    np.testing.assert_allclose(got, TABLE[n], atol=1e-3)


def test_control_constants_exact_forms():
    # d2(2) = 2/√π and d3(2) = √2·√(1-2/π): the range of two normals is √2·|N(0,1)| (textbook identity).
    c = control_constants(2)
    assert c.d2 == pytest.approx(2 / math.sqrt(math.pi), abs=1e-9)
    assert c.d3 == pytest.approx(math.sqrt(2) * math.sqrt(1 - 2 / math.pi), abs=1e-8)
    # Individuals-chart factors from REFERENCES.md: 3/d2(2) = 2.65868, D4(2) = 3.26653.
    assert 3 / c.d2 == pytest.approx(2.65868, abs=1e-5)
    assert c.D4 == pytest.approx(3.26653, abs=1e-5)


def test_control_constants_d2_against_simulated_ranges():
    # Independent check at n = 25 (beyond the table): mean range of 25 normals, seeded simulation.
    rng = np.random.default_rng(7)
    r = np.ptp(rng.standard_normal((200_000, 25)), axis=1)
    c = control_constants(25)
    assert c.d2 == pytest.approx(r.mean(), abs=4 * r.std() / math.sqrt(r.size))
    assert c.d3 == pytest.approx(r.std(), rel=0.01)


@pytest.mark.parametrize("n", [1, 26, 2.5, True])
def test_control_constants_rejects_bad_n(n):
    with pytest.raises(ParameterError, match=r"n \(subgroup size\) must be an integer from 2 to 25; got"):
        control_constants(n)


def test_t2_limit_new_matches_reference_values_and_f_quantile():
    # REFERENCES.md [S formula NIST e-Handbook 6.5.4.4, C values]
    assert t2_limit_new(30, 3, 0.05) == pytest.approx(9.8569, abs=1e-4)
    assert t2_limit_new(30, 3, 0.01) == pytest.approx(15.3193, abs=1e-4)
    assert t2_limit_new(100, 5, 0.01) == pytest.approx(16.9254, abs=1e-4)
    # Hand computation from scipy.stats.f (reference library).
    n, a = 57, 4
    hand = a * (n + 1) * (n - 1) / (n * (n - a)) * stats.f.ppf(0.99, a, n - a)
    assert t2_limit_new(n, a, 0.01) == pytest.approx(hand, rel=1e-12)


def test_t2_limit_reference_matches_reference_values_and_beta_quantile():
    # REFERENCES.md: Tracy et al. 1992 formula, values computed with scipy.
    assert t2_limit_reference(30, 3, 0.05) == pytest.approx(7.1641, abs=1e-4)
    assert t2_limit_reference(30, 3, 0.01) == pytest.approx(9.7704, abs=1e-4)
    n, a = 57, 4
    hand = (n - 1) ** 2 / n * stats.beta.ppf(0.95, a / 2, (n - a - 1) / 2)
    assert t2_limit_reference(n, a, 0.05) == pytest.approx(hand, rel=1e-12)


def test_t2_limits_reject_bad_parameters():
    with pytest.raises(ParameterError, match=r"alpha must be a number with 0 < alpha < 1; got 1.5"):
        t2_limit_new(30, 3, 1.5)
    with pytest.raises(ParameterError, match=r"n must be larger than n_components; got n=3, n_components=3"):
        t2_limit_new(3, 3, 0.05)
    with pytest.raises(ParameterError, match=r"n_components must be an integer >= 1; got 0"):
        t2_limit_reference(30, 0, 0.05)


def test_spe_limit_jackson_mudholkar_reference_values():
    # REFERENCES.md: Jackson & Mudholkar 1979 formula; λ = [0.5, 0.3, 0.2, 0.1] -> 95% 2.87179, 99% 4.37498.
    lam = [0.5, 0.3, 0.2, 0.1]
    assert spe_limit_jackson_mudholkar(lam, 0.05) == pytest.approx(2.87179, abs=1e-5)
    assert spe_limit_jackson_mudholkar(lam, 0.01) == pytest.approx(4.37498, abs=1e-5)
    # λ = [1]*5: 95% 11.04395 (REFERENCES.md, computed from the formula).
    assert spe_limit_jackson_mudholkar([1.0] * 5, 0.05) == pytest.approx(11.04395, abs=1e-5)


def test_spe_limit_box_reference_values():
    # REFERENCES.md: Box 1954 g·χ²(h). λ = [0.5, 0.3, 0.2, 0.1]: 95% 2.83345, 99% 4.09514.
    lam = [0.5, 0.3, 0.2, 0.1]
    assert spe_limit_box(residual_eigenvalues=lam, alpha=0.05) == pytest.approx(2.83345, abs=1e-5)
    assert spe_limit_box(residual_eigenvalues=lam, alpha=0.01) == pytest.approx(4.09514, abs=1e-5)
    # λ = [1]*5 is exactly χ²(5): scipy.stats.chi2 95% quantile 11.07050.
    assert spe_limit_box(residual_eigenvalues=[1.0] * 5, alpha=0.05) == pytest.approx(stats.chi2.ppf(0.95, 5))
    assert spe_limit_box(residual_eigenvalues=[1.0] * 5, alpha=0.05) == pytest.approx(11.07050, abs=1e-5)
    # Moments m = 2, v = 1.6: g 0.4, h 5 -> 95% 4.4282, 99% 6.0345 (REFERENCES.md).
    assert spe_limit_box(spe_mean=2.0, spe_var=1.6, alpha=0.05) == pytest.approx(4.4282, abs=1e-4)
    assert spe_limit_box(spe_mean=2.0, spe_var=1.6, alpha=0.01) == pytest.approx(6.0345, abs=1e-4)


def test_spe_limit_box_needs_exactly_one_input():
    with pytest.raises(ParameterError, match="give either residual_eigenvalues, or both spe_mean and spe_var"):
        spe_limit_box(residual_eigenvalues=[1.0], spe_mean=1.0, spe_var=1.0, alpha=0.05)
    with pytest.raises(ParameterError, match="spe_mean and spe_var must both be finite and > 0"):
        spe_limit_box(spe_mean=1.0, alpha=0.05)
    with pytest.raises(ParameterError, match="residual_eigenvalues must be a non-empty 1-D array"):
        spe_limit_jackson_mudholkar([], 0.05)
