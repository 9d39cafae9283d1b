"""Weighted, regularised least-squares fit of spherical harmonics to scattered samples.

Minimises, over real-basis coefficients c (flat l*l + l + m, one column per channel),

    Σ_i w̃_i (y_i - Σ_j c_j R_j(x_i))²  +  λ Σ_j Λ_j c_j²,

with w̃ the given weights rescaled to sum to 4π (so the data term approximates
∫ (y - f)² dΩ and only relative weights matter) and Λ_j = l(l+1) ("laplacian": the
penalty is λ ∫|∇_S f|² dΩ, degree 0 is free) or Λ_j = 1 ("identity").  The normal
equations (Σ w̃ R Rᵀ + λΛ) c = Σ w̃ R y are accumulated over chunks of points, so only one
(K, chunk) block of the basis exists at a time (for many points the matrix Σ w̃ R Rᵀ is
formed instead, exactly, from the points' degree-2L moments on a Gauss–Legendre grid:
:mod:`shapedesc.harmonics.pointsets`); they are Jacobi-scaled and solved by
Cholesky, or by a truncated eigen-decomposition when the scaled matrix is
ill-conditioned.  Optionally the solution is multiplied by Chung et al.'s heat-kernel
weights exp(-l(l+1)σ) (weighted Fourier series, the heat-kernel smoothing of the fit).

For many points the default is an iterative solve that never builds a basis matrix
(``method="cg"``): the right-hand side Σ w̃ R y, the degree-2L point moments and, at
the end, the fitted values come from ducc0's non-uniform (NUFFT-based) point
transforms, and conjugate gradients (Hestenes & Stiefel 1952) run on the normal
equations with G applied by two grid transforms on the degree-2L Gauss–Legendre grid
(:mod:`shapedesc.harmonics.pointsets`).  The same moments give a rigorous bound
cond(G) <= ρ_max/ρ_min; CG is used only when that bound is at most
``defaults.SH_FIT_CG_MAX_CONDITION`` (area-weighted, area-corrected sphere maps give
1.1–1.3, so CG stops after ~10–25 iterations), otherwise the exact direct/moments path
runs.  Cost at 150,000-160,000 points, degree 40: ~0.2 s instead of ~7 s (one core);
coefficients agree with the exact Cholesky solve to ~1e-14 relative
(tests/test_harmonics_fit.py, benchmarks/harmonics_fit.py, benchmarks/describe.py).

Accuracy (measured, tests/test_harmonics_fit.py): band-limited random functions
(coefficients ~N(0, 1)) at 10,000 uniform random points are recovered to ~1e-14
(test bound 1e-8).  At unevenly spread points the documented bound is
max|error| <= 10 · cond · eps · max|c|, cond being the reported condition estimate
(normal equations lose about cond·eps): with 80 % of the points in a 40° polar cap
(cond ~5e2) the error was 2e-14 (direct) / 4e-14 (moments), with 95 % in a 30° cap
(cond ~3e4) 3e-13 / 5e-13, i.e. 0.02–0.6 of the bound.  Where the points cannot
determine the degree (cond > 1/``defaults.FIT_RCOND_MIN``) the fit warns and returns
the minimum-norm solution.

References
----------
.. [1] M. K. Chung, K. M. Dalton, L. Shen, A. C. Evans, R. J. Davidson, "Weighted Fourier
   series representation and its application to quantifying the amount of gray matter",
   IEEE Trans. Med. Imaging 26 (2007) 566–581, doi:10.1109/TMI.2007.892519.
.. [2] A. N. Tikhonov, V. Y. Arsenin, *Solutions of Ill-Posed Problems*, Winston 1977.
.. [3] Å. Björck, *Numerical Methods for Least Squares Problems*, SIAM 1996,
   doi:10.1137/1.9781611971484 (normal equations, Cholesky, condition estimates).
.. [4] M. R. Hestenes, E. Stiefel, "Methods of conjugate gradients for solving linear
   systems", J. Res. Natl. Bur. Stand. 49 (1952) 409–436, doi:10.6028/jres.049.044
   (CG; error after k steps <= 2((√κ−1)/(√κ+1))^k in the energy norm).
.. [5] M. Reinecke, S. Belkner, J. Carron, "Improved cosmological fast spherical harmonic
   transforms", A&A 678 (2023) A165, doi:10.1051/0004-6361/202346717 (ducc0.sht, its
   NUFFT-based ``*_general`` point transforms).
.. [6] M. Reinecke, D. S. Seljebotn, "Libsharp – spherical harmonic transforms
   revisited", A&A 554 (2013) A112, doi:10.1051/0004-6361/201321494 (the ring-based
   Legendre transforms behind ducc0's grid and one-ring-per-point transforms).
"""

from __future__ import annotations

import logging
import math
import warnings
from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla
from scipy.linalg import blas, lapack

from shapedesc import defaults
from shapedesc.errors import IllConditionedFitWarning

from ._checks import check_degree, check_points
from .sh_basis import _angles, _real_rows
from .coefficients import SHCoefficients, chunk_rows, heat_kernel_factors
from .pointsets import (_apply_normal, _grid_density, _normal_matrix, _nufft_adjoint,
                        _nufft_loc, _nufft_synthesis, _point_adjoint)

__all__ = ["SHFit", "fit"]

log = logging.getLogger(__name__)

PENALTIES = ("laplacian", "identity")
METHODS = ("auto", "cg", "moments", "direct")


@dataclass(frozen=True, eq=False)
class SHFit:
    """Result of :func:`fit`.

    Attributes
    ----------
    coefficients : SHCoefficients
        Real-kind coefficients, shape ((lmax+1)**2, k), in the units of the values
        (heat-kernel weights already applied when ``heat_bandwidth`` > 0).
    residual_rms : ndarray, shape (k,)
        sqrt(Σ w̃ r² / Σ w̃) per channel for the returned coefficients (units of values).
    residual_max : ndarray, shape (k,)
        Largest |r| per channel (units of values).
    fitted : ndarray, shape (n, k)
        The expansion evaluated at the input points (units of values), read-only; the
        residual pass computes it anyway, so callers need not evaluate again.
    condition : float
        Condition number of the normal matrix: on the Cholesky path the LAPACK dpocon
        1-norm estimate of the Jacobi-scaled matrix, on the eigen path its exact 2-norm
        value (inf when rank deficient), on the CG path the rigorous upper bound
        ρ_max/ρ_min (with the penalty added) of the unscaled matrix.
    solver : str
        "cg", "cholesky" or "eigen".
    method : str
        How the normal equations were formed: "cg" (never formed; point transforms and
        grid transforms), "moments" or "direct" (see :func:`fit`).  When ``method="cg"``
        (or "auto") was asked for but the CG conditions were not met, this names the
        exact method that ran instead.
    rank : int
        Numerical rank used ((lmax+1)**2 on the Cholesky and CG paths).
    iterations : int
        CG iterations (0 on the other paths).
    n_points : int
    tikhonov : float
    penalty : str
    heat_bandwidth : float
    """

    coefficients: SHCoefficients
    residual_rms: np.ndarray
    residual_max: np.ndarray
    fitted: np.ndarray
    condition: float
    solver: str
    method: str
    rank: int
    n_points: int
    tikhonov: float
    penalty: str
    heat_bandwidth: float
    iterations: int = 0


def fit(points, values, lmax, *, weights=None, tikhonov: float = 0.0,
        penalty: str = "laplacian", heat_bandwidth: float = 0.0, method: str = "auto") -> SHFit:
    """Least-squares real spherical-harmonic expansion of samples at unit vectors.

    Parameters
    ----------
    points : array_like, shape (n, 3)
        Unit vectors where the samples were taken.
    values : array_like, shape (n,) or (n, k)
        Real samples (e.g. x, y, z in mm of the surface vertex mapped to each point).
    lmax : int
        Degree of the expansion.
    weights : array_like, shape (n,), optional, keyword-only
        Non-negative weight per point, e.g. the vertex's share of the original surface
        area (mm²); rescaled internally to sum to 4π.  Default: equal weights.
    tikhonov : float, keyword-only
        λ >= 0 of the penalty λ Σ Λ_j c_j² (dimensionless when weights sum to 4π).
    penalty : {"laplacian", "identity"}, keyword-only
        Λ_j = l(l+1) (default; penalises surface-gradient energy, leaves degree 0 free)
        or Λ_j = 1.
    heat_bandwidth : float, keyword-only
        σ >= 0; the solution is multiplied by exp(-l(l+1)σ) (Chung et al. 2007).
    method : {"auto", "cg", "moments", "direct"}, keyword-only
        How the normal equations are formed and solved (the result is the same to
        solver precision): "direct" accumulates Σ w R Rᵀ over chunks of points (cost
        n K²); "moments" computes the degree-2·lmax moments of the weighted points
        exactly (ducc0.sht ring transforms, cost ~n L²) and integrates on a
        Gauss–Legendre grid (cost ~16 L² K², independent of n; see
        :mod:`shapedesc.harmonics.pointsets`); both then use Cholesky (or the eigen
        fallback).  "cg" never forms G: NUFFT point transforms (accuracy
        ``defaults.SH_NUFFT_EPSILON``) and conjugate gradients with G applied on the
        degree-2L grid, to ``defaults.SH_FIT_CG_RTOL``; it is used only when the
        rigorous bound on cond(G) from the moments is at most
        ``defaults.SH_FIT_CG_MAX_CONDITION``, else the exact method of "auto" below
        runs.  "auto" (default): when n exceeds twice the degree-2L grid's node count,
        "cg" (falling back to "moments" for lmax >= ``defaults.SH_FIT_MOMENTS_MIN_DEGREE``,
        "direct" below); else "direct".

    Returns
    -------
    SHFit

    Warns
    -----
    IllConditionedFitWarning
        When the normal equations are ill-conditioned (e.g. too few or badly spread
        points for ``lmax``) and the eigen fallback with truncation was used.

    Notes
    -----
    Memory: "direct"/"moments" hold one (K, chunk) basis block
    (``defaults.SH_CHUNK_BYTES``) plus a few K×K matrices and O(n) work arrays; the whole
    process fitting 150,000 points at lmax 40 peaks at ~0.3 GB
    (benchmarks/harmonics_fit.py).  "cg" holds only O(n + L²) arrays.
    """
    lmax = check_degree(lmax)
    p = check_points(points)
    n = p.shape[0]
    y = np.asarray(values)
    if np.iscomplexobj(y):
        raise ValueError("fit: values must be real; fit real and imaginary parts separately")
    y = y.astype(np.float64, copy=False)
    if y.ndim == 1:
        y = y[:, None]
    if y.ndim != 2 or y.shape[0] != n:
        raise ValueError(f"fit: values must have shape ({n},) or ({n}, k) to match points; got {np.shape(values)}")
    if not np.all(np.isfinite(y)):
        raise ValueError("fit: values hold NaN or infinite entries; remove those points first")
    if n == 0:
        raise ValueError("fit: no points given")
    if weights is None:
        w = np.full(n, 4.0 * np.pi / n)
    else:
        w = np.asarray(weights, dtype=np.float64)
        if w.shape != (n,):
            raise ValueError(f"fit: weights must have shape ({n},), got {w.shape}")
        if not np.all(np.isfinite(w)) or np.any(w < 0):
            raise ValueError("fit: weights must be finite and >= 0 (e.g. vertex area shares in mm²)")
        total = w.sum()
        if total <= 0:
            raise ValueError("fit: weights sum to zero; give at least one positive weight")
        w = w * (4.0 * np.pi / total)
    lam = float(tikhonov)
    if not np.isfinite(lam) or lam < 0:
        raise ValueError(f"fit: tikhonov must be a finite number >= 0, got {tikhonov!r}")
    if penalty not in PENALTIES:
        raise ValueError(f"fit: penalty must be 'laplacian' or 'identity', got {penalty!r}")
    heat = heat_kernel_factors(lmax, heat_bandwidth)  # validates the bandwidth
    if method not in METHODS:
        raise ValueError(f"fit: method must be one of {', '.join(METHODS)}, got {method!r}")
    many = n > 2 * (2 * lmax + 1) * (4 * lmax + 2)
    exact = "moments" if many and lmax >= defaults.SH_FIT_MOMENTS_MIN_DEGREE else "direct"
    if method == "auto":
        method = "cg" if many else "direct"
    if method == "cg":
        out = _fit_cg(p, y, w, lmax, lam, penalty, float(heat_bandwidth), heat)
        if out is not None:
            return out
        method = exact
    return _fit(p, y, w, lmax, lam, penalty, float(heat_bandwidth), heat, method)


def _penalty_diagonal(lmax: int, lam: float, penalty: str) -> np.ndarray:
    """λ Λ_j for every flat row ((lmax+1)**2,)."""
    l = np.repeat(np.arange(lmax + 1), 2 * np.arange(lmax + 1) + 1).astype(np.float64)
    return lam * (l * (l + 1.0) if penalty == "laplacian" else np.ones_like(l))


def _fit_cg(p, y, w, lmax, lam, penalty, sigma, heat) -> SHFit | None:
    """Conjugate gradients on (G + λΛ) c = Σ w R y without forming G (see :func:`fit`).

    Returns None (the caller then runs an exact method) when the moments' density is not
    positive on the whole grid, the condition bound exceeds
    ``defaults.SH_FIT_CG_MAX_CONDITION``, or CG misses the tolerance within the
    iteration count that bound guarantees in exact arithmetic (rounding trouble).
    """
    K = (lmax + 1) ** 2
    loc = _nufft_loc(p)
    moments = _nufft_adjoint(loc, w[:, None], 2 * lmax)[:, 0]
    rho, g = _grid_density(moments, lmax)
    rmin, rmax = float(rho.min()), float(rho.max())
    pen = _penalty_diagonal(lmax, lam, penalty) if lam > 0 else None
    pmin = 0.0 if pen is None else float(pen.min())
    pmax = 0.0 if pen is None else float(pen.max())
    if not rmin + pmin > 0:
        log.debug("fit: moment density not positive (min %.3g); exact path", rmin)
        return None
    bound = (rmax + pmax) / (rmin + pmin)
    if bound > defaults.SH_FIT_CG_MAX_CONDITION:
        log.debug("fit: condition bound %.3g above the CG limit; exact path", bound)
        return None
    rtol = defaults.SH_FIT_CG_RTOL
    # CG error bound 2((√κ-1)/(√κ+1))^k (energy norm; Hestenes & Stiefel 1952) turned
    # into a residual bound needs an extra factor √κ: iterate until that is below rtol.
    rate = (math.sqrt(bound) - 1.0) / (math.sqrt(bound) + 1.0)
    need = 1 if rate <= 0 else math.log(rtol / (2.0 * math.sqrt(bound))) / math.log(rate)
    maxiter = int(math.ceil(need)) + 10

    def apply(c):
        out = _apply_normal(c, lmax, g)
        if pen is not None:
            out += pen[:, None] * c
        return out

    b = _nufft_adjoint(loc, w[:, None] * y, lmax)
    x = np.zeros_like(b)
    r = b.copy()
    bnorm = np.sqrt(np.einsum("ij,ij->j", b, b))
    target = rtol * bnorm
    d = r.copy()
    rr = np.einsum("ij,ij->j", r, r)
    it = 0
    while it < maxiter and np.any(np.sqrt(rr) > target):
        Ad = apply(d)
        dAd = np.einsum("ij,ij->j", d, Ad)
        alpha = np.divide(rr, dAd, out=np.zeros_like(rr), where=dAd > 0)
        x += alpha * d
        r -= alpha * Ad
        rr_new = np.einsum("ij,ij->j", r, r)
        beta = np.divide(rr_new, rr, out=np.zeros_like(rr), where=rr > 0)
        d = r + beta * d
        rr = rr_new
        it += 1
    # the recursively updated residual can drift from the true one: check it
    true = b - apply(x)
    if np.any(np.sqrt(np.einsum("ij,ij->j", true, true)) > 10.0 * target):
        log.debug("fit: CG missed the tolerance after %d iterations; exact path", it)
        return None
    x *= heat[:, None]
    coeffs = SHCoefficients(x, lmax, "real")
    fitted = _nufft_synthesis(loc, coeffs.values, lmax)
    res = y - fitted
    rms = np.sqrt(np.einsum("i,ij,ij->j", w, res, res) / w.sum())
    rmx = np.abs(res).max(axis=0)
    for a in (rms, rmx, fitted):
        a.setflags(write=False)
    return SHFit(coefficients=coeffs, residual_rms=rms, residual_max=rmx, fitted=fitted,
                 condition=float(bound), solver="cg", method="cg", rank=K, n_points=p.shape[0],
                 tikhonov=lam, penalty=penalty, heat_bandwidth=sigma, iterations=it)


def _normal_equations(p, y, w, lmax, *, with_matrix: bool = True):
    """Upper triangle of Σ w R Rᵀ (K, K) (None unless ``with_matrix``) and Σ w R y (K, k),
    accumulated over chunks of points.

    Also returns the sqrt(w)-scaled basis blocks when they all fit in
    ``defaults.SH_FIT_CACHE_BYTES`` (so the residual pass need not rebuild them), else None.
    """
    K = (lmax + 1) ** 2
    n = p.shape[0]
    G = np.zeros((K, K), order="F") if with_matrix else None
    rhs = np.zeros((K, y.shape[1]))
    step = min(chunk_rows(K), n)
    keep = 8 * K * n <= defaults.SH_FIT_CACHE_BYTES
    blocks = [] if keep else None
    sw = np.sqrt(w)
    buf = None if keep else np.empty((K, step))
    work = np.empty(((lmax + 1) * (lmax + 2) // 2, step))
    for start in range(0, n, step):
        sl = slice(start, start + step)
        z, s, phi = _angles(p[sl])
        # rows scaled by sqrt(w) at no cost (folded into the Legendre recurrence start)
        B = _real_rows(lmax, z, s, phi, out=buf, scale=sw[sl], work=work)   # (K, c)
        if with_matrix:
            # G += B Bᵀ; B.T is a Fortran-ordered (c, K) view, so BLAS reads it without a copy
            G = blas.dsyrk(1.0, B.T, beta=1.0, c=G, trans=1, lower=0, overwrite_c=1)
        rhs += B @ (sw[sl][:, None] * y[sl])
        if keep:
            blocks.append(B)
    return G, rhs, blocks


def _fit(p, y, w, lmax, lam, penalty, sigma, heat, method) -> SHFit:
    K = (lmax + 1) ** 2
    if method == "moments":
        theta = np.arctan2(np.hypot(p[:, 0], p[:, 1]), p[:, 2])
        phi = np.arctan2(p[:, 1], p[:, 0])
        moments = _point_adjoint(theta, phi, w[:, None], 2 * lmax)[:, 0]
        G = _normal_matrix(moments, lmax)
        _, rhs, blocks = _normal_equations(p, y, w, lmax, with_matrix=False)
    else:
        G, rhs, blocks = _normal_equations(p, y, w, lmax)
    G = np.triu(G)
    G = G + np.triu(G, 1).T
    if lam > 0:
        l = np.repeat(np.arange(lmax + 1), 2 * np.arange(lmax + 1) + 1).astype(np.float64)
        G[np.diag_indices(K)] += lam * (l * (l + 1.0) if penalty == "laplacian" else 1.0)
    d = np.sqrt(np.diag(G).copy())
    d[d == 0] = 1.0
    A = G / d[:, None] / d[None, :]
    b = rhs / d[:, None]
    solver, rank = "cholesky", K
    cfac, info = lapack.dpotrf(A, lower=0, clean=1)
    rcond = 0.0
    if info == 0:
        anorm = np.abs(A).sum(axis=0).max()
        rcond, info2 = lapack.dpocon(cfac, anorm, uplo="U")
        if info2 != 0:
            rcond = 0.0
    if info == 0 and rcond >= defaults.FIT_RCOND_MIN:
        cs = sla.cho_solve((cfac, False), b, check_finite=False)
        condition = 1.0 / rcond
    else:
        ev, V = np.linalg.eigh(A)
        keep = ev > defaults.FIT_EIG_RTOL * ev[-1]
        rank = int(keep.sum())
        cs = V[:, keep] @ ((V[:, keep].T @ b) / ev[keep][:, None])
        condition = float(ev[-1] / ev[0]) if ev[0] > 0 else float("inf")
        solver = "eigen"
        warnings.warn(
            f"harmonic fit of degree {lmax} to {p.shape[0]} points is ill-conditioned "
            f"(condition ~{condition:.3g}, rank {rank} of {K}); used a truncated "
            "eigen-decomposition. Use more or better-spread points, a lower lmax, or tikhonov > 0.",
            IllConditionedFitWarning, stacklevel=3)
    c = cs / d[:, None]
    c *= heat[:, None]
    coeffs = SHCoefficients(c, lmax, "real")
    rms, rmax, fitted = _residuals(p, y, w, lmax, coeffs.values, blocks)
    return SHFit(coefficients=coeffs, residual_rms=rms, residual_max=rmax, fitted=fitted,
                 condition=float(condition), solver=solver, method=method, rank=rank, n_points=p.shape[0],
                 tikhonov=lam, penalty=penalty, heat_bandwidth=sigma)


def _residuals(p, y, w, lmax, c, blocks):
    """Weighted RMS and max |residual| per channel, from cached (sqrt(w)-scaled) blocks or rebuilt ones."""
    K = (lmax + 1) ** 2
    n = p.shape[0]
    step = min(chunk_rows(K), n)
    ss = np.zeros(y.shape[1])
    rmax = np.zeros(y.shape[1])
    fitted = np.empty_like(y)
    sw = np.sqrt(w)
    buf = work = None
    if blocks is None:
        buf = np.empty((K, step))
        work = np.empty(((lmax + 1) * (lmax + 2) // 2, step))
    for i, start in enumerate(range(0, n, step)):
        sl = slice(start, start + step)
        if blocks is not None:
            B = blocks[i]
        else:
            z, s, phi = _angles(p[sl])
            B = _real_rows(lmax, z, s, phi, out=buf, scale=sw[sl], work=work)
        # B holds sqrt(w)-scaled rows: sqrt(w) r = sqrt(w) y - Bᵀ c
        rw = sw[sl][:, None] * y[sl] - B.T @ c
        ss += np.einsum("ij,ij->j", rw, rw)
        swc = sw[sl]
        pos = swc > 0
        r = np.empty_like(rw)
        r[pos] = rw[pos] / swc[pos, None]
        if not pos.all():
            # zero-weight points: evaluate their rows unscaled
            zz, zs, zphi = _angles(p[sl][~pos])
            r[~pos] = y[sl][~pos] - _real_rows(lmax, zz, zs, zphi).T @ c
        rmax = np.maximum(rmax, np.abs(r).max(axis=0))
        fitted[sl] = y[sl] - r
    rms = np.sqrt(ss / w.sum())
    for a in (rms, rmax, fitted):
        a.setflags(write=False)
    return rms, rmax, fitted
