"""Synthetic closed test shapes: sphere, ellipsoid, bent tube, bumpy (folded) sphere.

Invented, deterministic generators for tests, benchmarks and the demo study. Every
function returns ``(vertices, faces)``: ``vertices`` (V, 3) float64 in the caller's
unit (think millimetres), ``faces`` (F, 3) int64 ordered counter-clockwise seen from
outside (outward normals), one closed genus-0 component.

All shapes are built on a geodesic icosphere: each face of the regular icosahedron is
cut into ``n**2`` triangles (``n`` = ``2**level`` unless ``frequency`` is given) and the
points are projected radially onto the unit sphere, giving ``10 n**2 + 2`` vertices
(level 5: 10,242; level 7: 163,842). The other shapes deform that sphere, so vertex
``i`` of every shape sits over the same sphere point ``icosphere(...)[0][i]`` — the
shape's *natural parameterisation*, used by the tests as an outside reference.

References
----------
Kenner, H. (1976). *Geodesic Math and How to Use It*. University of California Press
(frequency-``n`` subdivision of the icosahedron, V = 10 n² + 2).
"""

from __future__ import annotations

import numpy as np

__all__ = ["icosphere", "ellipsoid", "bent_tube", "bumpy", "n_vertices_for_frequency"]


def _icosahedron() -> tuple[np.ndarray, np.ndarray]:
    t = (1.0 + 5.0**0.5) / 2.0
    v = np.array(
        [[-1, t, 0], [1, t, 0], [-1, -t, 0], [1, -t, 0],
         [0, -1, t], [0, 1, t], [0, -1, -t], [0, 1, -t],
         [t, 0, -1], [t, 0, 1], [-t, 0, -1], [-t, 0, 1]], dtype=np.float64)
    f = np.array(
        [[0, 11, 5], [0, 5, 1], [0, 1, 7], [0, 7, 10], [0, 10, 11],
         [1, 5, 9], [5, 11, 4], [11, 10, 2], [10, 7, 6], [7, 1, 8],
         [3, 9, 4], [3, 4, 2], [3, 2, 6], [3, 6, 8], [3, 8, 9],
         [4, 9, 5], [2, 4, 11], [6, 2, 10], [8, 6, 7], [9, 8, 1]], dtype=np.int64)
    return v / np.linalg.norm(v, axis=1, keepdims=True), f


def n_vertices_for_frequency(frequency: int) -> int:
    """Vertex count ``10 n² + 2`` of the frequency-``n`` geodesic icosphere."""
    return 10 * int(frequency) ** 2 + 2


def _frequency(level: int, frequency: int | None) -> int:
    if frequency is not None:
        n = int(frequency)
        if n < 1:
            raise ValueError(f"frequency must be >= 1, got {frequency!r}")
        return n
    if int(level) != level or level < 0 or level > 9:
        raise ValueError(f"level must be an integer in [0, 9], got {level!r}")
    return 2 ** int(level)


def icosphere(level: int = 4, *, frequency: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Geodesic unit sphere.

    Parameters
    ----------
    level : int
        Subdivision level; frequency ``2**level`` (V = 10·4**level + 2).
    frequency : int, optional
        Cut each icosahedron edge into this many segments instead (any n >= 1;
        n = 45 gives 20,252 vertices).

    Returns
    -------
    vertices : ndarray, shape (V, 3), float64
        Unit vectors.
    faces : ndarray, shape (F, 3), int64
        Outward (counter-clockwise seen from outside), F = 2V − 4.
    """
    n = _frequency(level, frequency)
    base_v, base_f = _icosahedron()
    # barycentric grid (i, j) with i + j <= n on every base face
    ii, jj = np.meshgrid(np.arange(n + 1), np.arange(n + 1), indexing="ij")
    keep = ii + jj <= n
    ii, jj = ii[keep], jj[keep]
    local = -np.ones((n + 1, n + 1), dtype=np.int64)
    local[ii, jj] = np.arange(len(ii))
    # local triangles: up (i,j),(i+1,j),(i,j+1); down (i+1,j),(i+1,j+1),(i,j+1)
    ui, uj = np.meshgrid(np.arange(n), np.arange(n), indexing="ij")
    m = ui + uj <= n - 1
    up = np.stack([local[ui[m], uj[m]], local[ui[m] + 1, uj[m]], local[ui[m], uj[m] + 1]], 1)
    m2 = ui + uj <= n - 2
    down = np.stack([local[ui[m2] + 1, uj[m2]], local[ui[m2] + 1, uj[m2] + 1],
                     local[ui[m2], uj[m2] + 1]], 1)
    tri_local = np.concatenate([up, down])
    w1, w2 = ii / n, jj / n
    w0 = 1.0 - w1 - w2
    pts, tris = [], []
    for k, (a, b, c) in enumerate(base_f):
        p = w0[:, None] * base_v[a] + w1[:, None] * base_v[b] + w2[:, None] * base_v[c]
        pts.append(p)
        tris.append(tri_local + k * len(ii))
    pts = np.concatenate(pts)
    tris = np.concatenate(tris)
    # merge the points shared by neighbouring base faces (exact grid positions; rounding
    # to 1e-9 of the unit sphere merges them and separates all distinct grid points)
    key = np.round(pts * 1e9).astype(np.int64)
    _, first, inverse = np.unique(key, axis=0, return_index=True, return_inverse=True)
    order = np.argsort(first)  # number vertices in order of first appearance
    rank = np.empty_like(order)
    rank[order] = np.arange(len(order))
    verts = pts[first[order]]
    faces = rank[inverse.reshape(-1)][tris]
    verts = verts / np.linalg.norm(verts, axis=1, keepdims=True)
    return np.ascontiguousarray(verts, dtype=np.float64), np.ascontiguousarray(faces, dtype=np.int64)


def ellipsoid(a: float = 3.0, b: float = 1.0, c: float = 1.0, level: int = 4, *,
              frequency: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Ellipsoid with semi-axes ``a, b, c`` along x, y, z: vertex = diag(a, b, c) · sphere point.

    Parameters
    ----------
    a, b, c : float
        Semi-axes (same unit as the output, e.g. mm); all > 0.
    level, frequency : see :func:`icosphere`.
    """
    for name, val in (("a", a), ("b", b), ("c", c)):
        if not (np.isfinite(val) and val > 0):
            raise ValueError(f"ellipsoid semi-axis {name} must be finite and > 0, got {val!r}")
    v, f = icosphere(level, frequency=frequency)
    return v * np.array([a, b, c], dtype=np.float64), f


def bent_tube(length: float = 6.0, radius: float = 1.0, bend: float = np.pi / 2, level: int = 4,
              *, frequency: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Elongated, tapered tube bent along a circular arc (hippocampus-like).

    The sphere point (x, y, z) goes to ``c(s) + r(z)·(x·N(s) + y·B(s))`` with
    ``s = z·length/2`` and ``r(z) = radius·(1 + 0.25 z)``; since x² + y² = 1 − z², the
    cross-section at arc length ``s`` is a circle of radius ``r(z)·sqrt(1 − z²)``
    (ellipsoid-like profile, thicker head, thinner tail), placed
    perpendicular to a centreline that is a circular arc of total turning angle ``bend``
    (radians) in the x–z plane. A straight tube when ``bend = 0``.

    Parameters
    ----------
    length : float
        Centreline length (> 2·radius·1.25 so the tube stays elongated).
    radius : float
        Largest cross-section radius scale (> 0).
    bend : float
        Total turning angle of the centreline in radians, in [0, π]; the arc radius
        ``length/bend`` must exceed the largest cross-section radius so the surface
        does not self-intersect.
    level, frequency : see :func:`icosphere`.
    """
    if not (length > 0 and radius > 0):
        raise ValueError(f"length and radius must be > 0, got {length!r}, {radius!r}")
    if not (0 <= bend <= np.pi):
        raise ValueError(f"bend must be in [0, pi] radians, got {bend!r}")
    if bend > 0 and length / bend <= 1.25 * radius:
        raise ValueError(
            f"bend {bend!r} too tight for length {length!r} and radius {radius!r}: "
            "the arc radius length/bend must exceed 1.25*radius")
    v, f = icosphere(level, frequency=frequency)
    x, y, z = v.T
    s = 0.5 * length * z
    r = radius * (1.0 + 0.25 * z)
    if bend == 0:
        centre = np.stack([np.zeros_like(s), np.zeros_like(s), s], 1)
        normal = np.tile([1.0, 0.0, 0.0], (len(s), 1))
    else:
        arc_r = length / bend
        ang = s / arc_r
        centre = np.stack([arc_r * (1 - np.cos(ang)), np.zeros_like(s), arc_r * np.sin(ang)], 1)
        normal = np.stack([np.cos(ang), np.zeros_like(s), -np.sin(ang)], 1)
    binormal = np.tile([0.0, 1.0, 0.0], (len(s), 1))
    out = centre + r[:, None] * (x[:, None] * normal + y[:, None] * binormal)
    # the frame (N, B, T) is right-handed with T along increasing z, so orientation is kept
    return np.ascontiguousarray(out), f


def bumpy(amplitude: float = 0.2, frequency: int = 4, level: int = 4, *,
          mesh_frequency: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Star-shaped folded sphere: radius ``1 + amplitude·g(p)`` over the unit sphere.

    ``g(p) = sin(k x) sin(k y) sin(k z)`` rescaled to [−1, 1] on the sphere points, with
    ``k = frequency·π/2`` giving about ``frequency`` folds across each axis, plus a
    milder second pattern ``cos(k' (x + y + z)/√3)`` (``k' = 1.5 k``) so the folds
    are not symmetric. Star-shaped (radius > 0 for amplitude < 0.5), hence genus 0.

    Parameters
    ----------
    amplitude : float
        Fold depth relative to the unit radius, in [0, 0.5).
    frequency : int
        Fold count scale (>= 1).
    level : int
        Mesh subdivision level (see :func:`icosphere`).
    mesh_frequency : int, optional
        Icosphere frequency instead of ``level`` (name differs from the fold ``frequency``).
    """
    if not (0 <= amplitude < 0.5):
        raise ValueError(f"amplitude must be in [0, 0.5), got {amplitude!r}")
    if int(frequency) != frequency or frequency < 1:
        raise ValueError(f"frequency must be an integer >= 1, got {frequency!r}")
    v, f = icosphere(level, frequency=mesh_frequency)
    k = frequency * np.pi / 2
    g = np.sin(k * v[:, 0]) * np.sin(k * v[:, 1]) * np.sin(k * v[:, 2])
    g = g + 0.5 * np.cos(1.5 * k * v.sum(axis=1) / np.sqrt(3.0))
    g = g / np.max(np.abs(g))
    return np.ascontiguousarray(v * (1.0 + amplitude * g)[:, None]), f
