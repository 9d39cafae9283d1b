"""Point-to-mesh distance against brute force and a closed form."""

import numpy as np
import pytest
import trimesh

from shapedesc import defaults
from shapedesc.mesh.distance import (closest_point_on_triangles, corresponding_mesh_distances,
                                     point_to_mesh_distance, symmetric_hausdorff)


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


def _trimesh_brute(points, vertices, faces):
    """Distance to every face with trimesh.triangles.closest_point (independent kernel)."""
    tri = np.asarray(vertices, float)[faces]
    out = np.empty(len(points))
    for i, p in enumerate(points):
        q = trimesh.triangles.closest_point(tri, np.repeat(p[None], len(tri), axis=0))
        out[i] = np.linalg.norm(q - p, axis=1).min()
    return out


def _bent_anisotropic(n_theta=24, n_z=60):
    """A bent tube whose triangles are 6:1 slivers, with caps: a closed surface whose
    face sizes and shapes vary strongly (worst case for centroid-based searches)."""
    th = np.linspace(0, 2 * np.pi, n_theta, endpoint=False)
    z = np.linspace(0, 1, n_z)
    T, Z = np.meshgrid(th, z)
    bend = 0.8 * Z ** 2
    x = (1 + 0.3 * np.cos(3 * T)) * np.cos(T) + 6 * bend
    y = (1 + 0.3 * np.cos(3 * T)) * np.sin(T)
    v = np.column_stack([x.ravel(), y.ravel(), 40 * Z.ravel()])
    idx = np.arange(n_theta * n_z).reshape(n_z, n_theta)
    f = []
    for i in range(n_z - 1):
        for j in range(n_theta):
            a, b = idx[i, j], idx[i, (j + 1) % n_theta]
            c, d = idx[i + 1, j], idx[i + 1, (j + 1) % n_theta]
            f += [[a, b, d], [a, d, c]]
    bottom, top = len(v), len(v) + 1
    v = np.vstack([v, v[idx[0]].mean(axis=0), v[idx[-1]].mean(axis=0)])
    for j in range(n_theta):
        f += [[idx[0, (j + 1) % n_theta], idx[0, j], bottom], [idx[-1, j], idx[-1, (j + 1) % n_theta], top]]
    return v, np.asarray(f)


@pytest.mark.parametrize("cell_factor", [0.3, 1.0, 4.0])
def test_exact_on_anisotropic_mesh_at_all_ranges(monkeypatch, cell_factor):
    # Source: trimesh.triangles.closest_point against every face (brute force).  The
    # cell size only changes speed; every search stage (own cell, neighbours, far-point
    # ball query) must give the exact minimum.  Points: on vertices, just off the surface,
    # inside, and up to 20 mm away.
    monkeypatch.setattr(defaults, "DISTANCE_CELL_FACTOR", cell_factor)
    v, f = _bent_anisotropic()
    rng = np.random.default_rng(3)
    near = v[rng.choice(len(v), 150)] + rng.normal(scale=0.02, size=(150, 3))
    far = v.mean(axis=0) + rng.normal(size=(60, 3)) * 15
    on = v[rng.choice(len(v), 20)]
    p = np.vstack([near, far, on])
    got = point_to_mesh_distance(p, v, f)
    # 1e-12 mm: both evaluate the same closest point in float64 on O(10 mm) coordinates.
    np.testing.assert_allclose(got, _trimesh_brute(p, v, f), rtol=0, atol=1e-12)


def test_corresponding_meshes_match_both_directions():
    # A surface and a perturbed copy with the same connectivity (a fitted reconstruction
    # stands in): distances A->B and the symmetric Hausdorff distance against the general
    # search and against trimesh brute force.
    v, f = _bent_anisotropic(16, 30)
    rng = np.random.default_rng(4)
    w = v + rng.normal(scale=0.05, size=v.shape)
    w[7] += [0.8, 0.0, 0.0]            # one outlier vertex sets the Hausdorff distance
    d_ab, haus = corresponding_mesh_distances(v, w, f)
    ref_ab = _trimesh_brute(v, w, f)
    ref_ba = _trimesh_brute(w, v, f)
    # 1e-12 mm: same closest points in float64 (see above).
    np.testing.assert_allclose(d_ab, ref_ab, rtol=0, atol=1e-12)
    assert abs(haus - max(ref_ab.max(), ref_ba.max())) < 1e-12
    assert abs(haus - symmetric_hausdorff(v, f, w, f)) < 1e-12
    with pytest.raises(ValueError, match="shape"):
        corresponding_mesh_distances(v, w[:-1], f)
