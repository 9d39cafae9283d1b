"""Spherical-harmonic basis functions at unit vectors, in the project's one flat layout.

Conventions (DESIGN.md "Shared conventions"): orthonormal on the unit sphere
(∫|Y|² dΩ = 1); complex Y_l^m with the Condon–Shortley phase,
Y_l^m(θ, φ) = sqrt((2l+1)/(4π) (l-m)!/(l+m)!) P_l^m(cos θ) e^{imφ},
Y_l^{-m} = (-1)^m conj(Y_l^m); real basis

* m > 0:  √2 (-1)^m Re Y_l^m   = √2 N_l^m P_l^m(cos θ) cos(mφ) with P_l^m *without*
  the Condon–Shortley phase (the (-1)^m cancels it),
* m < 0:  √2 (-1)^m Im Y_l^|m| = √2 N_l^|m| P_l^|m|(cos θ) sin(|m|φ), likewise,
* m = 0:  Y_l^0,

with column index l*l + l + m.  θ is the colatitude in [0, π] measured from +z, φ the
longitude in [0, 2π) measured from +x towards +y.

References
----------
.. [1] NIST DLMF §14.30 (spherical harmonics). https://dlmf.nist.gov/14.30
"""

from __future__ import annotations

import numpy as np

from ._checks import check_degree, check_kind, check_order, check_points, n_coefficients
from .associated_legendre import _legendre_rows

__all__ = [
    "basis",
    "sh_index",
    "degrees_orders",
    "cartesian_to_spherical",
    "spherical_to_cartesian",
]

_SQRT2 = np.sqrt(2.0)


def sh_index(l, m) -> int:
    """Flat column of degree ``l`` and order ``m``: l*l + l + m (|m| <= l)."""
    l = check_degree(l, "degree l")
    m = check_order(m, "order m")
    if abs(m) > l:
        raise ValueError(f"order m={m} is outside -l..l for degree l={l}")
    return l * l + l + m


def degrees_orders(lmax) -> tuple[np.ndarray, np.ndarray]:
    """Degree and order of every flat column up to ``lmax``.

    Returns
    -------
    l, m : ndarray of int64, each shape ((lmax+1)**2,)
    """
    lmax = check_degree(lmax)
    l = np.repeat(np.arange(lmax + 1), 2 * np.arange(lmax + 1) + 1)
    m = np.arange(n_coefficients(lmax)) - l * l - l
    return l, m


def cartesian_to_spherical(points) -> tuple[np.ndarray, np.ndarray]:
    """Colatitude θ in [0, π] and longitude φ in [0, 2π) of unit vectors ``(n, 3)``."""
    p = check_points(points)
    theta = np.arctan2(np.hypot(p[:, 0], p[:, 1]), p[:, 2])
    phi = np.mod(np.arctan2(p[:, 1], p[:, 0]), 2.0 * np.pi)
    return theta, phi


def spherical_to_cartesian(theta, phi) -> np.ndarray:
    """Unit vectors ``(n, 3)`` from colatitude θ and longitude φ (radians)."""
    theta = np.asarray(theta, dtype=np.float64)
    phi = np.asarray(phi, dtype=np.float64)
    theta, phi = np.broadcast_arrays(theta, phi)
    st = np.sin(theta)
    return np.stack([st * np.cos(phi), st * np.sin(phi), np.cos(theta)], axis=-1).reshape(-1, 3)


def basis(lmax, points, *, kind: str = "real") -> np.ndarray:
    """Orthonormal spherical harmonics up to degree ``lmax`` at unit vectors.

    Parameters
    ----------
    lmax : int
        Largest degree, >= 0.
    points : array_like, shape (n, 3)
        Unit vectors (positions on the unit sphere).  Lengths within
        ``defaults.UNIT_VECTOR_TOL`` of 1 are renormalised.
    kind : {"real", "complex"}, keyword-only
        Real basis (float64) or complex Y_l^m with the Condon–Shortley phase
        (complex128); see the module docstring for the exact definitions.

    Returns
    -------
    ndarray, shape (n, (lmax+1)**2)
        Column l*l + l + m holds the basis function of degree l and order m.

    Notes
    -----
    Normalised recurrences only (see :func:`shapedesc.harmonics.legendre_all`): no
    factorials, stable well beyond lmax = 200, exact zeros for m != 0 at the poles.
    """
    lmax = check_degree(lmax)
    kind = check_kind(kind)
    p = check_points(points)
    z, s, phi = _angles(p)
    rows = _real_rows(lmax, z, s, phi) if kind == "real" else _complex_rows(lmax, z, s, phi)
    return np.ascontiguousarray(rows.T)


def _angles(p: np.ndarray):
    """cos θ, sin θ (exact at the poles) and φ of unit vectors."""
    s = np.hypot(p[:, 0], p[:, 1])
    z = p[:, 2]
    phi = np.arctan2(p[:, 1], p[:, 0])
    return z, s, phi


def _real_rows(lmax: int, z, s, phi, out: np.ndarray | None = None,
               scale: np.ndarray | None = None, work: np.ndarray | None = None) -> np.ndarray:
    """Real basis as rows: C-ordered array ((lmax+1)**2, n).

    ``scale`` (n,) multiplies every column (free: folded into the Legendre start);
    ``out`` and ``work`` are optional buffers for the result and the Legendre rows.
    """
    n = z.shape[0]
    # (-1)^m of the real basis cancels the CS phase
    P = _legendre_rows(lmax, z, s, csphase=1, out=work, scale=scale)
    mm = np.arange(1, lmax + 1, dtype=np.float64)[:, None]
    ang = mm * phi[None, :]
    cos = np.cos(ang)
    cos *= _SQRT2
    sin = np.sin(ang)
    sin *= _SQRT2
    B = np.empty((n_coefficients(lmax), n)) if out is None else out[:, :n]
    for l in range(lmax + 1):
        r0 = l * (l + 1) // 2
        c0 = l * l + l
        B[c0] = P[r0]
        if l:
            np.multiply(P[r0 + 1:r0 + l + 1], cos[:l], out=B[c0 + 1:c0 + l + 1])
            # columns m = -l..-1 use |m| = l..1
            np.multiply(P[r0 + l:r0:-1], sin[l - 1::-1], out=B[c0 - l:c0])
    return B


def _complex_rows(lmax: int, z, s, phi) -> np.ndarray:
    """Complex basis (Condon–Shortley phase) as rows: ((lmax+1)**2, n) complex128."""
    n = z.shape[0]
    P = _legendre_rows(lmax, z, s, csphase=-1)
    mm = np.arange(0, lmax + 1, dtype=np.float64)[:, None]
    e = np.exp(1j * mm * phi[None, :])
    B = np.empty((n_coefficients(lmax), n), dtype=np.complex128)
    sign = (-1.0) ** np.arange(lmax + 1)
    for l in range(lmax + 1):
        r0 = l * (l + 1) // 2
        c0 = l * l + l
        Yp = P[r0:r0 + l + 1] * e[:l + 1]          # m = 0..l
        B[c0:c0 + l + 1] = Yp
        if l:
            # Y_l^{-m} = (-1)^m conj(Y_l^m), m = l..1
            B[c0 - l:c0] = (sign[l:0:-1, None] * np.conj(Yp[l:0:-1]))
    return B
