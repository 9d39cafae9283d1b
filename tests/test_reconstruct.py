"""Reconstruction on the correspondence icosphere."""

import math

import numpy as np
import pytest

from shapedesc.reconstruct import correspondence_sphere, reconstruct_values

Y1 = math.sqrt(3 / (4 * math.pi))  # real degree-1 harmonics are Y1·(y, z, x) (closed form)


def _sphere_coefficients(r, lmax=4):
    c = np.zeros(((lmax + 1) ** 2, 3))
    c[3, 0] = r / Y1  # x = r·u_x
    c[1, 1] = r / Y1  # y = r·u_y
    c[2, 2] = r / Y1  # z = r·u_z
    return c


@pytest.mark.parametrize("level", [0, 2, 4])
def test_icosphere_counts_and_determinism(level):
    v, f = correspondence_sphere(level)
    # 10·4^K + 2 vertices and 20·4^K faces for the K-times subdivided icosahedron
    # (closed form: Euler's formula with all vertices of degree 6 but 12 of degree 5).
    assert len(v) == 10 * 4**level + 2 and len(f) == 20 * 4**level
    np.testing.assert_allclose(np.linalg.norm(v, axis=1), 1.0, atol=1e-15)
    v2, f2 = correspondence_sphere(level)
    assert np.array_equal(v, v2) and np.array_equal(f, f2)


def test_sphere_coefficients_give_sphere():
    v, f = reconstruct_values(_sphere_coefficients(7.0), 4, level=3)
    u, _ = correspondence_sphere(3)
    # x = r u exactly: vertex k lands at r times icosphere vertex k (float64 round-off).
    np.testing.assert_allclose(v, 7.0 * u, atol=1e-12)


def test_truncation_and_smoothing():
    rng = np.random.default_rng(3)
    c = rng.normal(size=(36, 3))
    v_full, _ = reconstruct_values(c, 5, level=3)
    v_trunc, _ = reconstruct_values(c, 5, degree=2, level=3)
    c2 = c.copy()
    c2[9:] = 0
    v_ref, _ = reconstruct_values(c2, 5, level=3)
    np.testing.assert_allclose(v_trunc, v_ref, atol=1e-12)
    sigma = 0.01
    v_s, _ = reconstruct_values(c, 5, smoothing=sigma, level=3)
    l = np.repeat(np.arange(6), 2 * np.arange(6) + 1)
    v_ref2, _ = reconstruct_values(c * np.exp(-l * (l + 1) * sigma)[:, None], 5, level=3)
    # Heat kernel on the sphere: degree l decays as exp(-l(l+1)σ) (Chung et al. 2007).
    np.testing.assert_allclose(v_s, v_ref2, atol=1e-12)
    assert not np.allclose(v_full, v_s)


def test_bad_requests():
    c = _sphere_coefficients(1.0)
    with pytest.raises(ValueError, match="degree"):
        reconstruct_values(c, 4, degree=5)
    with pytest.raises(ValueError, match="level"):
        correspondence_sphere(9)
    with pytest.raises(ValueError, match="rows"):
        reconstruct_values(c[:10], 4)


@pytest.mark.parametrize("lmax", [15, 40])
def test_fast_measurement_surface_matches_dense_reconstruction(lmax):
    # describe measures fitted volume/area on a NUFFT-evaluated icosphere (ducc0
    # synthesis_general); the reference is the dense basis of reconstruct_values.
    from shapedesc.reconstruct import _measure_surface

    rng = np.random.default_rng(lmax)
    c = rng.normal(size=((lmax + 1) ** 2, 3)) + _sphere_coefficients(20.0, lmax)
    v_ref, f_ref = reconstruct_values(c, lmax, level=5)
    v, f = _measure_surface(c, lmax, 5)
    np.testing.assert_array_equal(f, f_ref)
    # 1e-12 relative: ducc0 is asked for SH_NUFFT_EPSILON = 2.5e-13 of the coefficients.
    assert np.abs(v - v_ref).max() <= 1e-12 * np.abs(v_ref).max()
