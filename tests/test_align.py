"""Canonical pose from the first-order ellipsoid (Brechbühler, Gerig & Kübler 1995)."""

import numpy as np
from scipy.spatial.transform import Rotation

from shapedesc.align import canonical_pose, degree1_matrix
from shapedesc.harmonics import SHCoefficients


def _values_with_degree1(a_matrix, lmax=3, seed=0):
    rng = np.random.default_rng(seed)
    vals = 0.01 * rng.normal(size=((lmax + 1) ** 2, 3))
    c = np.sqrt(3 / (4 * np.pi))  # real degree-1 harmonics are c·(y, z, x) (closed form)
    for j, idx in enumerate((3, 1, 2)):
        vals[idx] = a_matrix[:, j] / c
    return vals


def _pose(vals):
    pts = np.random.default_rng(1).normal(size=(500, 3))
    pts /= np.linalg.norm(pts, axis=1, keepdims=True)
    v = SHCoefficients(vals, 3, "real").evaluate(pts)
    return canonical_pose(vals, surface_vertices=v, surface_weights=np.full(500, 1 / 500),
                          scale_method="none", volume_mm3=1.0, area_mm2=1.0)


def test_rotations_proper_and_block_diagonal():
    r = Rotation.from_euler("xyz", [10, 50, -30], degrees=True).as_matrix()
    a = r @ np.diag([5.0, 3.0, 1.0]) @ Rotation.from_euler("z", 25, degrees=True).as_matrix().T
    p = _pose(_values_with_degree1(a))
    for m in (p.object_rotation, p.parameter_rotation):
        np.testing.assert_allclose(m @ m.T, np.eye(3), atol=1e-12)
        assert np.linalg.det(m) > 0
    block = p.object_rotation.T @ a @ p.parameter_rotation
    # U^T A V is the diagonal of semi-axes (SVD, Golub & Van Loan §2.4).
    np.testing.assert_allclose(block, np.diag([5.0, 3.0, 1.0]), atol=1e-10)
    np.testing.assert_allclose(p.ellipsoid_semi_axes_mm, [5.0, 3.0, 1.0], atol=1e-12)


def test_reversed_first_order_orientation_keeps_rotations_proper():
    a = np.diag([5.0, 3.0, -1.0])  # det A < 0
    p = _pose(_values_with_degree1(a))
    assert np.linalg.det(p.object_rotation) > 0 and np.linalg.det(p.parameter_rotation) > 0
    block = p.object_rotation.T @ a @ p.parameter_rotation
    np.testing.assert_allclose(np.abs(np.diag(block)), [5.0, 3.0, 1.0], atol=1e-10)
    assert np.linalg.det(block) < 0 and p.unstable
    assert any("reversed orientation" in w for w in p.warnings)
    # the parameter rotation is usable by the rotation code (it refuses reflections)
    SHCoefficients(_values_with_degree1(a), 3, "real").rotated(p.parameter_rotation.T)


def test_degree1_matrix_of_identity_map():
    vals = _values_with_degree1(np.eye(3) * 2.0)
    np.testing.assert_allclose(degree1_matrix(vals), np.eye(3) * 2.0, atol=1e-12)
