"""Benjamini–Hochberg q-values against scipy.stats.false_discovery_control."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from shapedesc.errors import StatsInputError
from shapedesc.stats.multiple import benjamini_hochberg


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_matches_scipy(seed):
    rng = np.random.default_rng(seed)
    p = np.concatenate([rng.uniform(size=30), rng.uniform(0, 0.01, size=10)])
    p[5] = p[6]  # a tie
    # Source: scipy.stats.false_discovery_control(method="bh"); 1e-14: same arithmetic
    np.testing.assert_allclose(benjamini_hochberg(p), stats.false_discovery_control(p), rtol=1e-14)


def test_along_an_axis_and_worked_example():
    rng = np.random.default_rng(3)
    p = rng.uniform(size=(4, 12))
    q = benjamini_hochberg(p, axis=1)
    for row in range(4):
        np.testing.assert_allclose(q[row], stats.false_discovery_control(p[row]), rtol=1e-14)
    np.testing.assert_allclose(benjamini_hochberg(p.T, axis=0), q.T, rtol=0)
    # Worked example, Benjamini & Hochberg 1995, section 4 (15 p-values; from memory): at q = 0.05
    # the step-up procedure rejects the four smallest.
    bh95 = np.array([0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344,
                     0.0459, 0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.000])
    assert int((benjamini_hochberg(bh95) <= 0.05).sum()) == 4


def test_rejects_bad_p():
    with pytest.raises(StatsInputError, match="NaN"):
        benjamini_hochberg(np.array([0.1, np.nan]))
    with pytest.raises(StatsInputError, match=r"\[0, 1\]"):
        benjamini_hochberg(np.array([0.1, 1.5]))
