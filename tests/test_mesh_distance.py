"""Point-to-mesh distance against brute force and a closed form."""

import numpy as np
import trimesh

from shapedesc.mesh.distance import (closest_point_on_triangles, point_to_mesh_distance,
                                     symmetric_hausdorff)


def _brute(points, vertices, faces):
    tri = vertices[faces]
    out = []
    for p in points:
        P = np.repeat(p[None], len(faces), axis=0)
        q = closest_point_on_triangles(P, tri[:, 0], tri[:, 1], tri[:, 2])
        out.append(np.linalg.norm(P - q, axis=1).min())
    return np.array(out)


def test_closest_point_against_trimesh_on_one_triangle():
    # Source: trimesh.triangles.closest_point (independent implementation).
    rng = np.random.default_rng(0)
    tri = rng.normal(size=(1, 3, 3))
    p = rng.normal(size=(500, 3)) * 2
    ours = closest_point_on_triangles(p, *(np.repeat(tri[:, k], 500, axis=0) for k in range(3)))
    theirs = trimesh.triangles.closest_point(np.repeat(tri, 500, axis=0), p)
    # 1e-12: both are a handful of float64 operations on O(1) numbers.
    np.testing.assert_allclose(ours, theirs, atol=1e-12)


def test_distance_to_sphere_closed_form():
    # Closed form: distance from p to a sphere of radius r is | |p| - r |, up to the
    # polyhedral error of the icosphere (level 5: chord sagitta < 2e-3 r).
    m = trimesh.creation.icosphere(subdivisions=5, radius=10.0)
    rng = np.random.default_rng(1)
    p = rng.normal(size=(300, 3))
    p *= (rng.uniform(2, 20, 300) / np.linalg.norm(p, axis=1))[:, None]
    d = point_to_mesh_distance(p, m.vertices, m.faces)
    np.testing.assert_allclose(d, np.abs(np.linalg.norm(p, axis=1) - 10.0), atol=0.02)


def test_matches_brute_force():
    m = trimesh.creation.icosphere(subdivisions=2)
    v = m.vertices * [3.0, 1.0, 0.5]
    rng = np.random.default_rng(2)
    p = rng.normal(size=(60, 3)) * 2
    # Candidate search must agree exactly with examining every face.
    np.testing.assert_allclose(point_to_mesh_distance(p, v, m.faces), _brute(p, v, m.faces), atol=1e-12)


def test_hausdorff_of_scaled_spheres():
    a = trimesh.creation.icosphere(subdivisions=3, radius=5.0)
    b = trimesh.creation.icosphere(subdivisions=3, radius=5.5)
    # Same triangulation scaled: vertex-to-surface distance is 0.5 at the vertices
    # of the outer mesh... up to the facet sagitta (< 0.05 at level 3, radius 5).
    h = symmetric_hausdorff(a.vertices, a.faces, b.vertices, b.faces)
    assert 0.5 - 1e-9 <= h <= 0.55
