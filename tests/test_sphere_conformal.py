"""Conformal initial map, Laplacian, stereographic projection, Möbius centring."""

from __future__ import annotations

import numpy as np
import pytest
import trimesh

from shapedesc.mesh.measures import vertex_areas
from shapedesc.shapes import bent_tube, bumpy, ellipsoid, icosphere
from shapedesc.sphere import conformal as C
from shapedesc.sphere.laplacian import clamped_cotangent_laplacian, triangle_cotangents
from shapedesc.sphere.mobius import hyperbolic_translation, mobius_centre



def test_inverse_stereographic_closed_form():
    # closed form: z ↦ (2x, 2y, |z|²−1)/(1+|z|²); 0 → south pole, 1 → (1,0,0), i → (0,1,0)
    s = C.inverse_stereographic(np.array([0, 1, 1j, 2 + 0j]))
    np.testing.assert_allclose(s[:3], [[0, 0, -1], [1, 0, 0], [0, 1, 0]], atol=1e-15)
    np.testing.assert_allclose(s[3], [4 / 5, 0, 3 / 5], atol=1e-15)
    z = np.random.default_rng(1).normal(size=50) + 1j * np.random.default_rng(2).normal(size=50)
    np.testing.assert_allclose(C.stereographic(C.inverse_stereographic(z)), z, rtol=1e-12)


def test_cotangents_match_trimesh_angles():
    v, f = bumpy(0.3, 3, 3)
    ang = trimesh.Trimesh(v, f, process=False).face_angles  # trimesh, column k at faces[:, k]
    np.testing.assert_allclose(triangle_cotangents(v, f), 1 / np.tan(ang), rtol=1e-9, atol=1e-9)


def test_clamped_laplacian_is_positive_weight_and_exact_on_delaunay():
    v, f = ellipsoid(6, 1, 1, 3)  # stretched icosphere: many obtuse, non-Delaunay edges
    L = clamped_cotangent_laplacian(v, f).tocoo()
    off = L.row != L.col
    edges = trimesh.Trimesh(v, f, process=False).edges_unique  # trimesh's edge list
    assert off.sum() == 2 * len(edges)  # one entry per edge and direction
    assert L.data[off].max() < 0  # every edge weight strictly positive (Floater 2003)
    L = L.tocsr()
    np.testing.assert_allclose(np.asarray(L.sum(axis=1)).ravel(), 0, atol=1e-12)  # row sums
    assert abs(L - L.T).max() == 0
    # on the (Delaunay) unit icosphere nothing is clamped: equals the unclamped formula
    s, g = icosphere(3)
    np.testing.assert_allclose(clamped_cotangent_laplacian(s, g).toarray(),
                               clamped_cotangent_laplacian(s, g, clamp=-np.inf).toarray(),
                               atol=1e-15)


def test_lbs_operator_equals_cotangent_laplacian():
    # Lui et al. 2013: LBS operator ∇·(A_μ∇) with μ of the map plane→surface; for PL maps
    # it is the surface's cotangent Laplacian (scaled by 2 in our assembly); 1e-10 covers
    # round-off in μ and in A_μ = (…)/(1−|μ|²)
    v, f = bumpy(0.3, 4, 3)
    s = C.conformal_sphere_map(v, f).sphere_vertices
    P = np.stack([s[:, 0] / (1 + s[:, 2]), s[:, 1] / (1 + s[:, 2])], axis=1)
    mu = C.beltrami_coefficient(P, f, v)
    assert np.abs(mu).max() < 1  # orientation preserving
    K = C._beltrami_stiffness(P, f, mu)
    L = clamped_cotangent_laplacian(v, f, clamp=-np.inf)
    assert abs(K - L).max() < 1e-10 * abs(L).max()


@pytest.mark.parametrize("name,make", [
    ("sphere", lambda: icosphere(3)), ("ellipsoid 6:1", lambda: ellipsoid(6, 1, 1, 3)),
    ("bent tube", lambda: bent_tube(6, 1, np.pi / 2, 3)), ("bumpy", lambda: bumpy(0.3, 4, 3))])
def test_conformal_stages_do_not_flip(name, make):
    v, f = make()
    r = C.conformal_sphere_map(v, f, source=name)
    assert r.flips_planar == 0 and r.flips_projected == 0  # Floater 2003 + stereographic
    assert C.sphere_face_det(r.sphere_vertices, f).min() > 0
    np.testing.assert_allclose(np.linalg.norm(r.sphere_vertices, axis=1), 1, atol=1e-14)


def test_sphere_maps_to_rotation_of_itself(best_rotation):
    # a conformal automorphism of the sphere that is Möbius-centred is a rotation
    # (Baden, Crane & Kazhdan 2018, §4); discretisation on level 4 leaves < 1e-2 rad
    v, f = icosphere(4)
    s = C.conformal_sphere_map(v, f).sphere_vertices
    x, _ = mobius_centre(s, vertex_areas(v, f), what="sphere")
    R = best_rotation(v, x)
    err = np.arccos(np.clip(np.einsum("ij,ij->i", v @ R.T, x), -1, 1))
    assert err.max() < 1e-2


def test_hyperbolic_translation_is_a_sphere_automorphism():
    rng = np.random.default_rng(0)
    x = rng.normal(size=(200, 3))
    x /= np.linalg.norm(x, axis=1, keepdims=True)
    c = np.array([0.3, -0.2, 0.5])
    y = hyperbolic_translation(x, c)
    np.testing.assert_allclose(np.linalg.norm(y, axis=1), 1, atol=1e-14)
    # closed form: the point -c/|c| goes to ... f_c(-ĉ) = -ĉ (fixed points ±ĉ of the flow)
    chat = c / np.linalg.norm(c)
    np.testing.assert_allclose(hyperbolic_translation(np.array([chat, -chat]), c),
                               [chat, -chat], atol=1e-14)
    np.testing.assert_allclose(hyperbolic_translation(x, np.zeros(3)), x, atol=1e-15)


def test_mobius_centring_is_unique_up_to_rotation(best_rotation):
    # Baden et al. 2018 / Douady–Earle: the centred representative of a Möbius orbit is
    # unique up to rotation; re-centring a Möbius-moved map recovers it (Newton to 1e-12;
    # the residual rotation-fitted error is ~1e-10, 1e-8 leaves room for conditioning)
    v, f = bent_tube(6, 1, np.pi / 2, 3)
    w = vertex_areas(v, f)
    s = C.conformal_sphere_map(v, f).sphere_vertices
    x, _ = mobius_centre(s, w, what="tube")
    np.testing.assert_allclose(w @ x / w.sum(), 0, atol=1e-12)
    moved = hyperbolic_translation(x, np.array([0.4, 0.1, -0.3]))
    assert C.sphere_face_det(moved, f).min() > 0  # Möbius maps keep orientation
    y, _ = mobius_centre(moved, w, what="tube moved")
    R = best_rotation(x, y)
    # chord distance (arccos loses precision near 0)
    assert np.linalg.norm(x @ R.T - y, axis=1).max() < 1e-8
