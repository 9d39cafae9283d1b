"""Shape space: PCA vs scikit-learn's PCA, mode points, separability AUC vs the binormal
closed form, permutation p-values."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from shapedesc.errors import StatsInputError
from shapedesc.stats.shapespace import (
    classify_groups,
    coefficient_features,
    features_to_coefficients,
    shape_pca,
)


def test_pca_matches_sklearn():
    decomposition = pytest.importorskip("sklearn.decomposition")
    rng = np.random.default_rng(0)
    x = rng.normal(size=(50, 8)) @ rng.normal(size=(8, 8)) + 3.0
    sp = shape_pca(x, n_modes=4)
    # Source: sklearn.decomposition.PCA (full SVD); signs of modes are arbitrary
    ref = decomposition.PCA(n_components=4, svd_solver="full").fit(x)
    np.testing.assert_allclose(sp.explained_variance, ref.explained_variance_, rtol=1e-10)
    np.testing.assert_allclose(sp.explained_variance_ratio, ref.explained_variance_ratio_,
                               rtol=1e-10)
    signs = np.sign(np.sum(sp.components * ref.components_, axis=1))
    np.testing.assert_allclose(sp.components, signs[:, None] * ref.components_, atol=1e-10)
    np.testing.assert_allclose(sp.scores, ref.transform(x) * signs, atol=1e-9)
    # +2 SD along mode 0 has score 2 sqrt(var_0) on mode 0 and 0 on the others
    pt = sp.mode_point(0, 2.0)
    sc = (pt - sp.mean) @ sp.components.T
    np.testing.assert_allclose(sc, [2 * np.sqrt(sp.explained_variance[0]), 0, 0, 0], atol=1e-10)


def test_coefficient_features_round_trip():
    rng = np.random.default_rng(1)
    vals = [rng.normal(size=(16, 3)) for _ in range(3)]  # degree 3
    f = coefficient_features(vals)
    assert f.shape == (3, 45)
    back = features_to_coefficients(f[1], 3)
    assert np.array_equal(back[1:], vals[1][1:]) and np.all(back[0] == 0)
    assert coefficient_features(vals, degree=2).shape == (3, 24)
    with pytest.raises(StatsInputError, match=r"\(\(L\+1\)\^2, 3\)"):
        coefficient_features([np.ones((15, 3))])


def test_separability_auc_near_the_binormal_value():
    rng = np.random.default_rng(2)
    n, delta = 300, 1.5
    codes = np.arange(n) % 2
    x = rng.normal(size=(n, 3))
    x[codes == 1, 0] += delta
    r = classify_groups(x, codes, n_permutations=19, rng=3)
    # closed form (binormal ROC, equal covariance): AUC = Phi(delta / sqrt(2)) = 0.856.
    # 0.05: fold AUCs of 60 subjects have SE ~0.05 each, the mean over 5 folds ~0.022,
    # plus the small loss of fitting 3 coefficients
    assert r.auc == pytest.approx(stats.norm.cdf(delta / np.sqrt(2)), abs=0.05)
    assert r.p_value == pytest.approx(1 / 20)  # no permutation reaches it
    assert r.fold_auc.shape == (5,) and "not a diagnostic" in r.note
    again = classify_groups(x, codes, n_permutations=19, rng=3)
    assert again.auc == r.auc and np.array_equal(again.null_auc, r.null_auc)


def test_separability_under_the_null():
    rng = np.random.default_rng(4)
    codes = np.arange(120) % 3
    x = rng.normal(size=(120, 4))
    r = classify_groups(x, codes, n_permutations=19, rng=5)
    # no signal: AUC near 0.5 (SE of a 5-fold mean AUC at n=120 ~0.04; 0.15 is ~4 SE)
    assert abs(r.auc - 0.5) < 0.15
    assert r.p_value > 0.05
    with pytest.raises(StatsInputError, match="at least 2 per group"):
        classify_groups(x[:7], np.array([0, 0, 0, 0, 0, 0, 1]), n_permutations=5)


def test_auc_matches_sklearn_roc_auc_score():
    metrics = pytest.importorskip("sklearn.metrics")
    from shapedesc.stats.shapespace import _auc

    rng = np.random.default_rng(6)
    y2 = rng.integers(0, 2, 50)
    p1 = np.round(rng.uniform(size=50), 1)  # rounding makes ties
    proba2 = np.column_stack([1 - p1, p1])
    # Source: sklearn.metrics.roc_auc_score (trapezoidal ROC area = Mann-Whitney U / n1 n0)
    assert _auc(proba2, y2, 2) == pytest.approx(metrics.roc_auc_score(y2, p1), rel=1e-12)
    y3 = np.arange(60) % 3
    raw = rng.uniform(size=(60, 3))
    proba3 = raw / raw.sum(1, keepdims=True)
    ref = metrics.roc_auc_score(y3, proba3, multi_class="ovr", average="macro")
    assert _auc(proba3, y3, 3) == pytest.approx(ref, rel=1e-12)
