"""Hotelling's T² and Pillai's trace against statsmodels MANOVA and the two-sample T² formula."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from shapedesc.errors import StatsInputError
from shapedesc.stats.multivariate import multivariate_test

MANOVA = pytest.importorskip("statsmodels.multivariate.manova").MANOVA


def _mv_stats(y, x, c):
    res = MANOVA(y, x).mv_test([("h", np.atleast_2d(c.T))])
    return res.results["h"]["stat"]


def test_two_groups_hotelling_t2_matches_textbook_and_statsmodels():
    rng = np.random.default_rng(0)
    n1, n2, m = 21, 26, 4
    a = rng.normal(size=(n1, m))
    b = rng.normal(size=(n2, m)) + [0.0, 0.3, 0.6, 0.0]
    y = np.vstack([a, b])
    x = np.column_stack([np.ones(n1 + n2), np.r_[np.zeros(n1), np.ones(n2)]])
    r = multivariate_test(y, x, np.array([0.0, 1.0]), n_permutations=999, rng=1)
    # Textbook two-sample T² (Hotelling 1931; e.g. Johnson & Wichern, Applied
    # Multivariate Statistical Analysis, eq. 6-27), written out here:
    d = b.mean(0) - a.mean(0)
    sp = ((n1 - 1) * np.cov(a.T) + (n2 - 1) * np.cov(b.T)) / (n1 + n2 - 2)
    t2 = n1 * n2 / (n1 + n2) * d @ np.linalg.solve(sp, d)
    assert r.statistic_name == "hotelling_t2"
    assert r.statistic == pytest.approx(t2, rel=1e-10)  # rounding of two solves
    f = (n1 + n2 - m - 1) / (m * (n1 + n2 - 2)) * t2
    assert r.f_value == pytest.approx(f, rel=1e-10)
    assert r.p_parametric == pytest.approx(stats.f.sf(f, m, n1 + n2 - m - 1), rel=1e-9)
    # Source: statsmodels MANOVA; Hotelling-Lawley trace = T²/(n1 + n2 - 2) for two groups
    st = _mv_stats(y, x, np.array([[0.0], [1.0]]))
    hlt = float(st.loc["Hotelling-Lawley trace", "Value"])
    assert r.hotelling_lawley_trace == pytest.approx(hlt, rel=1e-10)
    assert r.statistic == pytest.approx((n1 + n2 - 2) * hlt, rel=1e-10)
    assert r.p_parametric == pytest.approx(float(st.loc["Hotelling-Lawley trace", "Pr > F"]), rel=1e-8)


def test_pillai_with_covariates_matches_statsmodels():
    rng = np.random.default_rng(1)
    n, m = 66, 5
    grp = np.arange(n) % 3
    age = rng.normal(50, 10, n)
    x = np.column_stack([np.ones(n), grp == 1, grp == 2, age - age.mean()]).astype(float)
    y = rng.normal(size=(n, m)) + 0.03 * age[:, None]
    y[grp == 2, 1] += 0.5
    c = np.zeros((4, 2))
    c[1, 0] = c[2, 1] = 1
    r = multivariate_test(y, x, c, n_permutations=999, rng=2)
    st = _mv_stats(y, x, c)
    # Source: statsmodels MANOVA mv_test: Pillai's trace, its F approximation and p
    assert r.statistic_name == "pillai_trace"
    assert r.statistic == pytest.approx(float(st.loc["Pillai's trace", "Value"]), rel=1e-10)
    assert r.f_value == pytest.approx(float(st.loc["Pillai's trace", "F Value"]), rel=1e-9)
    assert r.df2 == pytest.approx(float(st.loc["Pillai's trace", "Den DF"]))
    assert r.p_parametric == pytest.approx(float(st.loc["Pillai's trace", "Pr > F"]), rel=1e-8)
    assert r.hotelling_lawley_trace == pytest.approx(
        float(st.loc["Hotelling-Lawley trace", "Value"]), rel=1e-10)
    # Gaussian data: the permutation p estimates the parametric one. 999 permutations:
    # binomial SE sqrt(p(1-p)/999) <= 0.016; 4 SE plus the F approximation's own error
    assert abs(r.p_perm - r.p_parametric) < 4 * 0.016 + 0.02


def test_permutation_p_under_null_and_effect():
    rng = np.random.default_rng(3)
    n, m = 40, 6
    x = np.column_stack([np.ones(n), np.arange(n) % 2]).astype(float)
    null = multivariate_test(rng.normal(size=(n, m)), x, [0, 1], n_permutations=500, rng=4)
    y = rng.normal(size=(n, m))
    y[x[:, 1] == 1, 2] += 2.5  # d = 2.5: T² ~ 60, p ~ 1e-6
    hit = multivariate_test(y, x, [0, 1], n_permutations=500, rng=4)
    assert hit.p_perm < 0.01 < null.p_perm
    assert multivariate_test(y, x, [0, 1], n_permutations=500, rng=4) == hit  # same seed


def test_too_many_responses():
    x = np.column_stack([np.ones(10), np.arange(10) % 2]).astype(float)
    with pytest.raises(StatsInputError, match="fewer responses"):
        multivariate_test(np.random.default_rng(0).normal(size=(10, 8)), x, [0, 1])
