"""Analysis and synthesis on a Gauss–Legendre grid (engine: ducc0.sht).

The grid for degree L has ntheta = L + 1 rings at the Gauss–Legendre nodes cos θ_j
(north to south) and nphi = 2L + 2 equally spaced longitudes φ_k = 2πk/nphi.  The
quadrature Σ w_jk g(θ_j, φ_k) is exact for every band-limited g of degree <= 2L + 1 in
cos θ and <= 2L + 1 in φ, so analysis of a degree-L function is exact to rounding and
the Gram matrix of the basis on the grid is the identity.

Conventions checked against :func:`shapedesc.harmonics.basis` (tests): ducc0 stores
a_lm for m >= 0 only ("healpy" layout, index m(2L+1-m)/2 + l) of a real map
f = Σ_l a_l0 Y_l^0 + 2 Re Σ_{m>0} a_lm Y_l^m, where Y_l^m are the same orthonormal
Condon–Shortley harmonics as ours; ring 0 is the northernmost.  Public functions here
speak only the project's flat l*l + l + m real layout.

References
----------
.. [1] M. Reinecke, S. Belkner, J. Carron, "Improved cosmological fast spherical harmonic
   transforms", A&A 678 (2023) A165, doi:10.1051/0004-6361/202346717 (ducc0.sht).
.. [2] G. H. Golub, J. H. Welsch, "Calculation of Gauss quadrature rules", Math. Comp. 23
   (1969) 221–230, doi:10.1090/S0025-5718-69-99647-1.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import ducc0
import numpy as np
from scipy.special import roots_legendre

from ._checks import check_degree, check_kind
from .coefficients import SHCoefficients

__all__ = ["GLGrid", "gl_grid", "gl_analysis", "gl_synthesis"]

_SQRT2 = np.sqrt(2.0)


@dataclass(frozen=True, eq=False)
class GLGrid:
    """Gauss–Legendre grid on the unit sphere.

    Attributes
    ----------
    lmax : int
        Largest degree the grid resolves exactly.
    theta : ndarray, shape (ntheta,)
        Ring colatitudes (radians), ascending (north to south).
    phi : ndarray, shape (nphi,)
        Longitudes (radians), 2πk/nphi.
    points : ndarray, shape (ntheta*nphi, 3)
        Unit vectors, ring-major (index j*nphi + k).
    weights : ndarray, shape (ntheta*nphi,)
        Quadrature weights (steradian); they sum to 4π.
    """

    lmax: int
    theta: np.ndarray
    phi: np.ndarray
    points: np.ndarray
    weights: np.ndarray

    @property
    def shape(self) -> tuple[int, int]:
        """(ntheta, nphi)."""
        return (self.theta.shape[0], self.phi.shape[0])

    @property
    def n_points(self) -> int:
        return self.points.shape[0]


def gl_grid(lmax, *, nphi: int | None = None) -> GLGrid:
    """The Gauss–Legendre grid resolving degree ``lmax``.

    Parameters
    ----------
    lmax : int
        Degree (>= 0); the grid has lmax + 1 rings.
    nphi : int, optional, keyword-only
        Longitudes per ring, >= 2*lmax + 1 (default 2*lmax + 2).

    Returns
    -------
    GLGrid
    """
    lmax = check_degree(lmax)
    nphi = _check_nphi(lmax, nphi)
    ntheta = lmax + 1
    x, _ = roots_legendre(ntheta)
    z = x[::-1].copy()                     # north to south
    s = np.sqrt((1.0 - z) * (1.0 + z))
    theta = np.arctan2(s, z)
    phi = 2.0 * np.pi * np.arange(nphi) / nphi
    pts = np.empty((ntheta, nphi, 3))
    pts[..., 0] = s[:, None] * np.cos(phi)[None, :]
    pts[..., 1] = s[:, None] * np.sin(phi)[None, :]
    pts[..., 2] = z[:, None]
    ring_w = ducc0.sht.get_gridweights("GL", ntheta) / nphi
    w = np.repeat(ring_w, nphi)
    for a in (theta, phi, pts, w):
        a.setflags(write=False)
    return GLGrid(lmax=lmax, theta=theta, phi=phi, points=pts.reshape(-1, 3), weights=w)


def _check_nphi(lmax: int, nphi) -> int:
    if nphi is None:
        return 2 * lmax + 2
    nphi = check_degree(nphi, "nphi")
    if nphi < 2 * lmax + 1:
        raise ValueError(f"nphi={nphi} is too small for lmax={lmax}; need at least {2 * lmax + 1}")
    return nphi


@lru_cache(maxsize=32)
def _healpy_index(lmax: int):
    """For every flat real index with m >= 0: its healpy-layout index (cached, read-only)."""
    l = np.repeat(np.arange(lmax + 1), 2 * np.arange(lmax + 1) + 1)
    m = np.arange((lmax + 1) ** 2) - l * l - l
    sel = np.nonzero(m >= 0)[0]
    ls, ms = l[sel], m[sel]
    hp = ms * (2 * lmax + 1 - ms) // 2 + ls
    for a in (sel, ls, ms, hp):
        a.setflags(write=False)
    return sel, ls, ms, hp


def _real_to_healpy(r: np.ndarray, lmax: int) -> np.ndarray:
    """Real flat coefficients (K,) -> ducc0 a_lm, m >= 0 (complex)."""
    sel, ls, ms, hp = _healpy_index(lmax)
    alm = np.zeros((lmax + 1) * (lmax + 2) // 2, dtype=np.complex128)
    rp = r[sel]
    rn = r[sel - 2 * ms]                 # (l, -m)
    sign = np.where(ms % 2 == 0, 1.0, -1.0)
    val = np.where(ms == 0, rp, sign * (rp - 1j * rn) / _SQRT2)
    alm[hp] = val
    return alm


def _healpy_to_real(alm: np.ndarray, lmax: int) -> np.ndarray:
    sel, ls, ms, hp = _healpy_index(lmax)
    a = alm[hp]
    sign = np.where(ms % 2 == 0, 1.0, -1.0)
    r = np.zeros((lmax + 1) ** 2)
    pos = ms > 0
    r[sel] = np.where(pos, _SQRT2 * sign * a.real, a.real)
    r[(sel - 2 * ms)[pos]] = -_SQRT2 * sign[pos] * a.imag[pos]
    return r


def gl_analysis(grid_values, lmax, *, grid_lmax: int | None = None, nphi: int | None = None,
                nthreads: int = 1) -> SHCoefficients:
    """Real coefficients up to ``lmax`` of samples on the Gauss–Legendre grid.

    Parameters
    ----------
    grid_values : array_like, shape (ntheta*nphi,), (ntheta*nphi, k), (ntheta, nphi) or (ntheta, nphi, k)
        Real samples at ``gl_grid(grid_lmax, nphi=nphi).points`` (ring-major).
    lmax : int
        Degree of the result, <= ``grid_lmax``.
    grid_lmax : int, optional, keyword-only
        Degree of the grid (default ``lmax``).
    nphi : int, optional, keyword-only
        Longitudes per ring of the grid (default 2*grid_lmax + 2).
    nthreads : int, keyword-only
        Threads given to ducc0 (default 1; the machine is usually shared).

    Returns
    -------
    SHCoefficients
        Real kind, shape ((lmax+1)**2, k).  Exact (to rounding) for samples of a
        function band-limited to degree <= grid_lmax.
    """
    lmax = check_degree(lmax)
    glmax = lmax if grid_lmax is None else check_degree(grid_lmax, "grid_lmax")
    if lmax > glmax:
        raise ValueError(f"lmax={lmax} exceeds grid_lmax={glmax}; use a grid of degree >= lmax")
    nphi = _check_nphi(glmax, nphi)
    ntheta = glmax + 1
    v = np.asarray(grid_values)
    if np.iscomplexobj(v):
        raise ValueError("grid_values must be real; analyse real and imaginary parts separately")
    v = v.astype(np.float64, copy=False)
    if v.shape[:2] == (ntheta, nphi):
        v = v.reshape(ntheta * nphi, *v.shape[2:])
    if v.ndim == 1:
        v = v[:, None]
    if v.ndim != 2 or v.shape[0] != ntheta * nphi:
        raise ValueError(
            f"grid_values has shape {np.shape(grid_values)}; a grid of degree {glmax} needs "
            f"({ntheta * nphi},[k]) or ({ntheta}, {nphi}[, k]) samples (see gl_grid)"
        )
    if not np.all(np.isfinite(v)):
        raise ValueError("grid_values holds NaN or infinite samples")
    out = np.empty(((lmax + 1) ** 2, v.shape[1]))
    for c in range(v.shape[1]):
        mp = np.ascontiguousarray(v[:, c].reshape(1, ntheta, nphi))
        alm = ducc0.sht.analysis_2d(map=mp, spin=0, lmax=lmax, geometry="GL",
                                    nthreads=int(nthreads))
        out[:, c] = _healpy_to_real(alm[0], lmax)
    return SHCoefficients(out, lmax, "real")


def gl_synthesis(coefficients, *, lmax: int | None = None, kind: str = "real",
                 grid_lmax: int | None = None, nphi: int | None = None,
                 nthreads: int = 1) -> np.ndarray:
    """Values of an expansion at the Gauss–Legendre grid points.

    Parameters
    ----------
    coefficients : SHCoefficients or array_like, shape (K,) or (K, k)
        Expansion of a real-valued function.  Complex-kind input must be conjugate
        symmetric (it is converted to the real kind).
    lmax, kind : keyword-only
        Degree and kind of a raw coefficient array (ignored for SHCoefficients).
    grid_lmax : int, optional, keyword-only
        Degree of the grid (default: the coefficients' degree); must be >= it.
    nphi : int, optional, keyword-only
        Longitudes per ring (default 2*grid_lmax + 2).
    nthreads : int, keyword-only
        Threads given to ducc0 (default 1).

    Returns
    -------
    ndarray, float64, shape (ntheta*nphi, k)
        Ring-major values at ``gl_grid(grid_lmax, nphi=nphi).points``.
    """
    if not isinstance(coefficients, SHCoefficients):
        coefficients = SHCoefficients(coefficients, lmax, check_kind(kind))
    c = coefficients.to_real()
    L = c.lmax
    glmax = L if grid_lmax is None else check_degree(grid_lmax, "grid_lmax")
    if glmax < L:
        raise ValueError(f"grid_lmax={glmax} is below the coefficients' degree {L}")
    nphi = _check_nphi(glmax, nphi)
    ntheta = glmax + 1
    out = np.empty((ntheta * nphi, c.values.shape[1]))
    for k in range(c.values.shape[1]):
        alm = _real_to_healpy(c.values[:, k], L)[None, :]
        mp = ducc0.sht.synthesis_2d(alm=alm, spin=0, lmax=L, geometry="GL", ntheta=ntheta,
                                    nphi=nphi, nthreads=int(nthreads))
        out[:, k] = mp[0].ravel()
    return out
