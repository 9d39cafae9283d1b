"""Standardised mean differences: Hedges' g with a bootstrap confidence interval.

``d = (mean_other - mean_reference) / s_pooled`` with the pooled standard deviation
``s_pooled^2 = ((n1 - 1) s1^2 + (n2 - 1) s2^2) / (n1 + n2 - 2)``, and Hedges' small-sample
correction ``g = J d``, ``J = 1 - 3 / (4 (n1 + n2) - 9)`` (Hedges 1981, eq. 6e; the
approximation of the exact gamma-function factor).  The sign follows the contrast of
:mod:`shapedesc.stats.design`: positive when the second level is larger.

The interval is the percentile bootstrap (Efron & Tibshirani 1993, ch. 13) with
resampling inside each group, so the group sizes stay fixed.  Resamples are drawn as
multinomial counts, so each bootstrap mean and variance is a matrix product.

References
----------
Hedges LV (1981). Distribution theory for Glass's estimator of effect size and related
estimators. J Educ Stat 6(2):107-128. doi:10.3102/10769986006002107
Efron B, Tibshirani RJ (1993). An Introduction to the Bootstrap. Chapman & Hall.
doi:10.1201/9780429246593
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from shapedesc import defaults
from shapedesc.errors import StatsInputError

__all__ = ["EffectSize", "hedges_correction", "hedges_g", "hedges_g_interval"]


@dataclass(frozen=True)
class EffectSize:
    """Hedges' g per test with its bootstrap interval.

    Attributes
    ----------
    g : ndarray, shape (m,)
        Other minus reference, in pooled standard deviations (dimensionless).
    ci_low, ci_high : ndarray, shape (m,)
    confidence : float
    n_reference, n_other : int
    n_bootstrap : int
    method : str
    """

    g: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    confidence: float
    n_reference: int
    n_other: int
    n_bootstrap: int
    method: str = "percentile bootstrap, resampled within groups"


def hedges_correction(n_reference: int, n_other: int) -> float:
    """Hedges' (1981) small-sample factor ``J = 1 - 3 / (4 (n1 + n2) - 9)``."""
    return 1.0 - 3.0 / (4.0 * (n_reference + n_other) - 9.0)


def _as2d(a, name):
    a = np.asarray(a, dtype=float)
    if a.ndim == 1:
        a = a[:, None]
    if a.ndim != 2:
        raise StatsInputError(f"{name} must have shape (n,) or (n, m), got {a.shape}")
    if a.shape[0] < 2:
        raise StatsInputError(f"{name} needs at least 2 subjects, got {a.shape[0]}")
    if not np.all(np.isfinite(a)):
        raise StatsInputError(f"{name} contains NaN or infinite values")
    return a


def _check(reference, other):
    r = _as2d(reference, "reference")
    o = _as2d(other, "other")
    if r.shape[1] != o.shape[1]:
        raise StatsInputError(f"reference has {r.shape[1]} columns and other {o.shape[1]}")
    return r, o


def _g(mean_r, var_r, n1, mean_o, var_o, n2):
    sp = np.sqrt(((n1 - 1) * var_r + (n2 - 1) * var_o) / (n1 + n2 - 2))
    return hedges_correction(n1, n2) * (mean_o - mean_r) / sp


def hedges_g(reference: np.ndarray, other: np.ndarray) -> np.ndarray:
    """Hedges' g of ``other`` against ``reference``, per column.

    Parameters
    ----------
    reference : ndarray, shape (n1,) or (n1, m)
    other : ndarray, shape (n2,) or (n2, m)

    Returns
    -------
    ndarray, shape (m,)
    """
    r, o = _check(reference, other)
    return _g(r.mean(0), r.var(0, ddof=1), r.shape[0], o.mean(0), o.var(0, ddof=1), o.shape[0])


def _boot_moments(x, counts):
    """Bootstrap means and variances (ddof=1) of columns of x from resampling counts."""
    n = x.shape[0]
    xc = x - x.mean(0)
    s1 = counts @ xc
    s2 = counts @ (xc * xc)
    mean = s1 / n
    var = (s2 - n * mean * mean) / (n - 1)
    return mean + x.mean(0), np.maximum(var, 0.0)


def hedges_g_interval(
    reference: np.ndarray,
    other: np.ndarray,
    *,
    n_bootstrap: int = defaults.DEFAULT_BOOTSTRAP,
    confidence: float = defaults.DEFAULT_CONFIDENCE,
    rng: np.random.Generator | int | None = None,
) -> EffectSize:
    """Hedges' g with a percentile-bootstrap confidence interval, per column.

    Parameters
    ----------
    reference : ndarray, shape (n1,) or (n1, m)
    other : ndarray, shape (n2,) or (n2, m)
    n_bootstrap : int
        Resamples (each group resampled with replacement at its own size).
    confidence : float
        Interval coverage in (0, 1).
    rng : numpy.random.Generator, int or None

    Returns
    -------
    EffectSize
    """
    r, o = _check(reference, other)
    if not 0.0 < confidence < 1.0:
        raise StatsInputError(f"confidence must lie in (0, 1), got {confidence}")
    if n_bootstrap < 10:
        raise StatsInputError(f"n_bootstrap must be >= 10, got {n_bootstrap}")
    gen = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    n1, n2 = r.shape[0], o.shape[0]
    g = hedges_g(r, o)
    boot = np.empty((n_bootstrap, r.shape[1]))
    block = max(1, int(defaults.PERMUTATION_BLOCK_BYTES // (8 * (n1 + n2 + 4 * r.shape[1]))))
    for start in range(0, n_bootstrap, block):
        b = min(block, n_bootstrap - start)
        cr = gen.multinomial(n1, np.full(n1, 1.0 / n1), size=b).astype(float)
        co = gen.multinomial(n2, np.full(n2, 1.0 / n2), size=b).astype(float)
        mr, vr = _boot_moments(r, cr)
        mo, vo = _boot_moments(o, co)
        with np.errstate(divide="ignore", invalid="ignore"):
            boot[start:start + b] = _g(mr, vr, n1, mo, vo, n2)
    alpha = 1.0 - confidence
    lo, hi = np.nanquantile(boot, [alpha / 2, 1 - alpha / 2], axis=0)
    return EffectSize(g=g, ci_low=lo, ci_high=hi, confidence=confidence, n_reference=n1,
                      n_other=n2, n_bootstrap=int(n_bootstrap))
