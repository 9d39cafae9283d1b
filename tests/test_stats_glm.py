"""GLM t and F contrasts against statsmodels OLS and scipy.stats.ttest_ind."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from shapedesc.errors import StatsInputError
from shapedesc.stats.design import build_design
from shapedesc.stats.glm import fit_contrast

sm = pytest.importorskip("statsmodels.api")


def _study(n=60, seed=1, levels=("A", "B")):
    rng = np.random.default_rng(seed)
    t = pd.DataFrame({
        "subject": [f"s{i}" for i in range(n)],
        "group": np.array(levels)[np.arange(n) % len(levels)],
        "age": rng.normal(40, 12, n),
        "sex": rng.choice(["F", "M"], n),
        "head_size_mm3": rng.normal(1.5e6, 1e5, n),
    })
    return t, rng


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_t_contrast_matches_statsmodels(seed):
    t, rng = _study(seed=seed)
    d = build_design(t, group="group", covariates=["age", "sex", "head_size_mm3"])
    y = rng.normal(size=(d.n_subjects, 5)) + 0.5 * d.matrix[:, [1]] + 0.01 * d.matrix[:, [2]]
    r = fit_contrast(y, d.matrix, d.contrast)
    assert r.kind == "t" and r.df2 == d.n_subjects - d.matrix.shape[1]
    for j in range(y.shape[1]):
        # Source: statsmodels OLS(...).fit().t_test(c)
        ref = sm.OLS(y[:, j], d.matrix).fit().t_test(d.contrast[:, 0])
        # 1e-10 relative: two least-squares solvers on a condition-number ~1e6 design
        # (head size in mm3), agreeing to ~1e-10 of the value
        assert r.statistic[j] == pytest.approx(float(np.squeeze(ref.tvalue)), rel=1e-10)
        assert r.p_value[j] == pytest.approx(float(np.squeeze(ref.pvalue)), rel=1e-9)
        assert r.estimate[0, j] == pytest.approx(float(np.squeeze(ref.effect)), rel=1e-9)
        assert r.standard_error[j] == pytest.approx(float(np.squeeze(ref.sd)), rel=1e-9)


def test_f_contrast_matches_statsmodels():
    t, rng = _study(n=63, levels=("A", "B", "C"))
    d = build_design(t, group="group", covariates=["age", "sex"])
    y = rng.normal(size=(d.n_subjects, 4))
    r = fit_contrast(y, d.matrix, d.contrast)
    assert r.kind == "F" and r.df1 == 2
    for j in range(4):
        # Source: statsmodels OLS(...).fit().f_test(R) with R = C'
        ref = sm.OLS(y[:, j], d.matrix).fit().f_test(d.contrast.T)
        # 1e-10 relative: float64 rounding of two different solvers
        assert r.statistic[j] == pytest.approx(float(np.squeeze(ref.fvalue)), rel=1e-10)
        assert r.p_value[j] == pytest.approx(float(np.squeeze(ref.pvalue)), rel=1e-9)


def test_two_groups_match_student_t():
    t, rng = _study(n=37)
    d = build_design(t, group="group")
    y = rng.normal(size=(d.n_subjects, 3))
    y[d.group_codes == 1] += 0.7
    r = fit_contrast(y, d.matrix, d.contrast)
    # Source: scipy.stats.ttest_ind (equal variances), other minus reference
    ref = stats.ttest_ind(y[d.group_codes == 1], y[d.group_codes == 0], axis=0)
    np.testing.assert_allclose(r.statistic, ref.statistic, rtol=1e-12)  # same formula, rounding
    np.testing.assert_allclose(r.p_value, ref.pvalue, rtol=1e-10)


def test_bad_inputs():
    x = np.column_stack([np.ones(10), np.arange(10) % 2])
    with pytest.raises(StatsInputError, match="NaN"):
        fit_contrast(np.full(10, np.nan), x, [0, 1])
    with pytest.raises(StatsInputError, match="rank deficient"):
        fit_contrast(np.ones(10), np.column_stack([x, x[:, 1]]), [0, 1, 0])
