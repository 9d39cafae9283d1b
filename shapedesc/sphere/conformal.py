"""Conformal initial map of a genus-0 surface onto the unit sphere.

Steps (Choi, Lam & Lui 2015, Algorithm 1 "north pole step" and "south pole step"):

1. Puncture the surface at its most regular triangle ``T`` (closest to equilateral)
   and solve one discrete Laplace equation, with a positive-weight (clamped cotangent)
   Laplacian, mapping the punctured disc into the plane with the three vertices of ``T``
   pinned to a triangle similar to ``T``. Both plane coordinates are solved with one
   real factorisation of the reduced matrix ``L_ff`` (two right-hand sides).
2. Centre and rescale the planar map so the images of the puncture and of the far
   side have similar size, then apply the inverse stereographic projection
   ``z ↦ (2 Re z, 2 Im z, |z|² − 1)/(1 + |z|²)`` (the puncture goes to the north pole).
3. Quasi-conformal pole correction: project stereographically from the south pole, fix
   the southernmost tenth of the vertices (where the map is already conformal), compute
   the Beltrami coefficient μ of the map from that plane back to the original surface,
   and solve the linear Beltrami solver (LBS, Lui et al. 2013) — again one real
   factorisation for both coordinates — which cancels the distortion that the pinned
   triangle left around the north pole. Then project back.

   For a piecewise-linear map the LBS operator ``∇·(A_μ ∇·)`` built from μ of the map
   plane → surface is *identical* to the cotangent Laplacian of the surface: per
   triangle ``A_μ = √det g · g⁻¹`` (both have unit determinant and encode the same
   conformal class of the pulled-back metric ``g``), and the Dirichlet energy is
   conformally invariant. (Checked to 1e-13 in ``tests/test_sphere_conformal.py``.) We
   therefore solve step 3 with the same clamped positive-weight Laplacian as step 1,
   which removes the folds the unclamped LBS matrix produced on obtuse meshes (6:1
   ellipsoid: 4–46 flipped triangles depending on the fixed share).

The positive weights make step 1 an embedding (Floater's theorem, see
:mod:`.laplacian`); stereographic projection preserves the orientation of every vertex
triple. In step 3 the boundary of the free region (the ring of fixed vertices) is
round but not guaranteed convex, so its result is used only if it flips no triangle;
otherwise the step-2 map is kept and the QC records that the correction was skipped.

References
----------
Choi, P. T., Lam, K. C. & Lui, L. M. (2015). FLASH: fast landmark aligned spherical
harmonic parameterization for genus-0 closed brain surfaces. *SIAM J. Imaging Sci.*
8(1), 67–94. doi:10.1137/130950008
Lui, L. M., Lam, K. C., Wong, T. W. & Gu, X. (2013). Texture map and video compression
using Beltrami representation. *SIAM J. Imaging Sci.* 6(4), 1880–1902.
doi:10.1137/120866129
Angenent, S., Haker, S., Tannenbaum, A. & Kikinis, R. (1999). On the Laplace–Beltrami
operator and brain surface flattening. *IEEE Trans. Med. Imaging* 18(8), 700–711.
doi:10.1109/42.796283
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ..defaults import SPHERE_POLE_FIXED_FRACTION
from .laplacian import clamped_cotangent_laplacian
from .linsolve import factorise
from .qc import sphere_face_det  # defined with the other QC measures; re-exported here

__all__ = ["ConformalResult", "conformal_sphere_map", "inverse_stereographic",
           "stereographic", "beltrami_coefficient", "sphere_face_det"]


@dataclass(frozen=True)
class ConformalResult:
    """Output of :func:`conformal_sphere_map`.

    Attributes
    ----------
    sphere_vertices : ndarray, shape (V, 3)
        Unit vectors.
    puncture_face : int
        Index of the face mapped around the north pole in step 1.
    flips_planar, flips_projected, flips_corrected : int
        Folded triangles of each step's output: after step 1 (in the plane, the puncture
        excluded), after step 2 (on the sphere) and after step 3 (on the sphere: the
        corrected map when it was kept, else the projected map it falls back to).
    pole_correction_used : bool
        Whether the step-3 result was kept (False when it would have flipped a triangle).
    pole_correction_trial_flips : int
        Folded triangles of the step-3 trial itself (> 0 exactly when it was discarded
        for flips). With the graph Laplacian of :mod:`.hierarchy` the correction is not
        the Beltrami solve it is for a cotangent Laplacian and is often discarded
        (measured: 326 and 548 trial flips on the 500- and 300-vertex coarse levels of a
        decimated MNI putamen); reporting those as the stage's flips made the coarse-map
        check refuse maps whose output had none.
    """

    sphere_vertices: np.ndarray
    puncture_face: int
    flips_planar: int
    flips_projected: int
    flips_corrected: int
    pole_correction_used: bool
    pole_correction_trial_flips: int = 0


def inverse_stereographic(z: np.ndarray) -> np.ndarray:
    """Inverse stereographic projection from the north pole, complex (n,) → unit (n, 3).

    ``z = x + iy ↦ (2x, 2y, |z|² − 1)/(1 + |z|²)``; 0 ↦ south pole, ∞ ↦ north pole.
    """
    r2 = (z * np.conj(z)).real
    d = 1.0 + r2
    return np.stack([2 * z.real / d, 2 * z.imag / d, (r2 - 1.0) / d], axis=1)


def stereographic(s: np.ndarray) -> np.ndarray:
    """Stereographic projection from the north pole, unit (n, 3) → complex (n,).

    Inverse of :func:`inverse_stereographic`: ``(x, y, z) ↦ (x + iy)/(1 − z)``.
    """
    return (s[:, 0] + 1j * s[:, 1]) / (1.0 - s[:, 2])


def _planar_det(p: np.ndarray, faces: np.ndarray) -> np.ndarray:
    a, b, c = (p[faces[:, k]] for k in range(3))
    return (b[:, 0] - a[:, 0]) * (c[:, 1] - a[:, 1]) - (b[:, 1] - a[:, 1]) * (c[:, 0] - a[:, 0])


def beltrami_coefficient(plane: np.ndarray, faces: np.ndarray, target: np.ndarray) -> np.ndarray:
    """Beltrami coefficient μ (per face, complex (F,)) of the piecewise-linear map plane → target.

    With the first fundamental form ``E, F, G`` of the target coordinates with respect to
    the plane coordinates (u, v), ``μ = (E − G + 2iF)/(E + G + 2√(EG − F²))``
    (Lui et al. 2013, eq. 2.4; |μ| < 1 for an orientation-preserving map).

    Parameters
    ----------
    plane : ndarray, shape (V, 2)
    faces : ndarray, shape (F, 3)
    target : ndarray, shape (V, 3)
    """
    a, b, c = (plane[faces[:, k]] for k in range(3))
    det = (b[:, 0] - a[:, 0]) * (c[:, 1] - a[:, 1]) - (b[:, 1] - a[:, 1]) * (c[:, 0] - a[:, 0])
    # gradients of the barycentric hat functions (rotated opposite edges / 2·area)
    grads = []
    for p, q in ((b, c), (c, a), (a, b)):
        grads.append(np.stack([p[:, 1] - q[:, 1], q[:, 0] - p[:, 0]], axis=1) / det[:, None])
    du = sum(g[:, 0:1] * target[faces[:, k]] for k, g in enumerate(grads))
    dv = sum(g[:, 1:2] * target[faces[:, k]] for k, g in enumerate(grads))
    E = np.einsum("ij,ij->i", du, du)
    G = np.einsum("ij,ij->i", dv, dv)
    F = np.einsum("ij,ij->i", du, dv)
    return (E - G + 2j * F) / (E + G + 2.0 * np.sqrt(np.maximum(E * G - F * F, 0.0)))


def _beltrami_stiffness(plane: np.ndarray, faces: np.ndarray, mu: np.ndarray) -> sp.csr_matrix:
    """Stiffness matrix of ``∇·(A_μ ∇u) = 0`` (the LBS operator, Lui et al. 2013, eq. 3.6)."""
    n = len(plane)
    m2 = np.abs(mu) ** 2
    rho, tau = mu.real, mu.imag
    a1 = ((1 - rho) ** 2 + tau**2) / (1 - m2)
    a2 = -2 * tau / (1 - m2)
    a3 = ((1 + rho) ** 2 + tau**2) / (1 - m2)
    p = [plane[faces[:, k]] for k in range(3)]
    area2 = np.abs(_planar_det(plane, faces))
    # rotated opposite edges: ∇φ_k = r_k / (2·area)
    r = []
    for k in range(3):
        q, s = p[(k + 1) % 3], p[(k + 2) % 3]
        r.append(np.stack([q[:, 1] - s[:, 1], s[:, 0] - q[:, 0]], axis=1))
    rows, cols, vals = [], [], []
    for i in range(3):
        for j in range(3):
            val = (a1 * r[i][:, 0] * r[j][:, 0] + a2 * (r[i][:, 0] * r[j][:, 1] + r[i][:, 1] * r[j][:, 0])
                   + a3 * r[i][:, 1] * r[j][:, 1]) / (2.0 * area2)
            rows.append(faces[:, i])
            cols.append(faces[:, j])
            vals.append(val)
    K = sp.coo_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                      shape=(n, n)).tocsr()
    K.sum_duplicates()
    return K


def _solve_with_fixed(K: sp.csr_matrix, fixed: np.ndarray, values: np.ndarray, *, what: str
                      ) -> np.ndarray:
    """Solve ``K x = 0`` on the free vertices with ``x[fixed] = values`` (all columns at once)."""
    n = K.shape[0]
    is_free = np.ones(n, dtype=bool)
    is_free[fixed] = False
    free = np.flatnonzero(is_free)
    K_ff = K[free][:, free]
    rhs = -(K[free][:, fixed] @ values)
    solve = factorise(K_ff, what=what)
    out = np.empty((n, values.shape[1]))
    out[fixed] = values
    out[free] = solve(rhs)
    return out


def _most_regular_face(vertices: np.ndarray, faces: np.ndarray) -> int:
    a, b, c = (vertices[faces[:, k]] for k in range(3))
    e = np.stack([np.linalg.norm(b - c, axis=1), np.linalg.norm(c - a, axis=1),
                  np.linalg.norm(a - b, axis=1)], axis=1)
    share = e / e.sum(axis=1, keepdims=True)
    return int(np.argmin(np.abs(share - 1.0 / 3.0).sum(axis=1)))  # first index on ties


def conformal_sphere_map(vertices: np.ndarray, faces: np.ndarray, *, source: str = "<memory>",
                         pole_fixed_fraction: float = SPHERE_POLE_FIXED_FRACTION,
                         laplacian: sp.spmatrix | None = None) -> ConformalResult:
    """Conformal map of a validated genus-0 mesh to the unit sphere (steps 1–3 above).

    Parameters
    ----------
    vertices : ndarray, shape (V, 3), float64
        Surface coordinates (mm); the result does not depend on the unit or on a rigid
        motion of the surface (only cotangents and length ratios enter).
    faces : ndarray, shape (F, 3), int64
        Outward-oriented faces of a closed genus-0 mesh (see :mod:`.topology`).
    source : str
        Surface name for error messages.
    pole_fixed_fraction : float
        Share of vertices fixed in the pole correction.
    laplacian : sparse matrix, shape (V, V), optional
        Positive-weight Laplacian (default: the clamped cotangent Laplacian of
        ``vertices``, which a caller that has already built it may pass). With other
        weights (the graph Laplacian of the coarse surface in :mod:`.hierarchy`) the map
        is the Tutte/Floater embedding with those weights, not a conformal map.

    Returns
    -------
    ConformalResult
    """
    n = len(vertices)
    L = (clamped_cotangent_laplacian(vertices, faces) if laplacian is None else
         sp.csr_matrix(laplacian)).tocsr()
    big = _most_regular_face(vertices, faces)
    p1, p2, p3 = (int(i) for i in faces[big])
    a = vertices[p2] - vertices[p1]
    b = vertices[p3] - vertices[p1]
    la, lb = np.linalg.norm(a), np.linalg.norm(b)
    cos_t = np.dot(a, b) / (la * lb)
    sin_t = np.linalg.norm(np.cross(a, b)) / (la * lb)
    # pin T to a similar triangle: p1 -> 0, p2 -> 1, p3 -> (lb/la) e^{iθ}
    fixed = np.array([p1, p2, p3])
    vals = np.array([[0.0, 0.0], [1.0, 0.0], [lb / la * cos_t, lb / la * sin_t]])
    xy = _solve_with_fixed(L, fixed, vals, what=f"{source}: conformal map (harmonic step)")
    # the disc lies inside the pinned triangle, so its faces run clockwise in the plane
    flips_planar = int(np.sum(np.delete(_planar_det(xy, faces), big) >= 0))
    z = xy[:, 0] + 1j * xy[:, 1]
    z = z - z.mean()
    # balance the sizes of the puncture (north) and of the innermost face (south);
    # Choi, Lam & Lui 2015, "optimal big triangle size"
    zf = z[faces]
    north = np.abs(zf[big] - np.roll(zf[big], 1)).mean()
    order = np.argsort(np.abs(zf).sum(axis=1), kind="stable")
    inner = int(order[0] if order[0] != big else order[1])
    s0 = inverse_stereographic(z)
    w = (s0[:, 0] + 1j * s0[:, 1]) / (1.0 + s0[:, 2])
    wf = w[faces[inner]]
    south = np.abs(wf - np.roll(wf, 1)).mean()
    z = z * np.sqrt(north * south) / north
    s = inverse_stereographic(z)
    flips_projected = int(np.sum(sphere_face_det(s, faces) <= 0))

    # south-pole step: quasi-conformal correction of the north (puncture) region
    order = np.argsort(s[:, 2], kind="stable")
    n_fix = min(n, max(int(round(pole_fixed_fraction * n)), 3))
    fix = np.sort(order[:n_fix])
    P = np.stack([s[:, 0] / (1.0 + s[:, 2]), s[:, 1] / (1.0 + s[:, 2])], axis=1)
    # LBS with μ of the map plane -> surface; its operator is exactly the cotangent
    # Laplacian of the surface (see module docstring), so the clamped L is reused here
    Q = _solve_with_fixed(L, fix, P[fix], what=f"{source}: conformal map (pole correction)")
    q = Q[:, 0] + 1j * Q[:, 1]
    r2 = (q * np.conj(q)).real
    s_corr = np.stack([2 * q.real / (1 + r2), 2 * q.imag / (1 + r2), (1 - r2) / (1 + r2)], axis=1)
    trial_flips = int(np.sum(sphere_face_det(s_corr, faces) <= 0))
    used = trial_flips == 0 and bool(np.all(np.isfinite(s_corr)))
    out = s_corr if used else s
    flips_corrected = 0 if used else flips_projected  # the stage's output is ``out``
    out = out / np.linalg.norm(out, axis=1, keepdims=True)
    return ConformalResult(out, big, flips_planar, flips_projected, flips_corrected, used,
                           trial_flips)
