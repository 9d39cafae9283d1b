"""Point location on sphere maps and the inverse (pull-back) map."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

from shapedesc.errors import SphereMapError
from shapedesc.shapes import ellipsoid, icosphere
from shapedesc.sphere import locate_on_sphere, pull_back
from shapedesc.sphere.inverse import radial_barycentric


def _random_dirs(n, seed):
    p = np.random.default_rng(seed).normal(size=(n, 3))
    return p / np.linalg.norm(p, axis=1, keepdims=True)


def test_locate_matches_brute_force():
    s, f = icosphere(3)
    p = _random_dirs(500, 0)
    fi, w = locate_on_sphere(s, f, p)
    # brute force over all faces (common practice reference): exactly one face has all
    # radial barycentric coordinates >= 0 for a point off the edges
    a, b, c = (s[f[:, k]] for k in range(3))
    for i in range(0, 500, 25):
        ww = radial_barycentric(a, b, c, np.broadcast_to(p[i], a.shape))
        inside = np.flatnonzero((ww.min(axis=1) >= -1e-12) & ((a + b + c) @ p[i] > 0))
        assert fi[i] in inside
    # the coordinates reproduce the direction: Σ w_k x_k ∝ p (Cramer's rule)
    q = np.einsum("nk,nki->ni", w, s[f[fi]])
    np.testing.assert_allclose(q / np.linalg.norm(q, axis=1, keepdims=True), p, atol=1e-12)
    assert np.all(w >= 0) and np.allclose(w.sum(axis=1), 1)


def test_pull_back_exact_at_vertices_and_on_the_ellipsoid():
    v, f = ellipsoid(3, 2, 1, 4)
    s, _ = icosphere(4)
    natural = SimpleNamespace(sphere_vertices=s, faces=f)  # the natural parameterisation
    # exact at vertices (barycentric coordinates are unit vectors there)
    np.testing.assert_allclose(pull_back(natural, v, s), v, rtol=0, atol=1e-13)
    # between vertices the pull-back lies on the inscribed polyhedron: closed form
    # x²/a² + y²/b² + z²/c² = 1 holds to the chordal sag O(h²) (< 1 % at level 4)
    p = _random_dirs(2000, 1)
    x = pull_back(natural, v, p)
    q = (x**2 / np.array([9.0, 4.0, 1.0])).sum(axis=1)
    assert np.all(q <= 1 + 1e-12) and q.min() > 0.99


def test_pull_back_is_continuous():
    v, f = ellipsoid(3, 2, 1, 3)
    s, _ = icosphere(3)
    natural = SimpleNamespace(sphere_vertices=s, faces=f)
    # a great-circle path crossing many faces and edges, in steps of 1e-5 rad
    t = np.linspace(0, 2 * np.pi, 600_001)
    axis1, axis2 = np.array([1.0, 0.2, 0.3]), np.array([0.0, 1.0, -0.5])
    axis1 /= np.linalg.norm(axis1)
    axis2 -= axis1 * (axis1 @ axis2)
    axis2 /= np.linalg.norm(axis2)
    path = np.cos(t)[:, None] * axis1 + np.sin(t)[:, None] * axis2
    x = pull_back(natural, v, path)
    jumps = np.linalg.norm(np.diff(x, axis=0), axis=1)
    # Lipschitz bound: the PL map stretches lengths by at most ~ a/r_min ≈ 3·(level-3
    # face distortion) < 10, so a 1e-5 step moves < 1e-4; a discontinuity would jump by
    # a face size (~0.2)
    assert jumps.max() < 1e-4


def test_uncovered_point_is_reported():
    # a "map" that does not cover the sphere (faces around vertex 0 missing) cannot be
    # inverted there: reported, never answered with a wrong face
    s, f = icosphere(2)
    holed = f[~np.any(f == 0, axis=1)]
    with pytest.raises(SphereMapError, match="not bijective"):
        locate_on_sphere(s, holed, s[:1])


def test_bad_points_refused():
    s, f = icosphere(1)
    with pytest.raises(ValueError, match="shape"):
        locate_on_sphere(s, f, np.zeros(3))
    with pytest.raises(ValueError, match="non-zero"):
        locate_on_sphere(s, f, np.zeros((1, 3)))


def test_vertices_of_tiny_faces_are_located_despite_round_off():
    # a map vertex lies in each of its own faces (its radial coordinates there are a unit
    # vector, a fact of the construction); in floating point the zero coordinates come out
    # at a few ulps of the unnormalised triple product, i.e. ~1e-16/Σ after normalising,
    # which exceeds a fixed 1e-12 slack once Σ ~ 1e-5 (the smallest faces of a
    # 40,000-vertex hemisphere map; measured there). A 30 × 30 grid patch 1e-3 rad wide
    # (Σ ~ 1e-9) must still locate all of its own vertices, exactly.
    rng = np.random.default_rng(5)
    q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    u, v = np.meshgrid(np.linspace(0, 1e-3, 30), np.linspace(0, 1e-3, 30), indexing="ij")
    pts = q @ np.stack([u.ravel(), v.ravel(), np.ones(u.size)])
    x = (pts / np.linalg.norm(pts, axis=0)).T
    i = np.arange(29)[:, None] * 30 + np.arange(29)[None, :]
    i = i.ravel()
    f = np.concatenate([np.stack([i, i + 30, i + 31], 1), np.stack([i, i + 31, i + 1], 1)])
    if np.einsum("ij,ij->i", x[f[:, 0]], np.cross(x[f[:, 1]], x[f[:, 2]])).min() < 0:
        f = f[:, ::-1]
    fi, w = locate_on_sphere(x, f, x)  # a fixed 1e-12 slack missed 83 of the 900 (measured)
    own = f[fi] == np.arange(len(x))[:, None]
    assert np.all(own.any(axis=1))  # each vertex in one of its own faces
    # ... with weight 1 at its corner up to the coordinates' round-off, ~1e-16/Σ ≈ 1e-7
    # here (measured 4e-8; 1e-6 leaves a margin)
    assert w[own].min() > 1 - 1e-6
