"""Spectrum figures read their numbers from the result tables."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.weightstats import DescrStatsW

from shapedesc.figures.spectra import plot_effect_sizes, plot_group_spectra, summarise_spectra


def _spectra_table(seed=0, n=9, lmax=8):
    rng = np.random.default_rng(seed)
    rows = []
    for structure in ("hippocampus_L", "caudate_R"):
        for group, slope in (("control", 0.30), ("patient", 0.34)):
            for i in range(n):
                e = 10 ** (-slope * np.arange(1, lmax + 1) + rng.normal(0, 0.1, lmax))
                rows.append({"subject": f"sub-{group[0]}{i:02d}", "structure": structure,
                             "group": group, "age": 60 + i, "sex": "F", "site": "A",
                             **{f"l{l}": e[l - 1] for l in range(1, lmax + 1)}})
    return pd.DataFrame(rows)


def _degree_table(seed=1, lmax=8):
    rng = np.random.default_rng(seed)
    rows = []
    for structure in ("hippocampus_L", "caudate_R"):
        for l in range(1, lmax + 1):
            g = rng.normal(0.2, 0.5)
            p = rng.uniform(0, 0.12)
            rows.append({"structure": structure, "degree": l, "t": g * 3, "p_parametric": p / 3,
                         "p_perm": p / 2, "p_fwer": p, "q_fdr": p * 0.8, "hedges_g": g,
                         "g_ci_low": g - 0.4, "g_ci_high": g + 0.4})
    return pd.DataFrame(rows)


def test_plotted_group_means_equal_the_table_means():
    table = _spectra_table()
    fig = plot_group_spectra(table)
    ax = next(a for a in fig.axes if a.get_title() == "caudate_R")
    line = next(l for l in ax.get_lines() if l.get_label().startswith("patient"))
    # Source: pandas groupby mean of numpy log10 of the spectra.tsv columns.
    sub = table[(table.structure == "caudate_R") & (table.group == "patient")]
    expected = np.log10(sub[[f"l{l}" for l in range(1, 9)]]).mean().to_numpy()
    np.testing.assert_allclose(line.get_xdata(), np.arange(1, 9))
    np.testing.assert_allclose(line.get_ydata(), expected, rtol=1e-12)  # same arithmetic
    assert "unitless" in ax.get_ylabel() and ax.get_xlabel() == "degree l"


def test_band_is_the_t_interval_of_the_mean():
    table = _spectra_table(seed=3)
    summary = summarise_spectra(table)
    s = next(x for x in summary if x.structure == "hippocampus_L" and x.group == "control")
    sub = table[(table.structure == "hippocampus_L") & (table.group == "control")]
    # Source: statsmodels DescrStatsW.tconfint_mean (Student t interval, 95 %).
    lo, hi = DescrStatsW(np.log10(sub[[f"l{l}" for l in range(1, 9)]].to_numpy())).tconfint_mean()
    np.testing.assert_allclose(s.low, lo, rtol=1e-10)  # same closed form, float64
    np.testing.assert_allclose(s.high, hi, rtol=1e-10)
    assert s.n == 9


def test_effect_sizes_and_marks_come_from_the_degree_table():
    table = _degree_table()
    fig = plot_effect_sizes(table, correction="p_fwer", alpha=0.05)
    ax = next(a for a in fig.axes if a.get_title() == "hippocampus_L")
    sub = table[table.structure == "hippocampus_L"].sort_values("degree")
    points = next(l for l in ax.get_lines() if l.get_label().startswith("Hedges"))
    np.testing.assert_array_equal(points.get_ydata(), sub.hedges_g.to_numpy())
    marked = [l for l in ax.get_lines() if l.get_gid() == "significant"]
    expected = sub.degree[sub.p_fwer <= 0.05].to_numpy()
    assert 0 < expected.size < len(sub)  # this seed has marked and unmarked degrees
    np.testing.assert_array_equal(marked[0].get_xdata(), expected)
    # the interval bars are the table's interval columns
    segs = ax.collections[0].get_segments()
    np.testing.assert_allclose([s[0][1] for s in segs], sub.g_ci_low)
    np.testing.assert_allclose([s[1][1] for s in segs], sub.g_ci_high)
    assert ax.get_ylabel() == "Hedges' g (unitless)"


def test_fdr_marks_follow_the_fdr_column():
    table = _degree_table(seed=7)
    table["q_fdr"] = 1.0
    table.loc[(table.structure == "caudate_R") & (table.degree == 4), "q_fdr"] = 0.01
    fig = plot_effect_sizes(table, correction="q_fdr")
    ax = next(a for a in fig.axes if a.get_title() == "caudate_R")
    marked = [l for l in ax.get_lines() if l.get_gid() == "significant"]
    np.testing.assert_array_equal(marked[0].get_xdata(), [4])


def test_bad_tables_are_refused_with_a_reason():
    table = _spectra_table()
    table.loc[3, "l2"] = 0.0
    with pytest.raises(ValueError, match="positive"):
        plot_group_spectra(table)
    with pytest.raises(ValueError, match="degree columns"):
        plot_group_spectra(table[["subject", "structure", "group"]])
    with pytest.raises(ValueError, match="lacks columns"):
        plot_effect_sizes(_degree_table().drop(columns="hedges_g"))
    with pytest.raises(ValueError, match="p_holm"):
        plot_effect_sizes(_degree_table(), correction="p_holm")
