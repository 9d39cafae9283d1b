"""Design matrices: encoding vs patsy (statsmodels' formula engine) and the input checks."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from shapedesc.errors import StatsInputError
from shapedesc.stats.design import build_design


def _table(n=30, seed=0):
    rng = np.random.default_rng(seed)
    return pd.DataFrame({
        "subject": [f"sub-{i:02d}" for i in range(n)],
        "group": np.array(["control", "patient", "sibling"])[np.arange(n) % 3],
        "age": rng.normal(60, 8, n),
        "sex": rng.choice(["F", "M"], n),
        "site": rng.choice([1, 2, 3], n),
    })


def test_column_space_matches_patsy():
    # Source: patsy (the formula engine of statsmodels) builds the same model; the
    # column spaces must coincide (centring and coding differ only by an invertible map).
    patsy = pytest.importorskip("patsy")
    t = _table()
    d = build_design(t, group="group", covariates=["age", "sex", "site"], categorical=["site"])
    ref = np.asarray(patsy.dmatrix("C(group) + age + C(sex) + C(site)", t))
    assert d.matrix.shape == ref.shape
    # projection of each patsy column onto our column space leaves ~0 residual;
    # 1e-10: rounding of a least-squares solve with condition number ~1e2
    coef, *_ = np.linalg.lstsq(d.matrix, ref, rcond=None)
    assert np.abs(d.matrix @ coef - ref).max() < 1e-10
    assert d.kind == "F" and d.contrast.shape == (d.matrix.shape[1], 2)
    assert d.formula == "y ~ 1 + group + age + C(sex) + C(site)"


def test_two_levels_select_rows_and_t_contrast():
    t = _table()
    d = build_design(t, group="group", levels=["control", "patient"], covariates=["age"])
    assert d.kind == "t" and d.levels == ("control", "patient")
    assert d.n_subjects == 20 and set(d.labels) == set(t.subject[t.group != "sibling"])
    # contrast picks the patient indicator: c' beta = mean(patient) - mean(control)
    # adjusted for age (common practice, treatment coding)
    assert d.columns[int(np.flatnonzero(d.contrast[:, 0])[0])] == "group[T.patient]"
    assert d.contrast_names == ("patient - control",)
    # numeric covariates are centred
    assert abs(d.matrix[:, d.columns.index("age")].mean()) < 1e-12  # rounding only


def test_small_group_is_refused():
    t = _table(n=30)
    t.loc[t.index[:28], "group"] = "control"
    t.loc[t.index[28:], "group"] = "patient"
    with pytest.raises(StatsInputError, match=r"'patient' has 2 subject\(s\)"):
        build_design(t, group="group")


def test_missing_covariate_values_name_the_rows():
    t = _table()
    t.loc[[3, 7], "age"] = np.nan
    with pytest.raises(StatsInputError, match=r"'age' has missing values in 2 row\(s\): sub-03, sub-07"):
        build_design(t, group="group", covariates=["age"])


def test_missing_group_values_name_the_rows():
    t = _table()
    t.loc[5, "group"] = None
    with pytest.raises(StatsInputError, match="sub-05"):
        build_design(t, group="group")


def test_constant_columns_are_refused():
    t = _table()
    t["scanner"] = "prisma"
    with pytest.raises(StatsInputError, match="'scanner' takes one value"):
        build_design(t, group="group", covariates=["scanner"])
    t["tiv"] = 1500.0
    with pytest.raises(StatsInputError, match="'tiv' takes one value"):
        build_design(t, group="group", covariates=["tiv"])


def test_collinear_covariates_are_named():
    t = _table()
    t["age_months"] = 12 * t["age"]
    with pytest.raises(StatsInputError, match="collinear: column 'age_months' is a linear combination of 'age'"):
        build_design(t, group="group", covariates=["age", "age_months"])


def test_unknown_columns_and_levels():
    t = _table()
    with pytest.raises(StatsInputError, match="'diagnosis'.*not found"):
        build_design(t, group="diagnosis")
    with pytest.raises(StatsInputError, match="'patients'.*not found; the column holds control"):
        build_design(t, group="group", levels=["control", "patients"])
    with pytest.raises(StatsInputError, match="at least two"):
        build_design(t, group="group", levels=["control"])
