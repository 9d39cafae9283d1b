"""Elementary measures of triangle meshes: areas, normals, volume, edges, Euler characteristic.

Pure functions over arrays; every stage that needs a measure takes it from here.
"""

from __future__ import annotations

import numpy as np


def face_normals_unnormalised(vertices: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """Cross products (b - a) x (c - a); length is twice the face area.

    Parameters
    ----------
    vertices : ndarray, shape (V, 3), float64
    faces : ndarray, shape (F, 3), int

    Returns
    -------
    ndarray, shape (F, 3)
    """
    a = vertices[faces[:, 0]]
    return np.cross(vertices[faces[:, 1]] - a, vertices[faces[:, 2]] - a)


def face_areas(vertices: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """Area of each triangle (mm² for vertices in mm), shape (F,)."""
    return 0.5 * np.linalg.norm(face_normals_unnormalised(vertices, faces), axis=1)


def face_normals(vertices: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """Unit normals (right-hand rule on the face's vertex order), shape (F, 3).

    Degenerate faces get a zero normal.
    """
    n = face_normals_unnormalised(vertices, faces)
    length = np.linalg.norm(n, axis=1, keepdims=True)
    return np.divide(n, length, out=np.zeros_like(n), where=length > 0)


def vertex_areas(vertices: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """Barycentric vertex areas: one third of the area of each incident face, shape (V,).

    They sum to the surface area; used as the per-vertex share of the original surface
    in weighted fits.
    """
    fa = face_areas(vertices, faces) / 3.0
    out = np.zeros(len(vertices))
    for k in range(3):
        out += np.bincount(faces[:, k], weights=fa, minlength=len(vertices))
    return out


def surface_area(vertices: np.ndarray, faces: np.ndarray) -> float:
    """Total area (mm²)."""
    return float(face_areas(vertices, faces).sum())


def enclosed_volume(vertices: np.ndarray, faces: np.ndarray) -> float:
    """Signed enclosed volume (mm³) by the divergence theorem.

    Positive for a closed surface whose faces are counter-clockwise seen from outside
    (outward normals). Computed relative to the centroid of the vertices to limit
    round-off for surfaces far from the origin.
    """
    c = vertices.mean(axis=0)
    a = vertices[faces[:, 0]] - c
    b = vertices[faces[:, 1]] - c
    d = vertices[faces[:, 2]] - c
    return float(np.einsum("ij,ij->i", a, np.cross(b, d)).sum() / 6.0)


def unique_edges(faces: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Undirected edges and how many faces use each.

    Returns
    -------
    edges : ndarray, shape (E, 2), int64
        Sorted vertex pairs (smaller index first), lexicographically ordered.
    counts : ndarray, shape (E,), int64
        Number of faces incident to each edge (2 on a closed manifold).
    """
    f = np.asarray(faces, dtype=np.int64)
    e = np.concatenate([f[:, [0, 1]], f[:, [1, 2]], f[:, [2, 0]]])
    lo = e.min(axis=1)
    hi = e.max(axis=1)
    base = int(hi.max()) + 1 if len(hi) else 1
    # One packed int64 key per edge: 1-D unique sorts far faster than unique(axis=0).
    keys, counts = np.unique(lo * base + hi, return_counts=True)
    edges = np.column_stack([keys // base, keys % base])
    return edges.astype(np.int64), counts.astype(np.int64)


def euler_characteristic(n_vertices: int, faces: np.ndarray) -> int:
    """χ = V − E + F, counting only vertices referenced by a face when ``n_vertices`` is None."""
    edges, _ = unique_edges(faces)
    return int(n_vertices - len(edges) + len(faces))


def solid_moments(vertices: np.ndarray, faces: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """Volume, centroid and covariance of the solid a closed, outward-oriented mesh bounds.

    Sums signed tetrahedra (reference point, a, b, c); for a tetrahedron with one vertex
    at the origin, ∫ x xᵀ dV = V/20 · (Σ_k v_k v_kᵀ + s sᵀ) with s = a + b + c
    (standard result for simplex moments; e.g. Tonon, J. Math. Stat. 1(1), 2004).

    Returns
    -------
    volume_mm3 : float
    centroid_mm : ndarray, shape (3,)
    covariance_mm2 : ndarray, shape (3, 3)
        Second central moment divided by volume; for a solid ellipsoid with semi-axes
        a, b, c it is diag(a², b², c²)/5.
    """
    ref = vertices.mean(axis=0)
    a = vertices[faces[:, 0]] - ref
    b = vertices[faces[:, 1]] - ref
    c = vertices[faces[:, 2]] - ref
    six_vol = np.einsum("ij,ij->i", a, np.cross(b, c))
    vol = six_vol / 6.0
    total = six_vol.sum() / 6.0  # the same expression as enclosed_volume: equal bit for bit
    s = a + b + c
    first = (vol[:, None] * s).sum(axis=0) / 4.0
    # Σ_t vol_t p_t p_tᵀ as (3, F) x (F, 3) matrix products (einsum over t is ~4x slower)
    w = vol[:, None]
    second = ((a * w).T @ a + (b * w).T @ b + (c * w).T @ c + (s * w).T @ s) / 20.0
    mu = first / total
    cov = second / total - np.outer(mu, mu)
    return float(total), mu + ref, cov
