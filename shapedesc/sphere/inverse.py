"""Point location on a sphere map and the inverse map back to the original surface.

Every face of a sphere map is the chordal triangle of three unit vectors; the map from
the surface triangle to the sphere is linear onto that chordal triangle followed by the
radial projection. A unit vector ``p`` therefore lies in face ``(a, b, c)`` iff the
*radial* barycentric coordinates

    w = (det(p, b, c), det(a, p, c), det(a, b, p)) / Σ

(Cramer's rule for ``p ∝ w_a a + w_b b + w_c c``) are all non-negative, and the same
coordinates applied to the original triangle give the inverse image. The inverse map is
then exact at vertices (``w`` is a unit vector there) and continuous across edges
(neighbouring faces agree on the shared edge), because it is piecewise linear.

Candidates come from a k-d tree on the normalised face centroids (scipy.spatial), tried
nearest first: the nearest alone, then the ``k`` nearest; the rare points not inside any
of those (very sheared faces) are retried with a larger ``k`` and finally against all
faces.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

from ..errors import SphereMapError

__all__ = ["locate_on_sphere", "pull_back", "radial_barycentric"]

_INSIDE_TOL = 1e-12  # barycentric slack for points on edges (round-off of unit vectors)
# ... plus this absolute slack on the unnormalised coordinates det(p, b, c), ...: a triple
# product of unit vectors is computed to a few ulps (~2e-16 each; 4e-15 is ~18 ulps), which
# on a small face (Σ ~ 1e-5 on a 40,000-vertex map) is more than _INSIDE_TOL after
# normalising — measured: a map vertex missed all three of its own faces at −1.8e-12
_DET_SLACK = 4e-15


def radial_barycentric(a: np.ndarray, b: np.ndarray, c: np.ndarray, p: np.ndarray) -> np.ndarray:
    """Radial barycentric coordinates of unit vectors ``p`` in chordal triangles ``(a, b, c)``.

    All arrays shape (..., 3); returns (..., 3) summing to 1 (not clipped).
    """
    return _radial_coordinates(a, b, c, p)[0]


def _radial_coordinates(a, b, c, p):
    """:func:`radial_barycentric` and the sum Σ of the unnormalised coordinates, (..., 1)."""
    wa = np.einsum("...i,...i->...", p, np.cross(b, c))
    wb = np.einsum("...i,...i->...", a, np.cross(p, c))
    wc = np.einsum("...i,...i->...", a, np.cross(b, p))
    w = np.stack([wa, wb, wc], axis=-1)
    s = w.sum(axis=-1, keepdims=True)
    return w / np.where(s == 0, 1.0, s), s


def locate_on_sphere(sphere_vertices: np.ndarray, faces: np.ndarray, points: np.ndarray, *,
                     k: int = 8) -> tuple[np.ndarray, np.ndarray]:
    """Face containing each point of the sphere, and its radial barycentric coordinates.

    Parameters
    ----------
    sphere_vertices : ndarray, shape (V, 3)
        Unit vectors of a bijective sphere map (every face positively oriented).
    faces : ndarray, shape (F, 3)
    points : ndarray, shape (n, 3)
        Query directions (normalised internally).
    k : int
        Nearest face centroids tried first.

    Returns
    -------
    face_index : ndarray, shape (n,), int64
    barycentric : ndarray, shape (n, 3), float64
        Non-negative, summing to 1; exact unit vectors at the map's vertices.
    """
    sv = np.asarray(sphere_vertices, dtype=np.float64)
    faces = np.asarray(faces, dtype=np.int64)
    pts = np.asarray(points, dtype=np.float64)
    if pts.ndim != 2 or pts.shape[1] != 3:
        raise ValueError(f"points must have shape (n, 3), got {pts.shape}")
    norms = np.linalg.norm(pts, axis=1, keepdims=True)
    if np.any(norms == 0) or not np.all(np.isfinite(norms)):
        raise ValueError("points must be finite and non-zero")
    pts = pts / norms
    cen = np.take(sv, faces, axis=0).mean(axis=1)  # (np.take: sv[faces], faster)
    cen /= np.linalg.norm(cen, axis=1, keepdims=True)
    tree = cKDTree(cen)
    n = len(pts)
    face_index = np.full(n, -1, dtype=np.int64)
    bary = np.zeros((n, 3))
    todo = np.arange(n)
    # the nearest centroid alone first (most points lie in that face; a k=1 query costs a
    # third of a k=8 one), then the k nearest: the first candidate that contains a point
    # is the same as when the k nearest are tried from the start
    kk = 1
    while len(todo):
        _, cand = tree.query(np.take(pts, todo, axis=0), k=kk)
        cand = cand.reshape(len(todo), kk)
        # try candidates column by column (nearest first) on the still-unresolved points
        left = np.arange(len(todo))
        for j in range(kk):
            if not len(left):
                break
            fc = cand[left, j]
            tri = np.take(faces, fc, axis=0)
            p = np.take(pts, todo[left], axis=0)
            a, b, c = (np.take(sv, tri[:, i], axis=0) for i in range(3))
            w, sw = _radial_coordinates(a, b, c, p)
            front = np.einsum("ij,ij->i", p, a + b + c) > 0
            slack = _INSIDE_TOL + _DET_SLACK / np.maximum(np.abs(sw[:, 0]), 1e-300)
            ok = (w.min(axis=1) >= -slack) & front
            face_index[todo[left[ok]]] = fc[ok]
            bary[todo[left[ok]]] = w[ok]
            left = left[~ok]
        todo = todo[left]
        if kk == len(faces):
            break
        kk = min(k if kk == 1 < k else kk * 4, len(faces))
    if len(todo):
        raise SphereMapError(f"{len(todo)} points could not be located on the sphere map; "
                             "the map is not bijective (folded faces)")
    bary = np.clip(bary, 0.0, None)
    bary /= bary.sum(axis=1, keepdims=True)
    return face_index, bary


def pull_back(sphere_map, surface_vertices: np.ndarray, points: np.ndarray) -> np.ndarray:
    """Original-surface positions (mm) of sphere points, via the inverse of a sphere map.

    Parameters
    ----------
    sphere_map : SphereMap
        Result of :func:`shapedesc.sphere.map_to_sphere` for this surface.
    surface_vertices : ndarray, shape (V, 3)
        The original surface's vertices (mm), same order as in the map.
    points : ndarray, shape (n, 3)
        Directions on the sphere.

    Returns
    -------
    ndarray, shape (n, 3)
        Positions on the original surface; exactly the original vertex when a point is a
        vertex of the map, continuous in ``points``.
    """
    sv = np.asarray(surface_vertices, dtype=np.float64)
    if sv.shape != sphere_map.sphere_vertices.shape:
        raise ValueError(f"surface_vertices shape {sv.shape} does not match the sphere map "
                         f"{sphere_map.sphere_vertices.shape}")
    fi, w = locate_on_sphere(sphere_map.sphere_vertices, sphere_map.faces, points)
    tri = sv[sphere_map.faces[fi]]
    return np.einsum("nk,nki->ni", w, tri)
