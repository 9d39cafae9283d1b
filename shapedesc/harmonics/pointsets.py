"""Exact spherical-harmonic sums over scattered points, and the normal matrix from moments.

* :func:`_point_adjoint` — Σ_i v_i R_j(x_i) for every real basis function R_j of degree
  <= L, and :func:`_point_synthesis` — Σ_j c_j R_j(x_i) at every point.  Both use
  ducc0.sht's ring-based transforms with one ring of one pixel per point: exact
  Legendre recurrences in compiled code, no interpolation (unlike NUFFT-based routines).
* :func:`_normal_matrix` — G_jk = Σ_i w_i R_j(x_i) R_k(x_i) without touching the points
  again.  R_j R_k is band-limited to degree 2L, so G depends on the sampling measure
  μ = Σ_i w_i δ_{x_i} only through its moments μ_LM = Σ_i w_i R_LM(x_i), L <= 2L:
  G_jk = ∫ R_j R_k μ_{2L} dΩ with μ_{2L} = Σ μ_LM R_LM.  That integrand has degree <= 4L,
  so the Gauss–Legendre grid of degree 2L (2L+1 rings, 4L+2 longitudes) integrates it
  exactly: G = Σ_q g_q R(y_q) R(y_q)ᵀ with g_q = ω_q μ_{2L}(y_q) (g_q may be negative;
  the positive and negative parts are accumulated separately).  The cost is O(n L²) for
  the moments plus a K×K product over ~8 L² grid nodes instead of n points (13,122 nodes
  instead of 150,000 points at L = 40).

That a product of two harmonics of degrees l, l' expands in harmonics of degree
<= l + l' (Gaunt coefficients) is DLMF 34.3.22.

Fast, nearly exact versions of the same sums (used by ``fit(method="cg")``):

* :func:`_nufft_adjoint` / :func:`_nufft_synthesis` — the same two sums through
  ducc0's ``adjoint_synthesis_general`` / ``synthesis_general``, which go through a
  non-uniform FFT on the doubled sphere instead of one Legendre recurrence per point
  (Reinecke, Belkner & Carron 2023).  Cost ~n + L² log L instead of ~n L²: at 160,000
  points and degree 40, ~0.02 s per channel instead of ~1 s.  Accuracy is the
  requested ``defaults.SH_NUFFT_EPSILON`` relative to the largest coefficient/value
  (measured 6e-14 to 8e-14 at degrees 15-80 against :func:`_point_adjoint`,
  tests/test_harmonics_fit.py).
* :func:`_grid_density` / :func:`_apply_normal` — G c without forming G: with
  g_q = ω_q μ_{2L}(y_q) as above, G c = Σ_q g_q R(y_q) (R(y_q)ᵀ c), i.e. a synthesis of
  c on the degree-2L Gauss–Legendre grid, a pointwise product with g and the adjoint
  synthesis (two ducc0 grid transforms, cost ~L³, independent of n).  Because that
  quadrature is exact and ω_q > 0, cᵀ G c = Σ_q ω_q ρ_q f(y_q)² with ρ_q = μ_{2L}(y_q) and
  f = Σ c_j R_j, so ρ_min ||c||² <= cᵀ G c <= ρ_max ||c||²: when every ρ_q > 0 the
  condition number of G is at most ρ_max / ρ_min (a rigorous bound, computed for free).

References
----------
.. [1] M. Reinecke, S. Belkner, J. Carron, "Improved cosmological fast spherical harmonic
   transforms", A&A 678 (2023) A165, doi:10.1051/0004-6361/202346717 (ducc0.sht,
   including the non-uniform ``*_general`` transforms).
.. [2] M. Reinecke, D. S. Seljebotn, "Libsharp – spherical harmonic transforms
   revisited", A&A 554 (2013) A112, doi:10.1051/0004-6361/201321494 (the ring-based
   Legendre transforms ducc0.sht descends from).
"""

from __future__ import annotations

import ducc0
import numpy as np
from scipy.linalg import blas

from shapedesc import defaults

from .coefficients import SHCoefficients, chunk_rows
from .sh_basis import _angles, _real_rows
from .transforms import _healpy_to_real, _real_to_healpy, gl_grid, gl_synthesis


def _rings(theta: np.ndarray, phi: np.ndarray):
    n = theta.shape[0]
    return dict(theta=np.ascontiguousarray(theta, dtype=np.float64),
                phi0=np.ascontiguousarray(phi, dtype=np.float64),
                nphi=np.ones(n, dtype=np.uintp), ringstart=np.arange(n, dtype=np.uintp))


def _point_adjoint(theta, phi, values: np.ndarray, lmax: int, nthreads: int = 1) -> np.ndarray:
    """Σ_i values[i, c] R_j(x_i): shape ((lmax+1)**2, k)."""
    rings = _rings(theta, phi)
    out = np.empty(((lmax + 1) ** 2, values.shape[1]))
    for c in range(values.shape[1]):
        mp = np.ascontiguousarray(values[:, c], dtype=np.float64)[None, :]
        alm = ducc0.sht.adjoint_synthesis(map=mp, lmax=lmax, spin=0, nthreads=int(nthreads), **rings)
        out[:, c] = _healpy_to_real(alm[0], lmax)
    return out


def _point_synthesis(theta, phi, coefficients: np.ndarray, lmax: int, nthreads: int = 1) -> np.ndarray:
    """Σ_j coefficients[j, c] R_j(x_i): shape (n, k)."""
    rings = _rings(theta, phi)
    out = np.empty((theta.shape[0], coefficients.shape[1]))
    for c in range(coefficients.shape[1]):
        alm = _real_to_healpy(coefficients[:, c], lmax)[None, :]
        mp = ducc0.sht.synthesis(alm=alm, lmax=lmax, spin=0, nthreads=int(nthreads), **rings)
        out[:, c] = mp[0]
    return out


def _normal_matrix(moments: np.ndarray, lmax: int) -> np.ndarray:
    """Upper triangle of G = Σ_i w_i R(x_i) R(x_i)ᵀ (K, K) from the degree-2L moments."""
    K = (lmax + 1) ** 2
    g = _grid_density(moments, lmax)[1].ravel()
    z, s, phi = _angles(gl_grid(2 * lmax).points)
    G = np.zeros((K, K), order="F")
    Gneg = np.zeros((K, K), order="F")
    step = chunk_rows(K)
    for sel, target in ((np.nonzero(g > 0)[0], "pos"), (np.nonzero(g < 0)[0], "neg")):
        root = np.sqrt(np.abs(g[sel]))
        for start in range(0, sel.size, step):
            idx = sel[start:start + step]
            B = _real_rows(lmax, z[idx], s[idx], phi[idx], scale=root[start:start + step])
            if target == "pos":
                G = blas.dsyrk(1.0, B.T, beta=1.0, c=G, trans=1, lower=0, overwrite_c=1)
            else:
                Gneg = blas.dsyrk(1.0, B.T, beta=1.0, c=Gneg, trans=1, lower=0, overwrite_c=1)
    G -= Gneg
    return G


# ============================================================== NUFFT-based transforms


def _nufft_loc(points: np.ndarray) -> np.ndarray:
    """(θ, φ) of unit vectors (n, 3) as ducc0's ``loc`` array (n, 2), φ in [0, 2π)."""
    loc = np.empty((points.shape[0], 2))
    loc[:, 0] = np.arctan2(np.hypot(points[:, 0], points[:, 1]), points[:, 2])
    loc[:, 1] = np.arctan2(points[:, 1], points[:, 0])
    loc[:, 1] %= 2.0 * np.pi
    # x % 2π can round up to 2π itself for tiny negative x; fold that back to 0
    loc[loc[:, 1] >= 2.0 * np.pi, 1] = 0.0
    return loc


def _nufft_adjoint(loc: np.ndarray, values: np.ndarray, lmax: int) -> np.ndarray:
    """Σ_i values[i, c] R_j(x_i) through ducc0's NUFFT-based adjoint: shape ((lmax+1)**2, k).

    Single-threaded (deterministic summation order, and the machine is shared).
    """
    out = np.empty(((lmax + 1) ** 2, values.shape[1]))
    for c in range(values.shape[1]):
        mp = np.ascontiguousarray(values[:, c], dtype=np.float64)[None, :]
        alm = ducc0.sht.adjoint_synthesis_general(map=mp, spin=0, lmax=lmax, loc=loc,
                                                  epsilon=defaults.SH_NUFFT_EPSILON, nthreads=1)
        out[:, c] = _healpy_to_real(alm[0], lmax)
    return out


def _nufft_synthesis(loc: np.ndarray, coefficients: np.ndarray, lmax: int) -> np.ndarray:
    """Σ_j coefficients[j, c] R_j(x_i) through ducc0's NUFFT-based synthesis: shape (n, k)."""
    out = np.empty((loc.shape[0], coefficients.shape[1]))
    for c in range(coefficients.shape[1]):
        alm = _real_to_healpy(coefficients[:, c], lmax)[None, :]
        mp = ducc0.sht.synthesis_general(alm=alm, spin=0, lmax=lmax, loc=loc,
                                         epsilon=defaults.SH_NUFFT_EPSILON, nthreads=1)
        out[:, c] = mp[0]
    return out


def _grid_density(moments: np.ndarray, lmax: int) -> tuple[np.ndarray, np.ndarray]:
    """Density ρ_q = μ_{2L}(y_q) and weights g_q = ω_q ρ_q on the degree-2L GL grid.

    Both shaped (2L+1, 4L+2) (rings × longitudes), for :func:`_apply_normal`.
    """
    L2 = 2 * lmax
    grid = gl_grid(L2)
    rho = gl_synthesis(SHCoefficients(moments, L2, "real"))[:, 0]
    shape = grid.shape
    return rho.reshape(shape), (rho * grid.weights).reshape(shape)


def _apply_normal(c: np.ndarray, lmax: int, g: np.ndarray) -> np.ndarray:
    """G c for coefficients (K, k), G = Σ_q g_q R(y_q) R(y_q)ᵀ on the grid of ``g``."""
    ntheta, nphi = g.shape
    out = np.empty_like(c)
    for k in range(c.shape[1]):
        alm = _real_to_healpy(c[:, k], lmax)[None, :]
        mp = ducc0.sht.synthesis_2d(alm=alm, spin=0, lmax=lmax, geometry="GL",
                                    ntheta=ntheta, nphi=nphi, nthreads=1)
        mp[0] *= g
        a = ducc0.sht.adjoint_synthesis_2d(map=mp, spin=0, lmax=lmax, geometry="GL", nthreads=1)
        out[:, k] = _healpy_to_real(a[0], lmax)
    return out
