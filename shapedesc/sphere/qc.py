"""Distortion and bijectivity measures of a sphere map.

Area distortion per face is ``log(sphere-area share / surface-area share)``, using the
exact spherical-triangle area (Van Oosterom & Strackee 1983: ``tan(Ω/2) =
det(a, b, c)/(1 + a·b + b·c + c·a)``) so the shares sum to one over the sphere; 0 means
area-preserving. Angle distortion is the mean absolute difference (degrees) between the
corner angles of each surface triangle and of its chordal image on the sphere. Shear is
the anisotropy ``σ₁/σ₂ >= 1`` of the affine map from each surface triangle to its
chordal image (the ratio of the singular values of its 2×2 Jacobian in orthonormal
frames of the two triangle planes; 1 = the triangle keeps its shape up to scale). A face
is flipped when ``det(a, b, c) <= 0`` (clockwise seen from outside); a map with no
flipped face whose spherical areas sum to 4π has degree one and is a bijection.

References
----------
Hormann, K. & Greiner, G. (2000). MIPS: an efficient global parametrization method.
In *Curve and Surface Design: Saint-Malo 1999*, 153–162.
Van Oosterom, A. & Strackee, J. (1983). The solid angle of a plane triangle. *IEEE
Trans. Biomed. Eng.* BME-30(2), 125–126. doi:10.1109/TBME.1983.325207
"""

from __future__ import annotations

import numpy as np

from ..defaults import SPHERE_FLIP_DET
from ..mesh.measures import face_areas

__all__ = ["spherical_triangle_areas", "corner_angles", "face_log_area_ratio",
           "angle_distortion_deg", "shear_anisotropy", "sheared_area_share", "sphere_face_det",
           "count_flipped", "vertex_mean"]


def spherical_triangle_areas(sphere_vertices: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """Signed solid angle (steradian) of each geodesic triangle, shape (F,)."""
    a, b, c = (sphere_vertices[faces[:, k]] for k in range(3))
    num = np.einsum("ij,ij->i", a, np.cross(b, c))
    den = (1.0 + np.einsum("ij,ij->i", a, b) + np.einsum("ij,ij->i", b, c)
           + np.einsum("ij,ij->i", c, a))
    return 2.0 * np.arctan2(num, den)


def corner_angles(vertices: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """Corner angles (radians) of each triangle, shape (F, 3); column k at ``faces[:, k]``."""
    out = np.empty((len(faces), 3))
    for k in range(3):
        p = vertices[faces[:, k]]
        u = vertices[faces[:, (k + 1) % 3]] - p
        w = vertices[faces[:, (k + 2) % 3]] - p
        out[:, k] = np.arctan2(np.linalg.norm(np.cross(u, w), axis=1), np.einsum("ij,ij->i", u, w))
    return out


def face_log_area_ratio(surface_vertices, sphere_vertices, faces) -> np.ndarray:
    """``log(sphere-area share / surface-area share)`` per face, shape (F,)."""
    a = sphere_vertices[faces]
    s = spherical_triangle_areas(sphere_vertices, faces)
    p = surface_vertices[faces]
    A = 0.5 * np.linalg.norm(np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), axis=1)
    del a
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.log((s / s.sum()) / (A / A.sum()))


def angle_distortion_deg(surface_vertices, sphere_vertices, faces) -> np.ndarray:
    """Absolute corner-angle change (degrees), shape (F, 3)."""
    return np.degrees(np.abs(corner_angles(sphere_vertices, faces)
                             - corner_angles(surface_vertices, faces)))


def _plane_coordinates(p: np.ndarray) -> np.ndarray:
    """Edge vectors ``p1 − p0, p2 − p0`` of triangles ``p`` (F, 3, 3) in an orthonormal
    frame of each triangle's plane, as the columns of (F, 2, 2) matrices."""
    e1, e2 = p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]
    n1 = np.linalg.norm(e1, axis=1)
    u = e1 / np.where(n1 > 0, n1, 1.0)[:, None]
    w = e2 - np.einsum("ij,ij->i", e2, u)[:, None] * u
    nw = np.linalg.norm(w, axis=1)
    w = w / np.where(nw > 0, nw, 1.0)[:, None]
    out = np.empty((len(p), 2, 2))
    out[:, 0, 0], out[:, 1, 0] = n1, 0.0
    out[:, 0, 1], out[:, 1, 1] = np.einsum("ij,ij->i", e2, u), np.einsum("ij,ij->i", e2, w)
    return out


def shear_anisotropy(surface_vertices, sphere_vertices, faces) -> np.ndarray:
    """Anisotropy ``σ₁/σ₂`` of the affine map from each surface triangle to its chordal
    image on the sphere, shape (F,); ``inf`` for a degenerate triangle.

    With ``J = S·P⁻¹`` (``P``, ``S``: edge vectors of the surface and sphere triangles in
    orthonormal frames of their planes), ``‖J‖²_F = σ₁² + σ₂²`` and ``|det J| = σ₁σ₂``,
    so ``σ₁/σ₂ = k + sqrt(k² − 1)`` with ``k = ‖J‖²_F / (2|det J|)`` — the MIPS
    distortion of Hormann & Greiner (2000), which the area correction penalises. A
    circle on the surface becomes an ellipse with this axis ratio.
    """
    faces = np.asarray(faces)
    P = _plane_coordinates(np.asarray(surface_vertices, dtype=np.float64)[faces])
    S = _plane_coordinates(np.asarray(sphere_vertices, dtype=np.float64)[faces])
    # J = S P⁻¹ with P⁻¹ = adj(P)/det(P)
    detP = P[:, 0, 0] * P[:, 1, 1] - P[:, 0, 1] * P[:, 1, 0]
    adj = np.empty_like(P)
    adj[:, 0, 0], adj[:, 1, 1] = P[:, 1, 1], P[:, 0, 0]
    adj[:, 0, 1], adj[:, 1, 0] = -P[:, 0, 1], -P[:, 1, 0]
    J = np.einsum("fij,fjk->fik", S, adj)  # det(P)·J: the ratio does not depend on the scale
    fro = np.einsum("fij,fij->f", J, J)
    det = np.abs(J[:, 0, 0] * J[:, 1, 1] - J[:, 0, 1] * J[:, 1, 0])
    with np.errstate(divide="ignore", invalid="ignore"):
        k = fro / (2.0 * det)
        out = k + np.sqrt(np.maximum(k * k - 1.0, 0.0))
    out[~((det > 0) & (np.abs(detP) > 0))] = np.inf
    return out


def sheared_area_share(surface_vertices, faces, anisotropy: np.ndarray,
                       threshold: float) -> float:
    """Share of the surface area (0–1) in faces whose ``anisotropy`` (F,) exceeds
    ``threshold``."""
    A = face_areas(np.asarray(surface_vertices, dtype=np.float64), np.asarray(faces))
    return float(A[anisotropy > threshold].sum() / A.sum())


def sphere_face_det(sphere_vertices: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """Orientation ``det(a, b, c) = a · (b × c)`` of every face on the sphere, shape (F,).

    Positive when the triangle is counter-clockwise seen from outside; a Möbius map or a
    stereographic projection preserves its sign.
    """
    a, b, c = (sphere_vertices[faces[:, k]] for k in range(3))
    return np.einsum("ij,ij->i", a, np.cross(b, c))


def count_flipped(sphere_vertices: np.ndarray, faces: np.ndarray) -> int:
    """Faces with ``det(a, b, c) <= SPHERE_FLIP_DET`` (clockwise seen from outside)."""
    return int(np.sum(sphere_face_det(sphere_vertices, faces) <= SPHERE_FLIP_DET))


def vertex_mean(faces: np.ndarray, per_corner: np.ndarray, n_vertices: int) -> np.ndarray:
    """Mean over the corners incident to each vertex of a (F, 3) per-corner value, shape (V,).

    Non-finite corner values (e.g. the shear of a degenerate surface triangle, ``inf``)
    are left out; a vertex with no finite value gets NaN (one without corners, 0).
    """
    ok = np.isfinite(per_corner).ravel()
    s = np.bincount(faces.ravel(), weights=np.where(ok, per_corner.ravel(), 0.0),
                    minlength=n_vertices)
    c = np.bincount(faces.ravel(), weights=ok.astype(np.float64), minlength=n_vertices)
    n = np.bincount(faces.ravel(), minlength=n_vertices)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n > 0, s / c, 0.0)
