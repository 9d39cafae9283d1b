"""Permutation inference for the general linear model: Freedman–Lane, max-statistic FWER.

Freedman–Lane (Winkler et al. 2014, Table 2): regress the data on the nuisance part
``Z`` of the partitioned model, permute the residuals ``E_z = R_z Y``, add back the
nuisance fit, and refit the full model.  Adding the nuisance fit changes no statistic
of the tested contrast, so the permuted statistic is that of ``P E_z`` under the full
model.  With ``Q = [Q_z, Q_i]`` an orthonormal basis of the model space
(:func:`shapedesc.stats.glm.contrast_bases`), every permuted statistic needs only
``U = Q' P E_z`` (p numbers per test): hypothesis SS ``||U_i||^2``, residual SS
``||E_z||^2 - ||U||^2`` (a permutation keeps the sum of squares).  ``Q' P`` is ``Q`` with
its rows permuted, so a block of permutations is one matrix product
``(p * block, n) @ (n, m)``: the engine is a sequence of large GEMMs.

The family-wise error rate across the m tests is controlled by the distribution of the
maximum statistic over tests in each permutation (Westfall & Young 1993; Nichols &
Holmes 2002).  p-values count the observed statistic among the permutations,
``p = (1 + #{T* >= T}) / (1 + B)``, so they are never zero.

References
----------
Winkler AM, Ridgway GR, Webster MA, Smith SM, Nichols TE (2014). Permutation inference
for the general linear model. NeuroImage 92:381-397. doi:10.1016/j.neuroimage.2014.01.060
Freedman D, Lane D (1983). A nonstochastic interpretation of reported significance
levels. J Bus Econ Stat 1(4):292-298. doi:10.1080/07350015.1983.10509354
Nichols TE, Holmes AP (2002). Nonparametric permutation tests for functional
neuroimaging: a primer with examples. Hum Brain Mapp 15:1-25. doi:10.1002/hbm.1058
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from shapedesc import defaults
from shapedesc.errors import StatsInputError
from shapedesc.stats.glm import ContrastBases, contrast_bases, statistic_to_p

__all__ = [
    "PermutationResult",
    "freedman_lane",
    "random_permutations",
    "permutation_blocks",
    "exceedance_p",
]


@dataclass(frozen=True)
class PermutationResult:
    """A GLM contrast tested by Freedman–Lane permutation across m tests.

    Attributes
    ----------
    kind : {"t", "F"}
    statistic : ndarray, shape (m,)
        Observed t or F per test.
    p_parametric : ndarray, shape (m,)
    p_perm : ndarray, shape (m,)
        Uncorrected permutation p-value per test.
    p_fwer : ndarray, shape (m,)
        Family-wise corrected across the m tests by the maximum statistic.
    max_null : ndarray, shape (n_permutations,)
        Maximum (of ``|t|`` for two-sided t) over tests in each permutation.
    n_permutations : int
        Random permutations drawn (the observed statistic is counted once more).
    df1, df2 : int
    alternative : str
    method : str
    """

    kind: str
    statistic: np.ndarray
    p_parametric: np.ndarray
    p_perm: np.ndarray
    p_fwer: np.ndarray
    max_null: np.ndarray
    n_permutations: int
    df1: int
    df2: int
    alternative: str
    method: str = "Freedman-Lane"


def _as_generator(rng) -> np.random.Generator:
    return rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)


def random_permutations(
    n: int,
    n_permutations: int,
    *,
    rng: np.random.Generator | int | None = None,
    blocks: np.ndarray | None = None,
) -> np.ndarray:
    """Draw random permutations of ``n`` rows, optionally within exchangeability blocks.

    Parameters
    ----------
    n : int
    n_permutations : int
    rng : numpy.random.Generator, int or None
    blocks : ndarray, shape (n,), optional
        Block label of each row; rows are only exchanged within their block
        (Winkler et al. 2014, section "Exchangeability blocks").

    Returns
    -------
    ndarray, shape (n_permutations, n), int64
        Row ``b`` maps new position ``k`` to old row ``perm[b, k]``.
    """
    gen = _as_generator(rng)
    if n_permutations < 1:
        raise StatsInputError(f"n_permutations must be >= 1, got {n_permutations}")
    if blocks is None:
        return gen.permuted(np.broadcast_to(np.arange(n, dtype=np.int64), (n_permutations, n)),
                            axis=1)
    blocks = np.asarray(blocks)
    if blocks.shape != (n,):
        raise StatsInputError(f"blocks must have shape ({n},), got {blocks.shape}")
    perms = np.empty((n_permutations, n), dtype=np.int64)
    for label in np.unique(blocks):
        idx = np.flatnonzero(blocks == label)
        perms[:, idx] = gen.permuted(np.broadcast_to(idx, (n_permutations, idx.size)), axis=1)
    return perms


def permutation_blocks(
    ez: np.ndarray, q_all: np.ndarray, perms: np.ndarray, *, extra_bytes_per_perm: int = 0
) -> Iterator[tuple[slice, np.ndarray]]:
    """Yield ``Q' P E_z`` for blocks of permutations.

    Parameters
    ----------
    ez : ndarray, shape (n, m)
        Residuals of the data on the nuisance space.
    q_all : ndarray, shape (n, p)
        Orthonormal basis of the model space.
    perms : ndarray, shape (B, n)
        Permutations; the permuted data are ``ez[perm]``.
    extra_bytes_per_perm : int
        Memory the caller needs per permutation, for sizing the blocks.

    Yields
    ------
    sl : slice
        Which permutations the block holds.
    u : ndarray, shape (p, block, m)
        ``u[:, b] = Q' ez[perms[b]]``.
    """
    n, m = ez.shape
    p = q_all.shape[1]
    per_perm = 8 * (p * n + 2 * p * m + 2 * m) + extra_bytes_per_perm
    block = max(1, int(defaults.PERMUTATION_BLOCK_BYTES // per_perm))
    qt = np.ascontiguousarray(q_all.T)
    ez = np.ascontiguousarray(ez)
    for start in range(0, perms.shape[0], block):
        sl = slice(start, min(start + block, perms.shape[0]))
        c = sl.stop - sl.start
        inv = np.empty((c, n), dtype=np.int64)
        np.put_along_axis(inv, perms[sl], np.broadcast_to(np.arange(n), (c, n)), axis=1)
        # Q' (P E) = sum_k Q[k] E[perm[k]] = sum_j Q[inv[j]] E[j]
        g = np.take(qt, inv, axis=1)  # (p, c, n), C-contiguous
        u = (g.reshape(p * c, n) @ ez).reshape(p, c, m)
        yield sl, u


def exceedance_p(observed: np.ndarray, null: np.ndarray) -> np.ndarray:
    """``(1 + #{null >= observed}) / (1 + B)`` along the first axis of ``null``.

    Ties within :data:`~shapedesc.defaults.PERMUTATION_TIE_RTOL` count as exceedances.
    """
    observed = np.asarray(observed, dtype=float)
    thresh = observed - defaults.PERMUTATION_TIE_RTOL * np.abs(observed)
    count = (null >= thresh).sum(axis=0)
    return (1.0 + count) / (1.0 + null.shape[0])


def freedman_lane(
    y: np.ndarray,
    design: np.ndarray,
    contrast: np.ndarray,
    *,
    n_permutations: int = defaults.DEFAULT_PERMUTATIONS,
    rng: np.random.Generator | int | None = None,
    blocks: np.ndarray | None = None,
    alternative: str = "two-sided",
) -> PermutationResult:
    """Freedman–Lane permutation test of ``C' beta = 0`` on every column of ``y``.

    Parameters
    ----------
    y : ndarray, shape (n,) or (n, m)
        Responses, one column per test (degrees, vertices).
    design : ndarray, shape (n, p)
        Full column rank (see :func:`shapedesc.stats.design.build_design`).
    contrast : ndarray, shape (p,) or (p, s)
        ``s == 1``: t statistic; ``s > 1``: F statistic.
    n_permutations : int
        Random permutations (not counting the observed order).
    rng : numpy.random.Generator, int or None
        Same seed, same result.
    blocks : ndarray, shape (n,), optional
        Exchangeability blocks: permute only within each block.
    alternative : {"two-sided", "greater", "less"}
        For t statistics; F is always upper-tail.

    Returns
    -------
    PermutationResult

    References
    ----------
    Winkler et al. (2014), doi:10.1016/j.neuroimage.2014.01.060
    """
    y = np.asarray(y, dtype=float)
    if y.ndim == 1:
        y = y[:, None]
    x = np.asarray(design, dtype=float)
    if y.ndim != 2 or y.shape[0] != x.shape[0]:
        raise StatsInputError(f"responses of shape {y.shape} do not match design {x.shape}")
    if not np.all(np.isfinite(y)):
        raise StatsInputError("responses contain NaN or infinite values; remove or fill them")
    if alternative not in ("two-sided", "greater", "less"):
        raise StatsInputError(f"alternative must be two-sided, greater or less, got {alternative!r}")
    bases = contrast_bases(x, contrast)
    perms = random_permutations(x.shape[0], int(n_permutations), rng=rng, blocks=blocks)
    return _freedman_lane(y, bases, perms, alternative)


def _nuisance_residuals(y: np.ndarray, bases: ContrastBases) -> np.ndarray:
    qz = bases.q_nuisance
    return y - qz @ (qz.T @ y)


def _statistic_from_u(u: np.ndarray, ss_total: np.ndarray, bases: ContrastBases) -> np.ndarray:
    """t or F from projections ``u`` (p, ..., m) of data with total SS ``ss_total`` (m,)."""
    s = bases.rank_interest
    df = bases.df_error
    ss_model = np.einsum("k...m,k...m->...m", u, u)
    rss = np.maximum(ss_total - ss_model, np.finfo(float).tiny)
    ui = u[-s:]
    if s == 1:
        return ui[0] / np.sqrt(rss / df)
    return np.einsum("k...m,k...m->...m", ui, ui) / s / (rss / df)


def _freedman_lane(y, bases: ContrastBases, perms, alternative) -> PermutationResult:
    ez = _nuisance_residuals(y, bases)
    ss = np.einsum("nm,nm->m", ez, ez)
    q_all = bases.q_all
    s = bases.rank_interest
    kind = "t" if s == 1 else "F"
    observed = _statistic_from_u(q_all.T @ ez, ss, bases)

    def orient(t):
        if kind == "F" or alternative == "greater":
            return t
        if alternative == "less":
            return -t
        return np.abs(t)

    obs_o = orient(observed)
    count = np.zeros(y.shape[1])
    max_null = np.empty(perms.shape[0])
    thresh = obs_o - defaults.PERMUTATION_TIE_RTOL * np.abs(obs_o)
    for sl, u in permutation_blocks(ez, q_all, perms):
        t = orient(_statistic_from_u(u, ss, bases))  # (c, m)
        count += (t >= thresh).sum(axis=0)
        max_null[sl] = t.max(axis=1)
    B = perms.shape[0]
    p_perm = (1.0 + count) / (1.0 + B)
    p_fwer = exceedance_p(obs_o, max_null[:, None])
    p_par = statistic_to_p(observed, kind, s, bases.df_error)
    if kind == "t" and alternative != "two-sided":
        from scipy import stats

        p_par = stats.t.sf(obs_o, bases.df_error)
    return PermutationResult(kind=kind, statistic=observed, p_parametric=p_par, p_perm=p_perm,
                             p_fwer=p_fwer, max_null=max_null, n_permutations=B, df1=s,
                             df2=bases.df_error, alternative=alternative)
