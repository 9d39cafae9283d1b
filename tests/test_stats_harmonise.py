"""ComBat: a simulated site effect is removed while a simulated group effect survives."""

from __future__ import annotations

import numpy as np
import pytest

from shapedesc.errors import StatsInputError
from shapedesc.stats.glm import fit_contrast
from shapedesc.stats.harmonise import combat


def _multisite(seed=0, n_per_site=(40, 50, 60), m=14, group_effect=0.5):
    rng = np.random.default_rng(seed)
    site = np.concatenate([np.full(k, f"site{i}") for i, k in enumerate(n_per_site)])
    n = site.size
    group = rng.integers(0, 2, n).astype(float)
    age = rng.normal(60, 8, n)
    base = rng.normal(size=(n, m))
    # known truth: group effect on feature 3 only, age effect everywhere
    effect = np.zeros(m)
    effect[3] = group_effect
    clean = base + group[:, None] * effect + 0.02 * (age[:, None] - 60)
    # site offsets (location) and scale factors per site and feature
    codes = np.unique(site, return_inverse=True)[1]
    loc = np.array([-1.0, 0.0, 1.2])[:, None] + rng.normal(0, 0.3, size=(len(n_per_site), m))
    scale = rng.uniform(0.6, 1.8, size=(len(n_per_site), m))
    y = clean * scale[codes] + loc[codes]
    protected = np.column_stack([group, age - age.mean()])
    return y, clean, site, codes, group, age, protected


def _site_f(y, codes, protected):
    """F statistic of site (all sites jointly) beyond the protected effects, per feature."""
    k = codes.max() + 1
    x = np.column_stack([np.ones(len(codes)), protected] +
                        [(codes == i).astype(float) for i in range(1, k)])
    c = np.zeros((x.shape[1], k - 1))
    c[-(k - 1):, :] = np.eye(k - 1)
    return fit_contrast(y, x, c)


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("eb", [True, False])
def test_site_offset_removed_group_effect_survives(eb, seed):
    y, clean, site, codes, group, age, protected = _multisite(seed=seed, group_effect=0.8)
    h = combat(y, site, protected, empirical_bayes=eb)
    before = _site_f(y, codes, protected)
    after = _site_f(h.data, codes, protected)
    # site effects are strong before (F test of site beyond group and age, every feature)
    assert np.all(before.p_value < 1e-4)
    # ...and no longer detectable after, at the uncorrected 5 % level on every feature
    assert np.all(after.p_value > 0.05), after.p_value
    # scales equalised: per-site residual SDs within 25 % of their mean (sample SDs of
    # 40-60 subjects vary by ~10 %: SE of an SD ~ 1/sqrt(2n))
    x = np.column_stack([np.ones(len(codes)), protected])
    resid = h.data - x @ np.linalg.lstsq(x, h.data, rcond=None)[0]
    sds = np.vstack([resid[codes == i].std(0, ddof=1) for i in range(3)])
    assert np.all(np.abs(sds / sds.mean(0) - 1) < 0.25)
    # the group effect survives: the group t at feature 3 after harmonisation is close to
    # the t on the site-free data (the oracle). 1.0: site scales are estimated from 40-60
    # subjects (~10 % error), which moves a t of ~5 by ~0.5
    t_h = fit_contrast(h.data, x, [0, 1, 0])
    t_clean = fit_contrast(clean, x, [0, 1, 0])
    assert t_h.p_value[3] < 1e-4
    assert abs(t_h.statistic[3] - t_clean.statistic[3]) < 1.0
    # and no group effect appears where there is none (Bonferroni over 13 features)
    assert np.all(np.delete(t_h.p_value, 3) > 0.05 / 13)


def test_no_site_effect_changes_little_and_determinism():
    rng = np.random.default_rng(5)
    y = rng.normal(size=(90, 10))
    site = np.repeat(["a", "b", "c"], 30)
    h = combat(y, site)
    # with no site effect, the adjustment is of the order of sampling noise
    # (site means of 30 subjects: SE 1/sqrt(30) = 0.18); bound 0.5 on any change
    assert np.abs(h.data - y).max() < 0.5 * np.abs(y).max()
    assert np.array_equal(combat(y, site).data, h.data)
    # shrinkage pulls each site's location estimates towards their mean across features
    # (Johnson et al. 2007, eq. 3.1): spread after <= spread before
    assert np.all(h.gamma_star.std(1) <= h.gamma_hat.std(1) + 1e-12)


def test_errors():
    y = np.random.default_rng(0).normal(size=(10, 3))
    with pytest.raises(StatsInputError, match="one site only"):
        combat(y, np.full(10, "a"))
    with pytest.raises(StatsInputError, match="fewer than 2 subjects"):
        combat(y, np.array(["a"] * 9 + ["b"]))
    site = np.repeat(["a", "b"], 5)
    grp = (site == "b").astype(float)[:, None]
    with pytest.raises(StatsInputError, match="confounded with site"):
        combat(y, site, grp)
