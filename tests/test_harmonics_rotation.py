"""Coefficient rotation against pointwise evaluation, re-analysis, ducc0 and closed forms."""

import numpy as np
import pytest
from scipy import special
from scipy.spatial.transform import Rotation

from shapedesc.harmonics import (SHCoefficients, degree_energy, euler_to_rotation_matrix,
                                 evaluate, gl_analysis, gl_grid, real_to_complex,
                                 rotate_coefficients, rotation_matrix_to_euler, wigner_small_d)
from shapedesc.harmonics.transforms import _healpy_to_real, _real_to_healpy


def _unit(n, seed):
    p = np.random.default_rng(seed).normal(size=(n, 3))
    return p / np.linalg.norm(p, axis=1)[:, None]


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_rotated_coefficients_evaluate_to_f_of_inverse_rotated_points(seed):
    # Definition g(x) = f(R^{-1} x), evaluated directly (R^{-1} = R^T; rows p @ R = (R^T p)^T).
    rng = np.random.default_rng(seed)
    lmax = 30
    c = rng.normal(size=((lmax + 1) ** 2, 3))
    R = Rotation.random(random_state=seed).as_matrix()
    p = _unit(300, seed + 10)
    g = evaluate(rotate_coefficients(c, lmax, R), lmax, p)
    f = evaluate(c, lmax, p @ R)
    # 1e-10 absolute (the bound) on values of size ~sqrt(Σc²/4π) ~ 9.
    np.testing.assert_allclose(g, f, atol=1e-10, rtol=0)
    # per-degree energy is invariant (Parseval; the D^l are unitary) — common practice
    e0, e1 = degree_energy(c, lmax), degree_energy(rotate_coefficients(c, lmax, R), lmax)
    np.testing.assert_allclose(e1, e0, rtol=1e-12)  # 1e-12: unitary maps in float64


def test_rotation_against_resample_and_reanalyse():
    # Independent route: sample f(R^{-1} x) on the Gauss-Legendre grid and analyse it with
    # ducc0.sht (exact for band-limited functions).
    rng = np.random.default_rng(7)
    lmax = 24
    c = rng.normal(size=((lmax + 1) ** 2, 2))
    R = Rotation.random(random_state=11).as_matrix()
    grid = gl_grid(lmax)
    samples = evaluate(c, lmax, grid.points @ R)
    ref = gl_analysis(samples, lmax).values
    # 1e-10: transform round trip in float64 (observed ~1e-13).
    np.testing.assert_allclose(rotate_coefficients(c, lmax, R), ref, atol=1e-10, rtol=0)


def test_rotation_against_ducc0_rotate_alm():
    # Source: ducc0.sht.rotate_alm (independent Wigner rotation), active z-y-z angles
    # (psi, theta, phi) = (γ, β, α) for R = R_z(α) R_y(β) R_z(γ).
    import ducc0

    rng = np.random.default_rng(3)
    lmax = 40
    c = rng.normal(size=(lmax + 1) ** 2)
    R = Rotation.random(random_state=5).as_matrix()
    a, b, g = rotation_matrix_to_euler(R)
    alm = ducc0.sht.rotate_alm(_real_to_healpy(c, lmax), lmax, g, b, a)
    # 1e-11: two float64 rotation algorithms at degree 40 (observed ~1e-14).
    np.testing.assert_allclose(rotate_coefficients(c, lmax, R), _healpy_to_real(alm, lmax),
                               atol=1e-11, rtol=0)


def test_wigner_d_closed_forms():
    # d^1 table (Varshalovich et al. 1988, Table 4.3, from memory), d^l_{00} = P_l(cos β)
    # and d^l_{m0}(β) = sqrt(4π/(2l+1)) Y_l^m(β, 0) (ibid. §4.17; Y from scipy.special).
    beta = 0.7
    cb, sb = np.cos(beta), np.sin(beta)
    d1 = wigner_small_d(1, beta)  # rows m' = -1, 0, 1; columns m
    expected = np.array([[(1 + cb) / 2, sb / np.sqrt(2), (1 - cb) / 2],
                         [-sb / np.sqrt(2), cb, sb / np.sqrt(2)],
                         [(1 - cb) / 2, -sb / np.sqrt(2), (1 + cb) / 2]])
    np.testing.assert_allclose(d1, expected, atol=1e-15)  # 1e-15: O(1) float64 entries
    l = 60
    d = wigner_small_d(l, beta)
    ms = np.arange(-l, l + 1)
    ref = np.sqrt(4 * np.pi / (2 * l + 1)) * special.sph_harm_y(l, ms, beta, 0.0).real
    # 1e-13: eigen-decomposition of a 121x121 tridiagonal matrix, entries <= 1.
    np.testing.assert_allclose(d[:, l], ref, atol=1e-13)
    assert d[l, l] == pytest.approx(special.eval_legendre(l, cb), abs=1e-13)
    # orthogonal (d is a real representation of a rotation) — common practice
    np.testing.assert_allclose(d @ d.T, np.eye(2 * l + 1), atol=1e-13)


def test_z_rotation_multiplies_complex_coefficients_by_phase():
    # f(R_z(-α) x) shifts the longitude by α: a_lm -> a_lm e^{-imα} (closed form).
    rng = np.random.default_rng(4)
    lmax = 12
    a = real_to_complex(rng.normal(size=(lmax + 1) ** 2), lmax)
    alpha = 0.9
    out = rotate_coefficients(a, lmax, euler_to_rotation_matrix(alpha, 0, 0), kind="complex")
    m = np.concatenate([np.arange(-l, l + 1) for l in range(lmax + 1)])
    np.testing.assert_allclose(out, a * np.exp(-1j * m * alpha), atol=1e-14)  # float64 phases


def test_composition_and_container_method():
    # Group property: rotating by R1 then R2 equals rotating by R2 R1 (common practice).
    rng = np.random.default_rng(8)
    lmax = 15
    c = SHCoefficients(rng.normal(size=((lmax + 1) ** 2, 3)), lmax)
    R1, R2 = Rotation.random(2, random_state=9).as_matrix()
    both = c.rotated(R1).rotated(R2)
    np.testing.assert_allclose(both.values, c.rotated(R2 @ R1).values, atol=1e-12)  # float64
    cc = c.to_complex()
    np.testing.assert_allclose(cc.rotated(R1).to_real().values, c.rotated(R1).values, atol=1e-12)
    np.testing.assert_allclose(both.energy_per_degree(), c.energy_per_degree(), rtol=1e-12)


@pytest.mark.parametrize("angles", [(0.3, 0.0, 0.2), (0.3, np.pi, -1.0), (1.0, 1e-9, 2.0),
                                    (-2.0, np.pi - 1e-9, 0.5), (0.1, 1.2, -3.0)])
def test_euler_round_trip_including_gimbal_poles(angles):
    R = euler_to_rotation_matrix(*angles)
    back = euler_to_rotation_matrix(*rotation_matrix_to_euler(R))
    # 1e-14: the angles must reproduce R to rounding even where α, γ are not unique.
    np.testing.assert_allclose(back, R, atol=1e-14)
    # coefficient rotation stays exact there too (pointwise check as above)
    lmax = 10
    c = np.random.default_rng(0).normal(size=(lmax + 1) ** 2)
    p = _unit(50, 1)
    np.testing.assert_allclose(evaluate(rotate_coefficients(c, lmax, R), lmax, p),
                               evaluate(c, lmax, p @ R), atol=1e-12)


def test_bad_rotations_are_refused():
    c = np.zeros(16)
    with pytest.raises(ValueError, match="reflection"):
        rotate_coefficients(c, 3, np.diag([1.0, 1.0, -1.0]))
    with pytest.raises(ValueError, match="not orthogonal"):
        rotate_coefficients(c, 3, np.eye(3) * 1.01)
    with pytest.raises(ValueError, match="3x3"):
        rotate_coefficients(c, 3, np.eye(2))
    with pytest.raises(ValueError, match="rows"):
        rotate_coefficients(np.zeros(15), 3, np.eye(3))
