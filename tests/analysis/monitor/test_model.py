import hashlib
import io
import json
import math

import numpy as np
import pytest
from scipy import stats
from sklearn.decomposition import PCA

from analysis.errors import ModelError, ParameterError
from analysis.monitor import (
    ReferenceModel,
    band_contributions,
    spe_limit_box,
    spe_limit_jackson_mudholkar,
    t2_limit_new,
    t2_limit_reference,
)
from analysis.monitor.model import _gpd_fit_heavy, _oneway_anova, _Tail


def simulate(rng, n_lots, per_lot, *, n_slices=20, n_bands=8, lot_sd=0.2, slice_pattern=True):
    """Band levels (dB) from 3 latent factors + noise; the process structure is fixed (seed 1)."""
    g = np.random.default_rng(1)
    k = np.arange(n_slices)
    mu = 60 + (10 * np.sin(np.outer(k / n_slices * np.pi, np.arange(1, n_bands + 1) / 3)) if slice_pattern else 0)
    w = g.normal(size=(n_bands, 3)) * np.array([3.0, 2.0, 1.0])
    n = n_lots * per_lot
    lots = np.repeat(np.arange(n_lots), per_lot)
    u = rng.normal(size=(n, 1, 3))
    v = 0.7 * rng.normal(size=(n, n_slices, 3))
    lot_eff = rng.normal(size=(n_lots, n_bands)) * lot_sd
    x = mu + (u + v) @ w.T + lot_eff[lots][:, None, :] + 0.5 * rng.normal(size=(n, n_slices, n_bands))
    return x, lots


@pytest.fixture(scope="module")
def reference():
    x, lots = simulate(np.random.default_rng(10), 8, 25)
    return x, lots, ReferenceModel().fit(x, lots=lots, slice_times_s=np.arange(20) * 0.01)


def test_pca_matches_sklearn_and_covariance_eigendecomposition():
    x, _ = simulate(np.random.default_rng(0), 4, 10)
    rows = x.reshape(-1, x.shape[2])
    m = ReferenceModel(n_components=3, scaling="centre", centring="global").fit(x)
    # scikit-learn PCA (reference library): same eigenvalues (n-1 divisor) and loadings up to sign.
    sk = PCA(n_components=3).fit(rows)
    np.testing.assert_allclose(m.eigenvalues_, sk.explained_variance_, rtol=1e-10)
    np.testing.assert_allclose(np.abs(m.loadings_.T @ sk.components_.T), np.eye(3), atol=1e-8)
    # Independent maths: eigen-decomposition of the covariance matrix of the rows.
    evals, evecs = np.linalg.eigh(np.cov(rows, rowvar=False))
    evals, evecs = evals[::-1], evecs[:, ::-1]
    np.testing.assert_allclose(np.concatenate([m.eigenvalues_, m.residual_eigenvalues_]), evals, rtol=1e-9,
                               atol=1e-12)
    np.testing.assert_allclose(np.abs(np.sum(m.loadings_ * evecs[:, :3], axis=0)), 1.0, atol=1e-8)
    # Unit scaling is the eigen-decomposition of the correlation matrix.
    mu = ReferenceModel(n_components=3, scaling="unit", centring="global").fit(x)
    np.testing.assert_allclose(mu.eigenvalues_, np.linalg.eigvalsh(np.corrcoef(rows, rowvar=False))[::-1][:3],
                               rtol=1e-9)
    mp = ReferenceModel(n_components=3, scaling="pareto", centring="global").fit(x)
    np.testing.assert_allclose(mp.scale_, np.sqrt(rows.std(axis=0, ddof=1)))


def test_slice_centring_is_pca_of_deviations_from_the_mean_trajectory():
    # Nomikos & MacGregor 1994: centre (and scale) each time point by its reference mean (and SD), band by band;
    # the PCA of the pooled rows must then equal scikit-learn's PCA (reference library) of those rows.
    x, _ = simulate(np.random.default_rng(4), 4, 10)
    m = ReferenceModel(n_components=3, scaling="unit").fit(x)
    assert m.centring == "slice" and m.mean_.shape == x.shape[1:]
    z = (x - x.mean(axis=0)) / x.std(axis=0, ddof=1)
    rows = z.reshape(-1, x.shape[2])
    sk = PCA(n_components=3).fit(rows)
    np.testing.assert_allclose(m.eigenvalues_, sk.explained_variance_, rtol=1e-10)
    np.testing.assert_allclose(np.abs(m.loadings_.T @ sk.components_.T), np.eye(3), atol=1e-8)
    with pytest.raises(ModelError, match=r"give slice_index"):
        m.contributions(x[0, 5])


def test_event_residual_catches_a_small_shift_that_lasts_the_whole_event():
    # A 4 dB rise in a quarter of the bands over every slice: per slice it hides in the noise of the maxima,
    # averaged over the event's slices it does not.
    x, lots = simulate(np.random.default_rng(21), 8, 25)
    new, _ = simulate(np.random.default_rng(22), 4, 25)
    model = ReferenceModel().fit(x, lots=lots)
    clean = model.score(new)
    assert clean.flagged.mean() <= 0.05
    shifted = new.copy()
    shifted[:, :, :2] += 4.0
    r = model.score(shifted)
    assert r.flagged.mean() > 0.9
    assert (r.t2_flag | r.spe_flag).mean() < 0.5  # the maxima alone miss most of them
    assert r.event_spe_flag.mean() > 0.9
    assert any("mean spectrum departs from the model" in reason for reason in r.reasons(0))


def test_reference_t2_sums_to_a_times_n_minus_1(reference):
    x, _, m = reference
    r = m.score(x)
    # Σ T² over the reference rows = A(n-1) exactly with the n-1 divisor (REFERENCES.md [C]).
    assert r.t2.sum() == pytest.approx(m.n_components_ * (m.n_reference_ - 1), rel=1e-10)
    assert m.n_reference_ == x.shape[0] * x.shape[1]


def test_limits_and_envelope_follow_their_definitions(reference):
    x, _, m = reference
    a = m.n_components_
    assert m.t2_limit_ == t2_limit_new(m.n_reference_, a, 0.01)  # NIST e-Handbook 6.5.4.4
    assert m.t2_limit_reference_ == t2_limit_reference(m.n_reference_, a, 0.01)  # Tracy et al. 1992
    assert m.spe_limit_ == spe_limit_jackson_mudholkar(m.residual_eigenvalues_, 0.01)  # Jackson & Mudholkar 1979
    r = m.score(x)
    assert m.spe_limit_box_ == pytest.approx(
        spe_limit_box(spe_mean=r.spe.mean(), spe_var=r.spe.var(ddof=1), alpha=0.01))  # Box 1954 moments
    np.testing.assert_allclose(m.envelope_centre_, r.scores.mean(axis=0), atol=1e-10)
    np.testing.assert_allclose(m.envelope_spread_, r.scores.std(axis=0, ddof=1), rtol=1e-10)
    dev = np.abs(r.scores - m.envelope_centre_) > 3.0 * m.envelope_spread_
    np.testing.assert_array_equal(r.outside_envelope, dev.any(axis=2))
    d = np.mean(((r.scores - m.envelope_centre_) / m.envelope_spread_) ** 2, axis=(1, 2))
    np.testing.assert_allclose(r.trajectory_distance, d)
    # SPE is the squared distance to the model plane; T² the scaled squared scores (slice centring: mean_ and
    # scale_ are per slice, (n_slices, n_bands)).
    z = (x[0] - m.mean_) / m.scale_
    t = z @ m.loadings_
    np.testing.assert_allclose(r.spe[0], np.sum((z - t @ m.loadings_.T) ** 2, axis=1))
    np.testing.assert_allclose(r.t2[0], np.sum(t**2 / m.eigenvalues_, axis=1))


def test_cross_validation_finds_the_latent_dimension():
    # 3 latent factors, no slice pattern: PRESS (missing-column imputation) has its knee at 3 and rises
    # again as components fit noise (Bro et al. 2008: this PRESS does not fall trivially).
    x, lots = simulate(np.random.default_rng(2), 6, 20, slice_pattern=False)
    m = ReferenceModel(max_components=7).fit(x, lots=lots)
    assert m.n_components_ == 3
    assert m.cv_.folds == "lot" and m.cv_.n_folds == 6
    assert m.cv_.press[-1] > m.cv_.press[4]
    m2 = ReferenceModel(max_components=7).fit(x)  # no lots: folds by actuation
    assert m2.cv_.folds == "actuation" and m2.n_components_ == 3


def test_contributions_reference_example():
    # REFERENCES.md [C] (Westerhuis et al. 2000; Alcala & Qin 2009 formulas).
    p = np.array([[0.5, 0.5], [0.5, 0.5], [0.5, -0.5], [0.5, -0.5]])
    c = band_contributions([1.0, 2.0, 0.0, 1.0], p, [4.0, 1.0])
    np.testing.assert_allclose(c.t2, [0.75, 1.5, 0.0, -0.25])
    np.testing.assert_allclose(c.spe, [0.25] * 4)
    assert c.t2_total == pytest.approx(2.0) and c.spe_total == pytest.approx(1.0)
    np.testing.assert_array_equal(c.band_index, np.arange(4))


def test_model_contributions_sum_to_t2_and_spe(reference):
    x, _, m = reference
    r = m.score(x[:1])
    c = m.contributions(x[0])  # a batch of slice rows
    np.testing.assert_allclose(c.t2.sum(axis=1), r.t2[0], rtol=1e-10)
    np.testing.assert_allclose(c.spe.sum(axis=1), r.spe[0], rtol=1e-10)
    one = m.contributions(x[0, 5], slice_index=5)
    assert one.t2.shape == (x.shape[2],)
    assert one.t2_total == pytest.approx(r.t2[0, 5])
    with pytest.raises(ModelError, match=r"x_slice must have shape \(8,\) or \(n_rows, 8\).*got shape \(3,\)"):
        m.contributions([1.0, 2.0, 3.0])


def test_scoring_is_batch_independent(reference):
    x, _, m = reference
    whole = m.score(x[:10])
    for i in (0, 7):
        part = m.score(x[i:i + 1])
        np.testing.assert_allclose(part.t2[0], whole.t2[i], rtol=1e-12)
        np.testing.assert_allclose(part.spe[0], whole.spe[i], rtol=1e-12)


def test_large_batch_scores_in_one_pass():
    # 2,000 actuations × 40 slices × 30 bands (a fifth of the 10,000 target, to keep memory small).
    rng = np.random.default_rng(3)
    ref = rng.normal(size=(60, 40, 30))
    m = ReferenceModel(n_components=4).fit(ref)
    new = rng.normal(size=(2000, 40, 30))
    r = m.score(new)
    assert r.t2.shape == (2000, 40) and r.scores.shape == (2000, 40, 4) and r.flagged.shape == (2000,)


def test_actuation_false_alarm_rate_in_control():
    # Held-out calibration targets actuation_alpha = 1 % per actuation. Pooled over 6 reference sets
    # (10 lots × 30 actuations each) and 6 × 4,000 new in-control actuations from new lots. Tolerance is
    # binomial: 3 SD of a proportion from both the calibration sample (6 × 300) and the test sample (24,000).
    alpha, fars = 0.01, []
    for seed in range(6):
        rng = np.random.default_rng(100 + seed)
        x, lots = simulate(rng, 10, 30)
        m = ReferenceModel(actuation_alpha=alpha).fit(x, lots=lots)
        new, _ = simulate(rng, 80, 50)
        fars.append(m.score(new).flagged.mean())
    far = float(np.mean(fars))
    tol = 3 * math.sqrt(alpha * (1 - alpha) * (1 / (6 * 300) + 1 / 24_000))
    assert abs(far - alpha) < tol, (fars, tol)
    # Per-slice limits alone would flag far more: the reason for the actuation-level calibration.
    r = m.score(new)
    assert np.mean((r.t2 > r.t2_limit).any(axis=1) | (r.spe > r.spe_limit).any(axis=1)) > 5 * alpha


def test_oneway_anova_reproduces_the_textbook_random_effects_example():
    # Montgomery, Design and Analysis of Experiments, the random-effects example of ch. 3 (fabric strength from 4
    # looms chosen at random, 4 determinations each); from memory: MS_Treatments = 29.73, MS_E = 1.90 and
    # σ̂_τ² = (29.73 - 1.90)/4 = 6.96.
    y = np.array([[98, 97, 99, 96], [91, 90, 93, 92], [96, 95, 97, 95], [95, 96, 99, 98]], dtype=float)
    looms = np.repeat(np.arange(4), 4)
    ms_b, ms_w, n0, g, w2 = _oneway_anova(y.ravel(), looms)
    assert ms_b == pytest.approx(29.73, abs=0.005) and ms_w == pytest.approx(1.90, abs=0.005)
    assert n0 == 4 and g == 4 and w2 == pytest.approx(4 * 16 / 16**2)
    assert (ms_b - ms_w) / n0 == pytest.approx(6.96, abs=0.005)
    # Unbalanced: n0 = (N - Σn_i²/N)/(a - 1) (Montgomery, same section; Searle et al. 1992 §3.6), the mean
    # squares written out here group by group.
    keep = np.ones(16, bool)
    keep[[1, 2, 7]] = False
    z, grp = y.ravel()[keep], looms[keep]
    n_i = np.array([np.sum(grp == i) for i in range(4)], dtype=float)
    m_i = np.array([z[grp == i].mean() for i in range(4)])
    want_b = sum(n * (m - z.mean()) ** 2 for n, m in zip(n_i, m_i)) / 3
    want_w = sum(np.sum((z[grp == i] - m_i[i]) ** 2) for i in range(4)) / (z.size - 4)
    ms_b, ms_w, n0, _, _ = _oneway_anova(z, grp)
    assert (ms_b, ms_w) == (pytest.approx(want_b), pytest.approx(want_w))
    assert n0 == pytest.approx((13 - np.sum(n_i**2) / 13) / 3)


def test_model_keeps_the_lot_components_of_its_held_out_normal_scores():
    x, lots = simulate(np.random.default_rng(31), 5, 30, lot_sd=0.5)
    m = ReferenceModel().fit(x, lots=lots)
    held = (m.calibration_t2_ratio_, m.calibration_spe_ratio_, m.calibration_distance_,
            m.calibration_event_spe_ratio_)
    for j, v in enumerate(held):
        # van der Waerden scores (scipy ranks) and the balanced one-way ANOVA estimators (Montgomery ch. 3)
        z = stats.norm.ppf(stats.rankdata(v) / (v.size + 1))
        groups = [z[lots == lot] for lot in np.unique(lots)]
        ms_w = np.mean([np.var(gz, ddof=1) for gz in groups])
        ms_b = 30 * np.var([gz.mean() for gz in groups], ddof=1)
        assert m.calibration_within_variance_[j] == pytest.approx(ms_w, rel=1e-9)
        assert m.calibration_lot_variance_[j] == pytest.approx(max((ms_b - ms_w) / 30, 0.0), rel=1e-9, abs=1e-12)
    # A 0.5 dB lot effect in every band is 4.5 noise SDs of the event's mean spectrum (0.5/√20): it must show.
    assert m.calibration_lot_variance_[3] > 0.2
    without = ReferenceModel().fit(x)  # folds by actuation: no lots to tell apart, nothing widened
    assert np.all(without.calibration_lot_variance_ == 0)


def test_false_alarm_rate_on_new_lots_with_a_lot_random_effect():
    # Each band of a lot is shifted by N(0, 0.8²) dB, drawn anew for every lot; the reference has 6 lots, the new
    # actuations come from 50 further lots. The rate meant is the average over reference sets, so 60 independent
    # sets are pooled. Tolerance: 3 standard errors, the binomial one of a proportion from the calibration and the
    # new actuations combined with that of the mean of the 60 replicate rates (the actuations of one lot share
    # its effect, so one set's rate varies more than binomially).
    alpha, reps, fars, pooled = 0.01, 60, [], []
    for seed in range(reps):
        rng = np.random.default_rng(5000 + seed)
        x, lots = simulate(rng, 6, 20, n_slices=10, n_bands=6, lot_sd=0.8)
        new, _ = simulate(rng, 50, 20, n_slices=10, n_bands=6, lot_sd=0.8)
        m = ReferenceModel(actuation_alpha=alpha).fit(x, lots=lots)
        r = m.score(new)
        fars.append(r.flagged.mean())
        # The same held-out values with the pooled (1 - α') quantiles, no lot component: what the lot component
        # corrects.
        held = (m.calibration_t2_ratio_, m.calibration_spe_ratio_, m.calibration_distance_,
                m.calibration_event_spe_ratio_)
        values = (r.t2_ratio, r.spe_ratio, r.trajectory_distance, r.event_spe_ratio)
        pooled.append(np.mean(np.any([v > _Tail(h).ppf(1 - m.actuation_alpha_each_) for v, h in zip(values, held)],
                                     axis=0)))
    fars, pooled = np.asarray(fars), np.asarray(pooled)
    se_binomial = math.sqrt(alpha * (1 - alpha) * (1 / (reps * 120) + 1 / (reps * 1000)))
    tol = 3 * math.hypot(se_binomial, fars.std(ddof=1) / math.sqrt(reps))
    assert abs(fars.mean() - alpha) < tol, (fars.mean(), tol)
    gain = pooled - fars
    assert gain.mean() > 3 * gain.std(ddof=1) / math.sqrt(reps), (pooled.mean(), fars.mean())
    assert pooled.mean() - alpha > tol  # without the lot component the rate is off by more than the tolerance


@pytest.mark.parametrize("xi", [0.0, 0.4])
def test_tail_follows_a_heavy_tail_and_keeps_the_exponential_otherwise(xi):
    # Draws from a generalised Pareto law (scipy.stats.genpareto): above any threshold it stays generalised
    # Pareto of the same shape (threshold stability), so the true exceedance probability of each fitted
    # threshold is known. q = 0.14 % is about the per-statistic rate of the actuation decision at 0.5 %.
    q, rates, shapes = 0.0014, [], []
    rng = np.random.default_rng(77)
    for _ in range(100):
        v = stats.genpareto.rvs(xi, size=640, random_state=rng)
        t = _Tail(v)
        rates.append(stats.genpareto.sf(t.ppf(1 - q), xi))
        shapes.append(t.shape)
    shapes = np.asarray(shapes)
    if xi == 0.0:
        assert np.mean(shapes > 0) <= 0.12  # the test of ξ = 0 at 5 %: about 5 of 100 go heavy
        assert 0.75 < np.mean(rates) / q < 1.3
    else:
        assert np.mean(shapes > 0) >= 0.85 and abs(np.median(shapes) - xi) < 0.1
        # an exponential tail here gives about 3.9 times q (its thresholds fall short of a heavy tail)
        assert 0.75 < np.mean(rates) / q < 1.8


def test_heavy_tail_fit_matches_scipy_maximum_likelihood():
    # scipy.stats.genpareto.fit (reference library) maximises the same likelihood with loc = 0.
    rng = np.random.default_rng(8)
    x = stats.genpareto.rvs(0.35, scale=2.0, size=200, random_state=rng)
    xi, beta, deviance = _gpd_fit_heavy(x)
    c, _, scale = stats.genpareto.fit(x, floc=0.0)
    assert xi == pytest.approx(c, abs=2e-4) and beta == pytest.approx(scale, rel=2e-4)
    lr = 2 * (stats.genpareto.logpdf(x, c, 0, scale).sum() - stats.expon.logpdf(x, 0, x.mean()).sum())
    assert deviance == pytest.approx(lr, abs=1e-3)
    # A bounded tail (ξ < 0) is not followed: the fit stays on the exponential, with no gain.
    xi, beta, deviance = _gpd_fit_heavy(stats.uniform.rvs(size=200, random_state=rng))
    assert xi < 1e-4 and deviance < 1e-6


def test_known_shift_is_detected(reference):
    x, _, m = reference
    rng = np.random.default_rng(20)
    new, _ = simulate(rng, 10, 20)
    shifted = new.copy()
    # One band 8 dB louder on 6 of 20 slices (16 noise SDs, but the event's own slice-to-slice pattern leaves
    # structured residual in this row-wise model, so much smaller shifts are caught less often).
    shifted[:, 8:14, 2] += 8.0
    r0, r1 = m.score(new), m.score(shifted)
    assert r0.flagged.mean() < 0.05
    assert r1.flagged.mean() > 0.95
    assert r1.spe_flag.mean() > 0.9
    reasons = r1.reasons(int(np.flatnonzero(r1.spe_flag)[0]))
    assert any(s.startswith("SPE ") and "× its limit at slice " in s and " s)" in s for s in reasons)
    quiet = int(np.flatnonzero(~r0.flagged)[0])
    assert r0.reasons(quiet) == []


def test_reasons_wording_for_trajectory(reference):
    x, _, m = reference
    rng = np.random.default_rng(21)
    new, _ = simulate(rng, 4, 10)
    # Move the whole trajectory along the first loading by 4 envelope spreads.
    shift = 4.0 * m.envelope_spread_[:, 0:1] * m.loadings_[:, 0] * m.scale_
    r = m.score(new + shift)
    i = int(np.flatnonzero(r.trajectory_flag)[0])
    text = [s for s in r.reasons(i) if s.startswith("score trajectory")][0]
    assert f"on {r.slices_outside[i]} of 20 slices" in text


def test_unfitted_and_shape_errors(reference):
    x, _, m = reference
    with pytest.raises(ModelError, match=r"ReferenceModel is not fitted; call fit\(\.\.\.\) first"):
        ReferenceModel().score(x)
    with pytest.raises(ModelError, match="X has 7 bands but the reference model was fitted with 8 bands"):
        m.score(x[:, :, :7])
    with pytest.raises(ModelError, match="X has 19 slices but the reference model was fitted with 20 slices"):
        m.score(x[:, :19, :])


@pytest.mark.parametrize(
    "params, message",
    [
        ({"scaling": "robust"}, "scaling must be one of 'centre', 'unit', 'pareto'; got 'robust'"),
        ({"alpha": 0}, "alpha must be a number with 0 < alpha < 1; got 0"),
        ({"n_components": 0}, "n_components must be None or an integer >= 1; got 0"),
        ({"envelope_k": -1.0}, "envelope_k must be a number > 0; got -1.0"),
        ({"n_components": 8}, r"n_components must be at most 7 \(n_bands - 1\) for this X; got 8"),
    ],
)
def test_parameter_errors(params, message, reference):
    x, _, _ = reference
    with pytest.raises(ParameterError, match=message):
        ReferenceModel(**params).fit(x[:10])


def test_fit_input_errors(reference):
    x, _, _ = reference
    with pytest.raises(ParameterError, match=r"lots must have shape \(10,\) \(one label per actuation\)"):
        ReferenceModel().fit(x[:10], lots=[1, 2])
    with pytest.raises(ParameterError, match=r"X must have shape \(n_actuations, n_slices, n_bands\)"):
        ReferenceModel().fit(x[0])


def test_documents_round_trip_without_files(reference):
    x, _, m = reference
    text, blob = m.to_documents(metadata={"event": "e"})
    again = ReferenceModel.from_documents(text, blob, source="row 7")
    np.testing.assert_array_equal(again.score(x[:5]).t2, m.score(x[:5]).t2)
    assert again.metadata_ == {"event": "e"}
    with pytest.raises(ModelError, match=r"row 7: arrays do not match the checksum"):
        ReferenceModel.from_documents(text, blob[:-1] + b"x", source="row 7")


def test_older_model_documents_without_the_lot_fields_still_load(reference):
    # A model stored before the lot components and tail shapes were kept: its npz lacks them, its thresholds
    # (scalars in the JSON) are the ones it scores with.
    x, _, m = reference
    text, blob = m.to_documents()
    with np.load(io.BytesIO(blob), allow_pickle=False) as npz:
        arrays = {k: npz[k] for k in npz.files}
    for k in ("calibration_lot_variance", "calibration_within_variance", "calibration_tail_shape"):
        del arrays[k]
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    old_blob = buf.getvalue()
    doc = json.loads(text)
    doc["arrays_sha256"] = hashlib.sha256(old_blob).hexdigest()
    old = ReferenceModel.from_documents(json.dumps(doc), old_blob, source="stored model 3")
    assert old.calibration_lot_variance_ is None and old.calibration_tail_shape_ is None
    a, b = old.score(x[:20]), m.score(x[:20])
    np.testing.assert_array_equal(a.flagged, b.flagged)
    assert a.distance_threshold == b.distance_threshold and a.event_spe_threshold == b.event_spe_threshold
    again = ReferenceModel.from_documents(*m.to_documents())
    np.testing.assert_array_equal(again.calibration_tail_shape_, m.calibration_tail_shape_)


@pytest.mark.parametrize("scaling, centring", [("unit", "slice"), ("pareto", "slice"), ("unit", "global"),
                                               ("centre", "slice")])
def test_band_envelope_is_the_reference_mean_and_sd_per_slice_and_band(scaling, centring):
    x, lots = simulate(np.random.default_rng(11), 4, 20)
    m = ReferenceModel(n_components=2, scaling=scaling, centring=centring).fit(x)
    mean, spread = m.band_envelope()
    assert mean.shape == (x.shape[1], x.shape[2])
    # the reference's own sample mean and SD (n - 1), per slice or over all slices (numpy, independent of the model)
    pooled = x.reshape(-1, x.shape[2])
    want_mean = x.mean(axis=0) if centring == "slice" else np.broadcast_to(pooled.mean(axis=0), mean.shape)
    want_sd = x.std(axis=0, ddof=1) if centring == "slice" else np.broadcast_to(pooled.std(axis=0, ddof=1), mean.shape)
    np.testing.assert_allclose(mean, want_mean, rtol=1e-12)
    if scaling == "centre":
        assert spread is None  # plain centring keeps no spread
    else:
        np.testing.assert_allclose(spread, want_sd, rtol=1e-10)
