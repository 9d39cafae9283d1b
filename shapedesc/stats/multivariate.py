"""Global tests across degrees: Hotelling's T² (one-column contrast), Pillai's trace (more).

For responses ``Y`` (n, m) and a GLM contrast, the hypothesis and error SSCP matrices are
``H = Y' Q_i Q_i' Y`` and ``E = Y' R Y`` (``R`` the residual-forming matrix).  With one
contrast column (two groups) Hotelling's ``T² = nu tr(H E^-1)`` (``nu = n - p``; the
Hotelling–Lawley trace times the error degrees of freedom; for two groups without
covariates ``nu = n1 + n2 - 2`` and this is the two-sample T²) and
``F = (nu - m + 1) / (nu m) T²`` is exactly ``F(m, nu - m + 1)`` under Gaussian errors.
With more contrast columns Pillai's trace ``V = tr(H (H + E)^-1)`` is used with its usual
F approximation (Pillai 1955; as in SAS and statsmodels).  The permutation p-value
permutes Freedman–Lane nuisance residuals jointly across the m responses, which keeps
their correlation (:mod:`shapedesc.stats.permutation`).

References
----------
Hotelling H (1931). The generalization of Student's ratio. Ann Math Stat 2(3):360-378.
doi:10.1214/aoms/1177732979
Pillai KCS (1955). Some new test criteria in multivariate analysis. Ann Math Stat
26(1):117-121. doi:10.1214/aoms/1177728599
Winkler et al. (2014), doi:10.1016/j.neuroimage.2014.01.060
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from shapedesc import defaults
from shapedesc.errors import StatsInputError
from shapedesc.stats.glm import ContrastBases, contrast_bases
from shapedesc.stats.permutation import (
    _nuisance_residuals,
    exceedance_p,
    permutation_blocks,
    random_permutations,
)

__all__ = ["MultivariateResult", "multivariate_test", "pillai_f"]


@dataclass(frozen=True)
class MultivariateResult:
    """A multivariate GLM test across m responses.

    Attributes
    ----------
    statistic_name : {"hotelling_t2", "pillai_trace"}
    statistic : float
    f_value : float
        F transform of the statistic (exact for T², approximate for Pillai).
    df1, df2 : float
    p_parametric : float
    p_perm : float
    n_permutations : int
    n_responses : int
    hotelling_lawley_trace : float
        ``tr(H E^-1)``.
    pillai_trace : float
        ``tr(H (H + E)^-1)``.
    """

    statistic_name: str
    statistic: float
    f_value: float
    df1: float
    df2: float
    p_parametric: float
    p_perm: float
    n_permutations: int
    n_responses: int
    hotelling_lawley_trace: float
    pillai_trace: float


def pillai_f(v: float, n_responses: int, df_hyp: int, df_error: int) -> tuple[float, float, float]:
    """F approximation of Pillai's trace ``v``: returns ``(F, df1, df2)``.

    With ``p`` responses, ``q`` hypothesis and ``nu`` error degrees of freedom:
    ``s = min(p, q)``, ``m = (|p - q| - 1)/2``, ``n = (nu - p - 1)/2``,
    ``F = (2n + s + 1)/(2m + s + 1) * V/(s - V)`` on ``s(2m + s + 1)`` and ``s(2n + s + 1)``
    degrees of freedom (Pillai 1955; the form statsmodels and SAS use).
    """
    p, q, nu = n_responses, df_hyp, df_error
    s = min(p, q)
    mm = (abs(p - q) - 1) / 2.0
    nn = (nu - p - 1) / 2.0
    df1 = s * (2 * mm + s + 1)
    df2 = s * (2 * nn + s + 1)
    return (2 * nn + s + 1) / (2 * mm + s + 1) * v / (s - v), df1, df2


def multivariate_test(
    y: np.ndarray,
    design: np.ndarray,
    contrast: np.ndarray,
    *,
    n_permutations: int = defaults.DEFAULT_PERMUTATIONS,
    rng: np.random.Generator | int | None = None,
    blocks: np.ndarray | None = None,
) -> MultivariateResult:
    """Permutation test of ``C' B = 0`` jointly over the m columns of ``y``.

    Parameters
    ----------
    y : ndarray, shape (n, m)
        Responses (e.g. log energies of the selected degrees); ``m < n - p``.
    design : ndarray, shape (n, p)
    contrast : ndarray, shape (p,) or (p, s)
        One column: Hotelling's T²; more: Pillai's trace.
    n_permutations : int
    rng : numpy.random.Generator, int or None
    blocks : ndarray, shape (n,), optional
        Exchangeability blocks.

    Returns
    -------
    MultivariateResult
    """
    y = np.asarray(y, dtype=float)
    if y.ndim == 1:
        y = y[:, None]
    x = np.asarray(design, dtype=float)
    if y.shape[0] != x.shape[0]:
        raise StatsInputError(f"responses of shape {y.shape} do not match design {x.shape}")
    if not np.all(np.isfinite(y)):
        raise StatsInputError("responses contain NaN or infinite values")
    bases = contrast_bases(x, contrast)
    m = y.shape[1]
    if m >= bases.df_error:
        raise StatsInputError(
            f"{m} responses but only {bases.df_error} error degrees of freedom; a "
            "multivariate test needs fewer responses (degrees) than that. Select fewer degrees."
        )
    perms = random_permutations(x.shape[0], int(n_permutations), rng=rng, blocks=blocks)
    return _multivariate_test(y, bases, perms)


def _traces(u: np.ndarray, total: np.ndarray, s: int) -> tuple[np.ndarray, np.ndarray]:
    """Hotelling–Lawley and Pillai traces from projections ``u`` (p, c, m)."""
    ui = u[-s:]
    uu = np.einsum("kcm,kcn->cmn", u, u)
    hh = np.einsum("kcm,kcn->cmn", ui, ui)
    e = total[None] - uu
    he = e + hh
    # tr(H E^-1) = tr(Ui E^-1 Ui'), tr(H (H+E)^-1) likewise
    uit = np.transpose(ui, (1, 2, 0))  # (c, m, s)
    hlt = np.einsum("cms,cms->c", uit, np.linalg.solve(e, uit))
    pil = np.einsum("cms,cms->c", uit, np.linalg.solve(he, uit))
    return hlt, pil


def _multivariate_test(y, bases: ContrastBases, perms) -> MultivariateResult:
    ez = _nuisance_residuals(y, bases)
    total = ez.T @ ez
    q_all = bases.q_all
    s = bases.rank_interest
    m = y.shape[1]
    nu = bases.df_error
    hlt0, pil0 = _traces((q_all.T @ ez)[:, None, :], total, s)
    hlt0, pil0 = float(hlt0[0]), float(pil0[0])
    null = np.empty(perms.shape[0])
    for sl, u in permutation_blocks(ez, q_all, perms, extra_bytes_per_perm=8 * 4 * m * m):
        hlt, pil = _traces(u, total, s)
        null[sl] = hlt if s == 1 else pil
    if s == 1:
        name, stat = "hotelling_t2", nu * hlt0
        f = (nu - m + 1) / (nu * m) * stat
        df1, df2 = float(m), float(nu - m + 1)
        p_perm = float(exceedance_p(np.array([hlt0]), null[:, None])[0])
    else:
        name, stat = "pillai_trace", pil0
        f, df1, df2 = pillai_f(pil0, m, s, nu)
        p_perm = float(exceedance_p(np.array([pil0]), null[:, None])[0])
    return MultivariateResult(
        statistic_name=name, statistic=float(stat), f_value=float(f), df1=float(df1),
        df2=float(df2), p_parametric=float(stats.f.sf(f, df1, df2)), p_perm=p_perm,
        n_permutations=int(perms.shape[0]), n_responses=m, hotelling_lawley_trace=hlt0,
        pillai_trace=pil0,
    )
