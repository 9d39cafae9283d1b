"""Synthetic test shapes (shapedesc.shapes) against closed forms and trimesh."""

from __future__ import annotations

import numpy as np
import pytest
import trimesh

from shapedesc.shapes import bent_tube, bumpy, ellipsoid, icosphere, n_vertices_for_frequency


@pytest.mark.parametrize("level,frequency", [(0, None), (3, None), (None, 7), (None, 45)])
def test_icosphere_counts_and_closedness(level, frequency):
    v, f = icosphere(level if level is not None else 0, frequency=frequency)
    n = frequency if frequency is not None else 2**level
    # Kenner (1976): a frequency-n geodesic icosahedron has 10 n² + 2 vertices, 20 n² faces
    assert len(v) == n_vertices_for_frequency(n) == 10 * n**2 + 2
    assert len(f) == 20 * n**2
    assert v.dtype == np.float64 and f.dtype == np.int64
    np.testing.assert_allclose(np.linalg.norm(v, axis=1), 1.0, atol=1e-15)  # unit vectors
    m = trimesh.Trimesh(v, f, process=False)
    # trimesh's own checks: closed, consistently wound, χ = 2, outward (positive volume)
    assert m.is_watertight and m.is_winding_consistent
    assert m.euler_number == 2
    assert m.volume > 0


def test_icosphere_area_converges_to_sphere():
    # closed form: unit sphere area 4π; inscribed mesh error O(h²) — level 5 (h ~ 0.03)
    # gives a relative deficit below 1e-3
    v, f = icosphere(5)
    area = trimesh.Trimesh(v, f, process=False).area
    assert 0 < 4 * np.pi - area < 1e-3 * 4 * np.pi


def test_ellipsoid_volume_closed_form():
    # closed form 4πabc/3; inscribed polyhedron at level 5 underestimates by O(h²) < 0.2 %
    v, f = ellipsoid(3.0, 2.0, 1.0, 5)
    vol = trimesh.Trimesh(v, f, process=False).volume
    exact = 4 * np.pi * 3 * 2 * 1 / 3
    assert 0 < exact - vol < 2e-3 * exact
    # natural parameterisation: vertex i = diag(a, b, c) · icosphere vertex i
    s, _ = icosphere(5)
    np.testing.assert_allclose(v, s * [3, 2, 1], rtol=0, atol=1e-14)


@pytest.mark.parametrize("make", [lambda: bent_tube(6.0, 1.0, np.pi / 2, 4),
                                  lambda: bent_tube(8.0, 1.0, 0.0, 4),
                                  lambda: bumpy(0.3, 4, 4)])
def test_deformed_shapes_are_closed_outward_genus0(make):
    v, f = make()
    m = trimesh.Trimesh(v, f, process=False)
    assert m.is_watertight and m.is_winding_consistent and m.euler_number == 2  # trimesh
    assert m.volume > 0  # outward orientation (divergence theorem, trimesh)
    assert len(m.split(only_watertight=False)) == 1  # one component (trimesh)
    # no self-intersection in practice: every face has positive area
    assert m.area_faces.min() > 0


def test_bent_tube_is_elongated():
    v, _ = bent_tube(6.0, 1.0, 0.0, 3)
    ext = v.max(axis=0) - v.min(axis=0)
    # straight tube along z: length 6, widest cross-section 2·1.25·max sqrt(1-z²)(1+z/4)
    assert ext[2] == pytest.approx(6.0, rel=1e-12)
    assert ext[2] / ext[0] > 2.4


def test_bad_parameters_refused():
    with pytest.raises(ValueError, match="semi-axis"):
        ellipsoid(-1.0, 1.0, 1.0, 2)
    with pytest.raises(ValueError, match="too tight"):
        bent_tube(2.0, 1.0, np.pi, 2)
    with pytest.raises(ValueError, match="amplitude"):
        bumpy(0.7, 3, 2)
