"""Hedges' g against its textbook formula; bootstrap interval against the large-sample one."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special, stats

from shapedesc.errors import StatsInputError
from shapedesc.stats.effect import hedges_correction, hedges_g, hedges_g_interval


def test_g_matches_textbook_formula():
    rng = np.random.default_rng(0)
    a = rng.normal(0, 1, size=(14, 3))
    b = rng.normal(0.5, 1.3, size=(19, 3))
    n1, n2 = 14, 19
    # Hedges 1981, eq. 6e: J = 1 - 3/(4(n1+n2) - 9), g = J (mean_b - mean_a)/s_pooled,
    # written out here independently of the module
    sp = np.sqrt(((n1 - 1) * a.var(0, ddof=1) + (n2 - 1) * b.var(0, ddof=1)) / (n1 + n2 - 2))
    expected = (1 - 3 / (4 * (n1 + n2) - 9)) * (b.mean(0) - a.mean(0)) / sp
    np.testing.assert_allclose(hedges_g(a, b), expected, rtol=1e-13)  # same arithmetic
    # The approximation J is close to the exact factor Gamma(v/2)/(sqrt(v/2) Gamma((v-1)/2))
    # with v = n1 + n2 - 2 (Hedges 1981, eq. 6b); within 1e-4 for v = 31 (from memory:
    # the approximation error is O(v^-3)).
    v = n1 + n2 - 2
    exact = np.exp(special.gammaln(v / 2) - special.gammaln((v - 1) / 2)) / np.sqrt(v / 2)
    assert hedges_correction(n1, n2) == pytest.approx(exact, abs=1e-4)
    # d relates to Student's t: d = t sqrt(1/n1 + 1/n2) (scipy.stats.ttest_ind)
    t = stats.ttest_ind(b, a).statistic
    np.testing.assert_allclose(expected / hedges_correction(n1, n2), t * np.sqrt(1 / n1 + 1 / n2),
                               rtol=1e-12)


def test_bootstrap_interval_is_close_to_the_large_sample_interval():
    rng = np.random.default_rng(1)
    n1, n2 = 120, 140
    a = rng.normal(0, 1, size=(n1, 2))
    b = rng.normal([0.0, 0.6], 1, size=(n2, 2))
    es = hedges_g_interval(a, b, n_bootstrap=4000, rng=7)
    # Large-sample variance of g (Hedges & Olkin 1985, Statistical Methods for
    # Meta-Analysis, eq. 5.15; from memory): (n1+n2)/(n1 n2) + g^2/(2(n1+n2)).
    se = np.sqrt((n1 + n2) / (n1 * n2) + es.g**2 / (2 * (n1 + n2)))
    width_ref = 2 * stats.norm.ppf(0.975) * se
    # 10 %: the bootstrap interval width has Monte-Carlo error of a few % at 4000
    # resamples and the normal approximation is off by O(1/n) at n ~ 130 per group
    np.testing.assert_allclose(es.ci_high - es.ci_low, width_ref, rtol=0.10)
    assert np.all(es.ci_low < es.g) and np.all(es.g < es.ci_high)
    again = hedges_g_interval(a, b, n_bootstrap=4000, rng=7)
    assert np.array_equal(again.ci_low, es.ci_low)  # same seed, same interval


def test_interval_coverage_on_repeated_samples():
    # The 95 % interval should contain the true standardised difference about 95 % of
    # the time. 200 samples: binomial SE sqrt(.95*.05/200) = 0.015; accept [0.88, 0.99]
    # (about -4.6/+2.6 SE: the percentile bootstrap undercovers slightly at n = 40).
    rng = np.random.default_rng(2)
    n1 = n2 = 40
    delta = 0.5
    a = rng.normal(0, 1, size=(200, n1)).T
    b = rng.normal(delta, 1, size=(200, n2)).T
    es = hedges_g_interval(a, b, n_bootstrap=1000, rng=3)
    cover = np.mean((es.ci_low <= delta) & (delta <= es.ci_high))
    assert 0.88 <= cover <= 0.99, cover


def test_bad_input():
    with pytest.raises(StatsInputError, match="columns"):
        hedges_g(np.ones((4, 2)), np.ones((5, 3)))
    with pytest.raises(StatsInputError, match="confidence"):
        hedges_g_interval(np.arange(5.0), np.arange(6.0), confidence=1.5)
