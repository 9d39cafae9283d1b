"""Ordinary least squares with t and F contrasts, many response columns at once.

For a design ``X`` (n, p) of full column rank and a contrast ``C`` (p, s), the model
space is split into the nuisance space ``span(X C_u)`` (``C_u`` spans the orthogonal
complement of ``C``: the model under ``C' beta = 0``) and the tested space
``span(X (X'X)^-1 C)``, which is orthogonal to it.  With orthonormal bases ``Q_z`` and
``Q_i`` of the two, the hypothesis sum of squares is ``||Q_i' y||^2`` and the residual sum
of squares ``||y||^2 - ||Q_z' y||^2 - ||Q_i' y||^2``; for ``s == 1`` the t statistic is
``q_i' y / sigma_hat`` with ``q_i`` oriented along ``X (X'X)^-1 c``.  These spans are
those of the partition ``X -> [X_i, Z]`` of Winkler et al. (2014, Appendix A); only the
spans matter for the statistics.  The same bases drive the permutation engine
(:mod:`shapedesc.stats.permutation`).

References
----------
Winkler AM, Ridgway GR, Webster MA, Smith SM, Nichols TE (2014). Permutation inference
for the general linear model. NeuroImage 92:381-397, Appendix A (model partitioning).
doi:10.1016/j.neuroimage.2014.01.060
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg, stats

from shapedesc.errors import StatsInputError

__all__ = ["ContrastBases", "ContrastResult", "contrast_bases", "fit_contrast", "statistic_to_p"]


@dataclass(frozen=True)
class ContrastBases:
    """Orthonormal bases of the nuisance and tested parts of a design.

    Attributes
    ----------
    q_nuisance : ndarray, shape (n, p - s)
    q_interest : ndarray, shape (n, s)
        For ``s == 1`` oriented so that ``q_interest' y`` has the sign of ``c' beta_hat``.
    df_error : int
        ``n - p``.
    """

    q_nuisance: np.ndarray
    q_interest: np.ndarray
    df_error: int

    @property
    def rank_interest(self) -> int:
        return int(self.q_interest.shape[1])

    @property
    def q_all(self) -> np.ndarray:
        """``[Q_z, Q_i]``, shape (n, p): an orthonormal basis of the model space."""
        return np.hstack([self.q_nuisance, self.q_interest])


@dataclass(frozen=True)
class ContrastResult:
    """A t or F contrast fitted to m response columns.

    Attributes
    ----------
    kind : {"t", "F"}
    statistic : ndarray, shape (m,)
    p_value : ndarray, shape (m,)
        Two-sided for t, upper tail for F (parametric, Gaussian errors).
    df1, df2 : int
        Numerator (contrast rank) and residual degrees of freedom.
    estimate : ndarray, shape (s, m)
        ``C' beta_hat`` in the units of the response.
    standard_error : ndarray, shape (m,) or None
        Of the estimate, for t contrasts only.
    beta : ndarray, shape (p, m)
        All fitted coefficients.
    residual_ss : ndarray, shape (m,)
    """

    kind: str
    statistic: np.ndarray
    p_value: np.ndarray
    df1: int
    df2: int
    estimate: np.ndarray
    standard_error: np.ndarray | None
    beta: np.ndarray
    residual_ss: np.ndarray


def contrast_bases(design: np.ndarray, contrast: np.ndarray) -> ContrastBases:
    """Orthonormal bases of the nuisance and tested spaces of ``design`` for ``contrast``.

    Parameters
    ----------
    design : ndarray, shape (n, p)
        Full column rank.
    contrast : ndarray, shape (p,) or (p, s)
        Linearly independent contrast vectors as columns.

    Returns
    -------
    ContrastBases
    """
    x = np.asarray(design, dtype=float)
    c = np.asarray(contrast, dtype=float)
    if c.ndim == 1:
        c = c[:, None]
    if x.ndim != 2 or c.ndim != 2 or c.shape[0] != x.shape[1]:
        raise StatsInputError(
            f"design has shape {x.shape} and contrast {c.shape}; the contrast needs one row "
            "per design column"
        )
    n, p = x.shape
    if np.linalg.matrix_rank(x) < p or n <= p:
        raise StatsInputError(f"design of shape {x.shape} is rank deficient or has n <= p")
    if np.linalg.matrix_rank(c) < c.shape[1]:
        raise StatsInputError(f"contrast columns are linearly dependent (shape {c.shape})")
    return _contrast_bases(x, c)


def _contrast_bases(x: np.ndarray, c: np.ndarray) -> ContrastBases:
    n, p = x.shape
    s = c.shape[1]
    xtx_inv = np.linalg.inv(x.T @ x)
    cu = linalg.null_space(c.T)  # (p, p - s)
    xi = x @ xtx_inv @ c  # (n, s), orthogonal to x @ cu
    if p - s > 0:
        qz, _ = np.linalg.qr(x @ cu)
        # make the interest block exactly orthogonal to the nuisance block
        xi = xi - qz @ (qz.T @ xi)
    else:
        qz = np.zeros((n, 0))
    qi, r = np.linalg.qr(xi)
    if s == 1 and r[0, 0] < 0:
        qi = -qi
    return ContrastBases(q_nuisance=np.ascontiguousarray(qz),
                         q_interest=np.ascontiguousarray(qi), df_error=n - p)


def statistic_to_p(statistic: np.ndarray, kind: str, df1: int, df2: int) -> np.ndarray:
    """Parametric p-values: two-sided Student t (``kind="t"``) or upper-tail F."""
    statistic = np.asarray(statistic, dtype=float)
    if kind == "t":
        return 2.0 * stats.t.sf(np.abs(statistic), df2)
    if kind == "F":
        return stats.f.sf(statistic, df1, df2)
    raise ValueError(f"kind must be 't' or 'F', got {kind!r}")


def fit_contrast(y: np.ndarray, design: np.ndarray, contrast: np.ndarray) -> ContrastResult:
    """Fit OLS to each column of ``y`` and test ``C' beta = 0``.

    Parameters
    ----------
    y : ndarray, shape (n,) or (n, m)
        Responses, one column per test.
    design : ndarray, shape (n, p)
        Full column rank.
    contrast : ndarray, shape (p,) or (p, s)
        ``s == 1``: t test; ``s > 1``: F test.

    Returns
    -------
    ContrastResult
    """
    y = np.asarray(y, dtype=float)
    if y.ndim == 1:
        y = y[:, None]
    x = np.asarray(design, dtype=float)
    if y.ndim != 2 or y.shape[0] != x.shape[0]:
        raise StatsInputError(f"responses of shape {y.shape} do not match design {x.shape}")
    if not np.all(np.isfinite(y)):
        raise StatsInputError("responses contain NaN or infinite values")
    bases = contrast_bases(x, contrast)
    c = np.asarray(contrast, dtype=float).reshape(x.shape[1], -1)
    return _fit_contrast(y, x, c, bases)


def _fit_contrast(y, x, c, bases: ContrastBases) -> ContrastResult:
    beta, *_ = np.linalg.lstsq(x, y, rcond=None)
    resid = y - x @ beta
    rss = np.einsum("nm,nm->m", resid, resid)
    df2 = bases.df_error
    sigma2 = rss / df2
    estimate = c.T @ beta
    ui = bases.q_interest.T @ y  # (s, m)
    s = c.shape[1]
    if s == 1:
        se = np.sqrt(sigma2 * float(c[:, 0] @ np.linalg.inv(x.T @ x) @ c[:, 0]))
        stat = ui[0] / np.sqrt(sigma2)
        kind = "t"
    else:
        se = None
        stat = (ui**2).sum(0) / s / sigma2
        kind = "F"
    return ContrastResult(kind=kind, statistic=stat, p_value=statistic_to_p(stat, kind, s, df2),
                          df1=s, df2=df2, estimate=estimate, standard_error=se, beta=beta,
                          residual_ss=rss)
