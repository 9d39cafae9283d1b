"""Study-level comparison (library): three groups (F and Pillai), degree parsing, inputs."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from shapedesc.errors import StatsInputError
from shapedesc.stats.compare import compare_spectra, log_energies, parse_degrees
from shapedesc.stats.effect import hedges_g

sm = pytest.importorskip("statsmodels.api")


def _three_groups(n=45, lmax=6, seed=0):
    rng = np.random.default_rng(seed)
    grp = np.array(["ctl", "mci", "ad"])[np.arange(n) % 3]
    age = rng.normal(70, 6, n)
    loge = -2.0 * np.log(np.arange(1, lmax + 1)) + rng.normal(0, 0.2, size=(n, lmax))
    loge[grp == "ad", 2] += 0.4  # degree 3
    t = pd.DataFrame({"subject": [f"s{i}" for i in range(n)], "structure": "putamen",
                      "group": grp, "age": age})
    for k in range(lmax):
        t[f"l{k + 1}"] = np.exp(loge[:, k])
    return t


def test_three_groups_f_tests_match_statsmodels():
    t = _three_groups()
    res = compare_spectra(t, group="group", covariates=["age"], degrees="2-6",
                          n_permutations=500, classification_permutations=5, rng=1)
    sc = res.structures[0]
    dt = sc.degree_tests
    assert "F" in dt.columns and "hedges_g" not in dt.columns
    assert sc.design.levels == ("ad", "ctl", "mci")  # sorted; "ad" is the reference
    y = log_energies(t, [2, 3, 4, 5, 6])
    for j, row in dt.iterrows():
        # Source: statsmodels OLS f_test of the two group indicators on log(l_k)
        ref = sm.OLS(y[:, j], sc.design.matrix).fit().f_test(sc.design.contrast.T)
        # 1e-10 relative: float64 rounding of two solvers
        assert row["F"] == pytest.approx(float(np.squeeze(ref.fvalue)), rel=1e-10)
        assert row["p_parametric"] == pytest.approx(float(np.squeeze(ref.pvalue)), rel=1e-8)
    assert dt.set_index("degree").loc[3, "p_fwer"] < 0.05
    assert sc.global_test["statistic_name"] == "pillai_trace"
    assert sc.classification["levels"] == "ad,ctl,mci"


def test_parse_degrees():
    avail = list(range(1, 16))
    assert parse_degrees("2-15", avail) == tuple(range(2, 16))
    assert parse_degrees("2-4, 8", avail) == (2, 3, 4, 8)
    assert parse_degrees(None, avail) == tuple(range(2, 16))
    for bad, msg in (("0-3", "degree 0"), ("2-20", "requested"), ("5-2", "backwards"),
                     ("two", "cannot read")):
        with pytest.raises(StatsInputError, match=msg):
            parse_degrees(bad, avail)


def test_table_problems_are_named():
    t = _three_groups()
    t.loc[4, "l3"] = 0.0
    with pytest.raises(StatsInputError, match=r"l3 has 1 .*rows s4"):
        compare_spectra(t, group="group", degrees="2-6", n_permutations=10)
    t = _three_groups()
    dup = pd.concat([t, t.iloc[[0]]], ignore_index=True)
    with pytest.raises(StatsInputError, match="repeated"):
        compare_spectra(dup, group="group", n_permutations=10)
    with pytest.raises(StatsInputError, match="structure"):
        compare_spectra(t, group="group", structures=["caudate"], n_permutations=10)
    with pytest.raises(StatsInputError, match="site column 'scanner' not found"):
        compare_spectra(t, group="group", site="scanner", n_permutations=10)


def test_pointwise_stacked_synthesis_equals_per_subject_reconstruction():
    from shapedesc.reconstruct import reconstruct_values
    from shapedesc.stats.compare import pointwise_comparison
    from shapedesc.stats.design import build_design
    from shapedesc.stats.vertexwise import normal_displacement, vertex_normals

    rng = np.random.default_rng(8)
    n, lmax = 8, 3
    vals = []
    for _ in range(n):
        v = rng.normal(0, 0.1, size=((lmax + 1) ** 2, 3))
        v[3, 0] += 20.0
        v[1, 1] += 15.0
        v[2, 2] += 10.0
        vals.append(v)
    t = pd.DataFrame({"subject": [f"s{i}" for i in range(n)], "group": ["A", "B"] * 4})
    d = build_design(t, group="group")
    vt = pointwise_comparison(vals, d, smoothing=0.01, level=2, n_permutations=20, rng=0)
    # reference: one reconstruct_values call per subject (the lead's documented use)
    each = np.stack([reconstruct_values(v, lmax, smoothing=0.01, level=2)[0] for v in vals])
    mean = each.mean(0)
    ref = normal_displacement(each, mean, vertex_normals(mean, vt.faces))
    np.testing.assert_allclose(vt.mean_vertices, mean, atol=1e-12)  # same sums, reordered
    np.testing.assert_allclose(vt.displacement, ref, atol=1e-12)


def _two_groups_with_age(n=40, lmax=5, seed=4):
    # the group effect at degree 3 is partly carried by age (older patients), so the
    # raw and the covariate-adjusted effect sizes differ
    rng = np.random.default_rng(seed)
    grp = np.array(["ctl", "pat"])[np.arange(n) % 2]
    age = rng.normal(65, 5, n) + 4.0 * (grp == "pat")
    loge = -2.0 * np.log(np.arange(1, lmax + 1)) + rng.normal(0, 0.2, size=(n, lmax))
    loge[:, 2] += 0.05 * (age - 65) + 0.2 * (grp == "pat")
    t = pd.DataFrame({"subject": [f"s{i}" for i in range(n)], "structure": "caudate",
                      "group": grp, "age": age})
    for k in range(lmax):
        t[f"l{k + 1}"] = np.exp(loge[:, k])
    return t


def test_adjusted_effect_size_matches_statsmodels_and_hedges_without_covariates():
    t = _two_groups_with_age()
    y = np.log(t[[f"l{k}" for k in range(2, 6)]].to_numpy())
    pat = (t["group"] == "pat").to_numpy()
    res = compare_spectra(t, group="group", levels=["ctl", "pat"], covariates=["age"],
                          degrees="2-5", n_permutations=99, n_bootstrap=99,
                          classification_permutations=9, rng=1)
    dt = res.structures[0].degree_tests
    # statsmodels OLS (outside source): group coefficient over sqrt(mse_resid), times
    # Hedges' factor J = 1 - 3/(4 df - 1) with df = df_resid (Hedges 1981, eq. 6e)
    x = sm.add_constant(np.column_stack([pat.astype(float), t["age"].to_numpy()]))
    for j in range(y.shape[1]):
        ols = sm.OLS(y[:, j], x).fit()
        df = ols.df_resid
        expected = (1 - 3 / (4 * df - 1)) * ols.params[1] / np.sqrt(ols.mse_resid)
        # same quantity through two different linear-algebra routes: round-off only
        assert dt["hedges_g_adjusted"].iloc[j] == pytest.approx(expected, rel=1e-9)
    # the adjustment matters here: age carries part of the degree-3 difference
    assert abs(dt["hedges_g_adjusted"].iloc[1] - dt["hedges_g"].iloc[1]) > 0.1
    # without covariates the residual SD is the pooled SD: exactly Hedges' g
    res0 = compare_spectra(t, group="group", levels=["ctl", "pat"], degrees="2-5",
                           n_permutations=99, n_bootstrap=99, classification_permutations=9,
                           rng=1)
    dt0 = res0.structures[0].degree_tests
    np.testing.assert_allclose(dt0["hedges_g_adjusted"], hedges_g(y[~pat], y[pat]), rtol=1e-10)
