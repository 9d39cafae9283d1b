"""Freedman–Lane permutation tests: vs scipy.stats.permutation_test, vs statsmodels OLS
refits of the permuted data (Winkler et al. 2014, Table 2), determinism, calibration."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from shapedesc.stats.permutation import freedman_lane, random_permutations

sm = pytest.importorskip("statsmodels.api")


def _two_groups(n1=18, n2=22, m=4, seed=0, shift=(0.0, 0.35, 0.6, 0.9)):
    rng = np.random.default_rng(seed)
    y = rng.normal(size=(n1 + n2, m))
    y[n1:] += np.asarray(shift)[:m]
    x = np.column_stack([np.ones(n1 + n2), np.r_[np.zeros(n1), np.ones(n2)]])
    return y, x, n1


def _t_stat(a, b, axis=0):
    return stats.ttest_ind(b, a, axis=axis).statistic


def test_uncorrected_p_matches_scipy_permutation_test():
    y, x, n1 = _two_groups()
    B = 4000
    r = freedman_lane(y, x, [0, 1], n_permutations=B, rng=11)
    # Source: scipy.stats.permutation_test, independent samples, same statistic (Student
    # t of the second group against the first), two-sided, same number of resamples.
    ref = stats.permutation_test((y[:n1], y[n1:]), _t_stat, permutation_type="independent",
                                 n_resamples=B, alternative="two-sided", vectorized=True,
                                 axis=0, random_state=11)
    np.testing.assert_allclose(r.statistic, ref.statistic, rtol=1e-12)  # same formula
    # Both are Monte-Carlo estimates from B independent permutations. Ours counts
    # |t*| >= |t|: binomial SE sqrt(p(1-p)/B). scipy's two-sided p doubles the smaller
    # one-sided tail (a binomial estimate of p/2), so its SE is 2 sqrt((p/2)(1-p/2)/B) =
    # sqrt(p(2-p)/B); with a symmetric null both estimate the same p. Allow 4 SE of the
    # difference (plus the 1/(B+1) offset of the counting conventions): a correct engine
    # fails with probability < 1e-4 per column.
    p = np.clip(ref.pvalue, 1.0 / B, 1.0)
    tol = 4 * np.sqrt((p * (1 - p) + p * (2 - p)) / B) + 1.0 / (B + 1)
    assert np.all(np.abs(r.p_perm - ref.pvalue) <= tol), (r.p_perm, ref.pvalue, tol)
    # And the parametric p matches Student's t distribution (scipy.stats.ttest_ind).
    np.testing.assert_allclose(r.p_parametric, stats.ttest_ind(y[n1:], y[:n1]).pvalue, rtol=1e-10)


def test_fwer_p_matches_scipy_permutation_test_of_the_maximum():
    y, x, n1 = _two_groups(seed=3, shift=(0.0, 0.2, 0.5, 0.3))
    B = 4000
    r = freedman_lane(y, x, [0, 1], n_permutations=B, rng=5)

    def max_abs_t(a, b, axis=0):
        return np.max(np.abs(_t_stat(a, b, axis=axis)), axis=-1)

    # Source: scipy.stats.permutation_test of the statistic max_j |t_j| (the max-statistic
    # FWER of Westfall & Young / Nichols & Holmes): its p is the FWER-corrected p of the
    # test holding the maximum.
    ref = stats.permutation_test((y[:n1], y[n1:]), max_abs_t, permutation_type="independent",
                                 n_resamples=B, alternative="greater", vectorized=True,
                                 axis=0, random_state=5)
    j = int(np.argmax(np.abs(r.statistic)))
    p = max(ref.pvalue, 1.0 / B)
    # one-sided on both sides here: each binomial SE sqrt(p(1-p)/B), 4 SE of the difference
    tol = 4 * np.sqrt(2 * p * (1 - p) / B) + 1.0 / (B + 1)
    assert abs(r.p_fwer[j] - ref.pvalue) <= tol
    # FWER p-values are never below the uncorrected ones (same permutations)
    assert np.all(r.p_fwer >= r.p_perm - 1e-15)


def test_permuted_statistics_equal_statsmodels_refits():
    # Winkler et al. 2014, Table 2 (Freedman-Lane): Y* = P R_z Y + H_z Y, refit the full
    # model; the engine never forms Y*, so compare its per-permutation maximum against
    # explicit statsmodels OLS refits of Y* with the same permutations.
    rng = np.random.default_rng(2)
    n, m = 30, 3
    age = rng.normal(50, 10, n)
    g = (np.arange(n) % 2).astype(float)
    x = np.column_stack([np.ones(n), g, age - age.mean(), rng.normal(size=n)])
    y = rng.normal(size=(n, m)) + 0.05 * age[:, None]
    c = np.array([0.0, 1.0, 0.0, 0.0])
    B = 40
    r = freedman_lane(y, x, c, n_permutations=B, rng=9)
    perms = random_permutations(n, B, rng=9)
    z = x[:, [0, 2, 3]]  # nuisance: the columns the contrast does not test
    hz = z @ np.linalg.pinv(z)
    for b in range(B):
        ystar = (y - hz @ y)[perms[b]] + hz @ y
        tmax = max(abs(float(np.squeeze(sm.OLS(ystar[:, j], x).fit().t_test(c).tvalue)))
                   for j in range(m))
        # 1e-9 relative: float64 rounding of two routes to the same statistic
        assert r.max_null[b] == pytest.approx(tmax, rel=1e-9)


def test_same_seed_same_result_and_blocks():
    y, x, _ = _two_groups(m=3)
    a = freedman_lane(y, x, [0, 1], n_permutations=300, rng=123)
    b = freedman_lane(y, x, [0, 1], n_permutations=300, rng=np.random.default_rng(123))
    c = freedman_lane(y, x, [0, 1], n_permutations=300, rng=124)
    assert np.array_equal(a.p_perm, b.p_perm) and np.array_equal(a.max_null, b.max_null)
    assert not np.array_equal(a.max_null, c.max_null)
    blocks = np.arange(y.shape[0]) % 4
    perms = random_permutations(y.shape[0], 50, rng=0, blocks=blocks)
    assert np.all(blocks[perms] == blocks[None, :])  # rows stay within their block
    assert np.all(np.sort(perms, axis=1) == np.arange(y.shape[0]))  # true permutations


def test_f_statistics_and_one_sided():
    rng = np.random.default_rng(4)
    n = 45
    grp = np.arange(n) % 3
    x = np.column_stack([np.ones(n), grp == 1, grp == 2]).astype(float)
    y = rng.normal(size=(n, 2))
    y[grp == 2, 0] += 1.2
    r = freedman_lane(y, x, np.eye(3)[:, 1:], n_permutations=999, rng=1)
    # Source: scipy.stats.f_oneway (one-way ANOVA F and its p)
    ref = stats.f_oneway(*(y[grp == k] for k in range(3)))
    np.testing.assert_allclose(r.statistic, ref.statistic, rtol=1e-10)
    np.testing.assert_allclose(r.p_parametric, ref.pvalue, rtol=1e-8)
    assert r.kind == "F" and r.p_perm[0] < 0.01
    y2, x2, _ = _two_groups(m=2, shift=(0.8, 0.8))
    gt = freedman_lane(y2, x2, [0, 1], n_permutations=500, rng=0, alternative="greater")
    lt = freedman_lane(y2, x2, [0, 1], n_permutations=500, rng=0, alternative="less")
    assert np.all(gt.p_perm < 0.05) and np.all(lt.p_perm > 0.9)


def _null_study(rng, n, m, n_perm):
    # No group effect; nuisance effects present and a covariate correlated with group,
    # degrees correlated (AR(1), rho 0.6): the setting Freedman-Lane is meant for.
    g = (np.arange(n) % 2).astype(float)
    age = rng.normal(60, 8, n) + 4 * g
    sex = rng.integers(0, 2, n).astype(float)
    hs = rng.normal(0, 1, n)
    x = np.column_stack([np.ones(n), g, age - age.mean(), sex - sex.mean(), hs])
    rho = 0.6
    cov = rho ** np.abs(np.subtract.outer(np.arange(m), np.arange(m)))
    e = rng.normal(size=(n, m)) @ np.linalg.cholesky(cov).T
    y = e + 0.05 * age[:, None] + 0.3 * sex[:, None] + 0.2 * hs[:, None]
    return freedman_lane(y, x, np.eye(5)[1], n_permutations=n_perm, rng=rng)


@pytest.mark.slow
def test_fwer_calibration_under_the_null(full):
    """Family-wise false-positive rate at alpha 0.05 over simulated null studies.

    Full size (``--full``): 1,000 studies of 80 subjects x 14 degrees, 3 covariates,
    1,000 permutations each; the accepted band is [0.035, 0.065] = 0.05 +- 2.18 binomial
    SE (SE = sqrt(0.05 * 0.95 / 1000) = 0.0069; coverage 97 %).  Reduced (default): 300
    studies of 500 permutations, band 0.05 +- 2.18 SE with SE = sqrt(0.05*0.95/300) =
    0.0126, i.e. [0.023, 0.077] (same coverage, wider because fewer studies).
    """
    from threadpoolctl import threadpool_limits  # installed with scikit-learn

    n_studies, n_perm = (1000, 1000) if full else (300, 500)
    rng = np.random.default_rng(20140601)
    # one BLAS thread: these products are small, and threads only add overhead
    with threadpool_limits(1):
        hits = sum(bool(_null_study(rng, 80, 14, n_perm).p_fwer.min() <= 0.05)
                   for _ in range(n_studies))
    rate = hits / n_studies
    half = 2.18 * np.sqrt(0.05 * 0.95 / n_studies)
    assert 0.05 - half <= rate <= 0.05 + half, rate
