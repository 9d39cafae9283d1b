"""Gauss-Legendre grid and ducc0-based transforms against independent references."""

import numpy as np
import pytest
from scipy import special

from shapedesc.harmonics import SHCoefficients, basis, evaluate, gl_analysis, gl_grid, gl_synthesis


def test_grid_nodes_and_weights():
    # Source: scipy.special.roots_legendre (Gauss-Legendre nodes/weights on [-1, 1]); the
    # sphere weight of a node is its GL weight times 2π/nphi.  Weights sum to 4π.
    lmax = 32
    g = gl_grid(lmax)
    x, w = special.roots_legendre(lmax + 1)
    assert g.shape == (lmax + 1, 2 * lmax + 2)
    np.testing.assert_allclose(np.cos(g.theta), x[::-1], atol=1e-15)  # north to south
    # 1e-12 relative: scipy's own weights err by ~3e-13 near the ends (against mpmath, below)
    np.testing.assert_allclose(g.weights.reshape(g.shape)[:, 0], w[::-1] * 2 * np.pi / g.shape[1],
                               rtol=1e-12)
    assert g.weights.sum() == pytest.approx(4 * np.pi, rel=1e-14)
    np.testing.assert_allclose(np.linalg.norm(g.points, axis=1), 1.0, atol=1e-15)


def test_grid_weights_against_mpmath():
    # Source: mpmath, 40 digits: Newton-refined node t of P_n and w = 2/((1-t²) P_n'(t)²)
    # (Abramowitz & Stegun 25.4.29).  Our weights (from ducc0) must be accurate to 1e-15
    # relative, including the small end weights.
    mp = pytest.importorskip("mpmath")
    n = 33
    g = gl_grid(n - 1)
    z = np.cos(g.theta)
    ring_w = g.weights.reshape(g.shape)[:, 0] * g.shape[1] / (2 * np.pi)
    for i in (0, 1, 7, 16):
        with mp.workdps(40):
            t = mp.mpf(z[i])
            for _ in range(4):
                dp = n * (t * mp.legendre(n, t) - mp.legendre(n - 1, t)) / (t * t - 1)
                t = t - mp.legendre(n, t) / dp
            dp = n * (t * mp.legendre(n, t) - mp.legendre(n - 1, t)) / (t * t - 1)
            wref = float(2 / ((1 - t * t) * dp * dp))
        assert z[i] == pytest.approx(float(t), abs=1e-15)   # nodes to rounding
        assert ring_w[i] == pytest.approx(wref, rel=1e-15)  # weights to rounding


@pytest.mark.parametrize("lmax", [0, 1, 7, 40])
def test_analysis_recovers_band_limited_coefficients(lmax):
    # Exactness of GL quadrature for band-limited functions (common practice); the samples
    # come from our basis, itself checked against scipy.special.sph_harm_y.
    rng = np.random.default_rng(lmax)
    c = rng.normal(size=((lmax + 1) ** 2, 2))
    g = gl_grid(lmax)
    samples = evaluate(c, lmax, g.points)
    got = gl_analysis(samples, lmax)
    # 1e-12: ducc0 transform in float64 on O(1) coefficients (observed ~1e-14).
    np.testing.assert_allclose(got.values, c, atol=1e-12)
    np.testing.assert_allclose(gl_synthesis(got), samples, atol=1e-12)
    # the (ntheta, nphi, k) layout is accepted too
    np.testing.assert_allclose(gl_analysis(samples.reshape(*g.shape, 2), lmax).values, c, atol=1e-12)


def test_analysis_of_closed_form_functions():
    # ∫ z Y_1^0 dΩ: z = sqrt(4π/3) Y_1^0 (Y_1^0 = sqrt(3/4π) cos θ, Jackson §3.6), and
    # x = -sqrt(4π/3)(Y_1^1 - Y_1^{-1})/√2 -> real coefficient of order +1 is sqrt(4π/3).
    g = gl_grid(6)
    got = gl_analysis(g.points, 6).values  # channels x, y, z
    expected = np.zeros((49, 3))
    k = np.sqrt(4 * np.pi / 3)
    expected[3, 0] = k  # x  <-> (l=1, m=+1)
    expected[1, 1] = k  # y  <-> (l=1, m=-1)
    expected[2, 2] = k  # z  <-> (l=1, m=0)
    np.testing.assert_allclose(got, expected, atol=1e-14)  # float64 quadrature of O(1) values


def test_finer_grid_and_synthesis_of_complex_kind():
    rng = np.random.default_rng(9)
    lmax = 10
    c = SHCoefficients(rng.normal(size=(121, 1)), lmax)
    fine = gl_grid(25, nphi=61)
    vals = gl_synthesis(c, grid_lmax=25, nphi=61)
    np.testing.assert_allclose(vals, basis(lmax, fine.points) @ c.values, atol=1e-12)
    np.testing.assert_allclose(gl_synthesis(c.to_complex(), grid_lmax=25, nphi=61), vals, atol=1e-12)
    # analysis on the finer grid truncated to degree 10 is exact too
    np.testing.assert_allclose(gl_analysis(vals, lmax, grid_lmax=25, nphi=61).values, c.values,
                               atol=1e-12)


def test_transform_validation():
    with pytest.raises(ValueError, match="grid of degree"):
        gl_analysis(np.zeros(10), 3)
    with pytest.raises(ValueError, match="exceeds grid_lmax"):
        gl_analysis(np.zeros(4 * 8), 5, grid_lmax=3)
    with pytest.raises(ValueError, match="nphi"):
        gl_grid(5, nphi=10)
    with pytest.raises(ValueError, match="below"):
        gl_synthesis(np.zeros(16), lmax=3, grid_lmax=2)
