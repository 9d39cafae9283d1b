"""Point-wise tests: normal displacement (closed form on spheres), per-vertex GLM vs
scipy.stats.ttest_ind, planted effect found with FWER control, GIFTI round trip (nibabel)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from shapedesc.errors import StatsInputError
from shapedesc.stats.vertexwise import (
    normal_displacement,
    vertex_normals,
    vertex_tests,
    write_surface_gifti,
    write_vertex_gifti,
)

trimesh = pytest.importorskip("trimesh")


def _sphere(level=3):
    m = trimesh.creation.icosphere(subdivisions=level)
    v = np.asarray(m.vertices, dtype=float)
    return v / np.linalg.norm(v, axis=1, keepdims=True), np.asarray(m.faces)


def test_vertex_normals_of_a_sphere_are_radial():
    u, f = _sphere(3)
    n = vertex_normals(10.0 * u, f)
    # closed form: the outward normal of a sphere is radial. The area-weighted normal of
    # a level-3 icosphere (edge ~0.15 rad) deviates from it by O(edge^2 / 2) ~ 1.1e-2
    # at the irregular vertices; 2e-2 bounds that
    assert np.abs(n - u).max() < 2e-2
    assert np.allclose(np.linalg.norm(n, axis=1), 1.0, atol=1e-12)


def test_normal_displacement_of_concentric_spheres():
    u, f = _sphere(2)
    radii = np.array([9.0, 10.0, 10.5, 12.5])
    verts = radii[:, None, None] * u[None]
    mean = verts.mean(0)
    d = normal_displacement(verts, mean, u)
    # closed form: along the radial normal, subject s sits r_s - mean(r) outside
    np.testing.assert_allclose(d, np.broadcast_to((radii - radii.mean())[:, None], d.shape),
                               atol=1e-12)
    with pytest.raises(StatsInputError, match="same V"):
        normal_displacement(verts, mean[:-1], u[:-1])


def _bulge_study(seed, n=40, effect=0.6):
    rng = np.random.default_rng(seed)
    u, f = _sphere(3)
    codes = np.arange(n) % 2
    radius = 10.0 + rng.normal(0, 0.3, size=(n, u.shape[0]))
    patch = u[:, 2] > 0.85
    radius[np.ix_(codes == 1, patch)] += effect
    verts = radius[:, :, None] * u[None]
    x = np.column_stack([np.ones(n), codes]).astype(float)
    return verts, f, x, codes, patch


def test_planted_bulge_is_found_and_fwer_holds():
    verts, f, x, codes, patch = _bulge_study(0)
    r = vertex_tests(verts, f, x, np.array([0.0, 1.0]), codes, ("A", "B"),
                     n_permutations=500, rng=1)
    # the per-vertex t equals Student's t of the displacements (scipy.stats.ttest_ind)
    ref = stats.ttest_ind(r.displacement[codes == 1], r.displacement[codes == 0], axis=0)
    np.testing.assert_allclose(r.test.statistic, ref.statistic, rtol=1e-10)
    # effect 0.6 mm vs noise 0.3 mm, 20 per group: t ~ 6, far past the max-t threshold
    assert np.mean(r.test.p_fwer[patch] < 0.05) > 0.9
    # outside the patch the FWER is 5 % for *any* false positive; allow < 1 % of vertices
    assert np.mean(r.test.p_fwer[~patch] < 0.05) < 0.01
    # group mean maps: B lies outside A on the patch by about the effect (0.6 mm);
    # 0.15 mm: SE of the difference of two 20-subject means of 0.3 mm noise is 0.095
    diff = r.group_means["B"] - r.group_means["A"]
    assert abs(diff[patch].mean() - 0.6) < 0.15
    assert abs(diff[~patch].mean()) < 0.05


def test_gifti_round_trip(tmp_path):
    nib = pytest.importorskip("nibabel")
    verts, f, x, codes, patch = _bulge_study(1, n=12)
    r = vertex_tests(verts, f, x, np.array([0.0, 1.0]), codes, ("A", "B"),
                     n_permutations=50, rng=2)
    path = tmp_path / "vertex_tests.gii"
    write_vertex_gifti(path, r)
    write_surface_gifti(tmp_path / "mean_surface.surf.gii", r.mean_vertices, r.faces)
    with pytest.raises(FileExistsError):
        write_vertex_gifti(path, r)
    img = nib.load(path)
    names = [da.meta["Name"] for da in img.darrays]
    assert names == ["t", "p_parametric", "p_perm", "p_fwer", "mean_displacement_mm[A]",
                     "mean_displacement_mm[B]"]
    # float32 storage: 1e-6 relative
    np.testing.assert_allclose(img.darrays[0].data, r.test.statistic, rtol=1e-6)
    surf = nib.load(tmp_path / "mean_surface.surf.gii")
    np.testing.assert_allclose(surf.darrays[0].data, r.mean_vertices, rtol=1e-6)
    assert np.array_equal(surf.darrays[1].data, r.faces)
