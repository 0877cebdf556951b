"""The reference model's resonance block (analysis.monitor.model): T² of whitened log features, its calibration
with the band statistics, scoring, messages and persistence."""

import math

import numpy as np
import pytest
from scipy.spatial.distance import mahalanobis

from analysis.errors import ModelError, ParameterError
from analysis.monitor import ReferenceModel
from tests.analysis.monitor.test_model import simulate

CENTRE_HZ = np.array([1200.0, 60.0])  # a peak frequency and its bandwidth
SPREAD = np.array([0.008, 0.08])      # natural-log SDs: 0.8 % and 8 %


def block(rng, n, *, shift=(0.0, 0.0)):
    """(n, 2) frequencies and bandwidths (Hz), correlated 0.3 on the log scale."""
    z = rng.standard_normal((n, 2))
    z[:, 1] = 0.3 * z[:, 0] + math.sqrt(1 - 0.3**2) * z[:, 1]
    return np.exp(np.log(CENTRE_HZ) + np.asarray(shift) + z * SPREAD)


NAMES = ("peak frequency in 900-1600 Hz", "bandwidth in 900-1600 Hz")


@pytest.fixture(scope="module")
def fitted():
    rng = np.random.default_rng(3)
    x, lots = simulate(rng, 8, 25)
    r = block(rng, x.shape[0])
    return x, lots, r, ReferenceModel().fit(x, lots=lots, resonance=r, resonance_names=NAMES)


def test_block_t2_is_the_mahalanobis_distance_of_the_log_features(fitted):
    # scipy.spatial.distance.mahalanobis with the inverse of the reference covariance of the logs (ddof 1): the
    # whitening by the Cholesky factor must give the same quadratic form.
    x, _, r, m = fitted
    logs = np.log(r)
    vi = np.linalg.inv(np.cov(logs, rowvar=False, ddof=1))
    new = block(np.random.default_rng(4), 5, shift=(0.01, -0.05))
    got = m.score(x[:5], resonance=new).resonance_t2
    want = [mahalanobis(np.log(v), logs.mean(axis=0), vi) ** 2 for v in new]
    np.testing.assert_allclose(got, want, rtol=1e-6)
    # over the reference rows themselves the mean T² is p·(n-1)/n (sum of squared whitened rows = p·(n-1))
    ref = m.score(x, resonance=r).resonance_t2
    assert ref.mean() == pytest.approx(2 * (len(r) - 1) / len(r), rel=1e-6)  # the ridge of 1e-9 aside


def test_the_block_joins_the_calibration_and_keeps_the_actuation_rate():
    # As test_model.test_actuation_false_alarm_rate_in_control, with the block as a fifth statistic: held-out
    # calibration over five statistics still gives the nominal 1 % per new in-control actuation (3 binomial SD).
    alpha, fars, block_rates = 0.01, [], []
    for seed in range(6):
        rng = np.random.default_rng(200 + seed)
        x, lots = simulate(rng, 10, 30)
        m = ReferenceModel(actuation_alpha=alpha).fit(x, lots=lots, resonance=block(rng, x.shape[0]))
        new, _ = simulate(rng, 80, 50)
        res = m.score(new, resonance=block(rng, new.shape[0]))
        fars.append(res.flagged.mean())
        block_rates.append(res.resonance_flag.mean())
    far = float(np.mean(fars))
    tol = 3 * math.sqrt(alpha * (1 - alpha) * (1 / (6 * 300) + 1 / 24_000))
    assert abs(far - alpha) < tol, (fars, tol)
    # the block spends part of the rate, not all of it and not nothing
    assert 0.0005 < float(np.mean(block_rates)) < alpha


def test_a_resonance_shift_the_bands_cannot_see_flags_on_the_block(fitted):
    x, _, _, m = fitted
    rng = np.random.default_rng(5)
    new, _ = simulate(rng, 4, 50)
    normal = m.score(new, resonance=block(rng, new.shape[0]))
    shifted = m.score(new, resonance=block(rng, new.shape[0], shift=(math.log(1.04), 0.0)))  # +4 % = 5 SD
    assert shifted.resonance_flag.mean() > 0.9 > 0.05 > normal.resonance_flag.mean()
    # the band statistics are the same: only the block moved
    np.testing.assert_array_equal(shifted.t2_ratio, normal.t2_ratio)
    why = shifted.reasons(int(np.flatnonzero(shifted.resonance_flag & ~shifted.t2_flag & ~shifted.spe_flag)[0]))
    assert any("resonances depart" in w and "peak frequency in 900-1600 Hz" in w and "%" in w for w in why), why


def test_a_missing_feature_reads_as_the_reference_median(fitted):
    x, _, r, m = fitted
    one = block(np.random.default_rng(6), 1)
    gap = one.copy()
    gap[0, 1] = np.nan
    filled = one.copy()
    filled[0, 1] = math.exp(float(np.median(np.log(r[:, 1]))))
    np.testing.assert_allclose(m.score(x[:1], resonance=gap).resonance_t2, m.score(x[:1], resonance=filled)
                               .resonance_t2)


def test_block_errors(fitted):
    x, lots, r, m = fitted
    with pytest.raises(ModelError, match="needs the actuations' resonance features"):
        m.score(x[:2])
    with pytest.raises(ModelError, match="resonance has 1 features but the model was fitted with 2"):
        m.score(x[:2], resonance=r[:2, :1])
    with pytest.raises(ParameterError, match=r"resonance must have shape \(200, n_features\)"):
        ReferenceModel().fit(x, lots=lots, resonance=r[:10])
    bad = r.copy()
    bad[3, 0] = -5.0
    with pytest.raises(ParameterError, match="must be positive .Hz. or NaN"):
        ReferenceModel().fit(x, lots=lots, resonance=bad)
    with pytest.raises(ParameterError, match="must name the 2 resonance features; got 1"):
        ReferenceModel().fit(x, lots=lots, resonance=r, resonance_names=["f"])


def test_block_round_trips_through_the_documents(fitted):
    x, _, r, m = fitted
    j, b = m.to_documents()
    back = ReferenceModel.from_documents(j, b)
    new = block(np.random.default_rng(7), 10, shift=(0.02, 0.0))
    a, c = m.score(x[:10], resonance=new), back.score(x[:10], resonance=new)
    np.testing.assert_array_equal(a.resonance_t2, c.resonance_t2)
    assert back.resonance_names_ == NAMES and back.resonance_threshold_ == m.resonance_threshold_
    # a model without a block has none after loading either, and ignores a block given to score()
    plain = ReferenceModel().fit(x, lots=np.repeat(np.arange(8), 25))
    again = ReferenceModel.from_documents(*plain.to_documents())
    assert not again.has_resonance and again.score(x[:2], resonance=new[:2]).resonance_t2 is None
