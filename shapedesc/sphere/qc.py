"""Distortion and bijectivity measures of a sphere map.

Area distortion per face is ``log(sphere-area share / surface-area share)``, using the
exact spherical-triangle area (Van Oosterom & Strackee 1983: ``tan(Ω/2) =
det(a, b, c)/(1 + a·b + b·c + c·a)``) so the shares sum to one over the sphere; 0 means
area-preserving. Angle distortion is the mean absolute difference (degrees) between the
corner angles of each surface triangle and of its chordal image on the sphere. A face
is flipped when ``det(a, b, c) <= 0`` (clockwise seen from outside); a map with no
flipped face whose spherical areas sum to 4π has degree one and is a bijection.

References
----------
Van Oosterom, A. & Strackee, J. (1983). The solid angle of a plane triangle. *IEEE
Trans. Biomed. Eng.* BME-30(2), 125–126. doi:10.1109/TBME.1983.325207
"""

from __future__ import annotations

import numpy as np

from ..defaults import SPHERE_FLIP_DET

__all__ = ["spherical_triangle_areas", "corner_angles", "face_log_area_ratio",
           "angle_distortion_deg", "sphere_face_det", "count_flipped", "vertex_mean"]


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
    """Mean over the corners incident to each vertex of a (F, 3) per-corner value, shape (V,)."""
    s = np.bincount(faces.ravel(), weights=per_corner.ravel(), minlength=n_vertices)
    c = np.bincount(faces.ravel(), minlength=n_vertices)
    return s / np.maximum(c, 1)
