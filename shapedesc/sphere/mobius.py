"""Möbius centring: move the area-weighted centre of the mapped surface to the origin.

A conformal map of a genus-0 surface onto the sphere is unique only up to the
six-dimensional Möbius group. Baden, Crane & Kazhdan (2018) fix the three non-rotational
degrees of freedom by requiring that the centre of mass of the surface's area measure,
pushed to the sphere, lies at the origin; the centring transformation exists and is
unique up to a rotation (their Section 4; Douady & Earle 1986) for any measure without
an atom of half the mass. We use their family of "hyperbolic translations"

    f_c(x) = (1 − |c|²)(x + c)/|x + c|² + c,        |c| < 1,

(unit sphere to unit sphere, orientation preserving, f_0 = identity), and Newton's
method on ``G(c)`` = area-weighted mean of ``f_c(x_i)``: at ``c = 0`` the Jacobian is
``dG/dc = 2 Σ w_i (I − x_i x_iᵀ)/Σ w_i``; after each step the points are replaced by
``f_c(x)``, so every step linearises at ``c = 0``. Steps are damped (|c| <= 1/2, halved
until ``|G|`` decreases) because on strongly elongated shapes the measure is
concentrated and the first Jacobians are nearly singular.

Möbius maps preserve the orientation of vertex triples, so centring never flips a face.

References
----------
Baden, A., Crane, K. & Kazhdan, M. (2018). Möbius registration. *Computer Graphics
Forum* 37(5), 211–220. doi:10.1111/cgf.13495
Douady, A. & Earle, C. J. (1986). Conformally natural extension of homeomorphisms of
the circle. *Acta Math.* 157, 23–48. doi:10.1007/BF02392590
"""

from __future__ import annotations

import numpy as np

from ..defaults import SPHERE_MOBIUS_MAX_ITER, SPHERE_MOBIUS_TOL
from ..errors import ConvergenceError

__all__ = ["hyperbolic_translation", "mobius_centre"]


def hyperbolic_translation(x: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Apply ``f_c(x) = (1 − |c|²)(x + c)/|x + c|² + c`` to unit vectors ``x`` (n, 3); |c| < 1."""
    c = np.asarray(c, dtype=np.float64)
    y = x + c
    out = (1.0 - c @ c) * y / np.einsum("ij,ij->i", y, y)[:, None] + c
    return out / np.linalg.norm(out, axis=1, keepdims=True)


def mobius_centre(sphere_vertices: np.ndarray, weights: np.ndarray, *, what: str,
                  tol: float = SPHERE_MOBIUS_TOL, max_iter: int = SPHERE_MOBIUS_MAX_ITER
                  ) -> tuple[np.ndarray, int]:
    """Centre a sphere map: Möbius-transform it so ``Σ w_i x_i = 0``.

    Parameters
    ----------
    sphere_vertices : ndarray, shape (V, 3)
        Unit vectors.
    weights : ndarray, shape (V,)
        Non-negative masses (vertex areas of the original surface, mm²; only ratios count).
    what : str
        Surface name for the error message.

    Returns
    -------
    centred : ndarray, shape (V, 3)
        Unit vectors with area-weighted centre ``|Σ w x|/Σ w < tol``.
    iterations : int

    Raises
    ------
    ConvergenceError
        When the centre is not within ``tol`` after ``max_iter`` Newton steps.
    """
    x = np.array(sphere_vertices, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64) / np.sum(weights)
    g = np.einsum("i,ij->j", w, x)  # not BLAS: thread-count independent
    for it in range(max_iter + 1):
        gn = np.linalg.norm(g)
        if gn < tol:
            return x, it
        if it == max_iter:
            break
        J = 2.0 * (np.eye(3) - np.einsum("i,ij,ik->jk", w, x, x))
        c = -np.linalg.solve(J, g)
        cn = np.linalg.norm(c)
        if cn > 0.5:
            c *= 0.5 / cn
        for _ in range(60):
            x_new = hyperbolic_translation(x, c)
            g_new = np.einsum("i,ij->j", w, x_new)
            if np.linalg.norm(g_new) < gn:
                break
            c *= 0.5
        else:
            break
        x, g = x_new, g_new
    raise ConvergenceError(f"{what}: Möbius centring did not converge (|centre| = "
                           f"{np.linalg.norm(g):.3g} after {max_iter} steps, tolerance {tol:g}); "
                           "the area may be concentrated on one point of the map")
